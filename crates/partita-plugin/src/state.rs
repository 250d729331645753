//! The saved state: our own small binary format, versioned, read back exactly.
//!
//! ```text
//! magic        8 bytes  "PTTACLAP"
//! version      u32 LE   STATE_VERSION; a reader refuses a newer one
//! param count  u32 LE   then per parameter: id u32 LE, value f64 LE (unknown ids are skipped on load)
//! source       u8       0 built-in space (the parameters say which), 1 WAV file
//! -- file only --
//! path         u32 LE byte length, UTF-8 path (as the saving machine wrote it)
//! embedded     u8       0 none, 1 the file's samples follow:
//!   rate u32 LE, channels u32 LE, frames u64 LE, then channels x frames f32 LE, channel after channel
//! ```
//!
//! The file's index in the IR folder is never stored (folders differ between machines): the path is, and
//! in a project save the samples as read from the file, so the project sounds the same where the file is
//! missing. All integers little-endian.

use std::fmt;
use std::path::PathBuf;

use partita_io::Audio;

/// First bytes of every state.
pub const STATE_MAGIC: [u8; 8] = *b"PTTACLAP";

/// The format this build writes; it reads this one and every older one.
pub const STATE_VERSION: u32 = 1;

/// The largest embedded IR accepted on load, in samples over all channels (the size partita-io accepts
/// from a WAV file: 2^24 frames, times 4 channels).
const MAX_EMBEDDED_SAMPLES: u64 = 4 << 24;

/// A state as saved or loaded.
#[derive(Debug, Clone, PartialEq)]
pub struct SavedState {
    /// (parameter id, value) pairs.
    pub params: Vec<(u32, f64)>,
    /// The WAV source, when the IR comes from a file.
    pub file: Option<SavedFile>,
}

/// A WAV source in a state.
#[derive(Debug, Clone, PartialEq)]
pub struct SavedFile {
    /// The file's path.
    pub path: PathBuf,
    /// Its samples as read from the file, when embedded (project saves).
    pub audio: Option<Audio>,
}

/// Why a state cannot be loaded.
#[derive(Debug, Clone, PartialEq)]
pub enum StateError {
    /// Not a state of this plugin.
    NotOurs,
    /// Saved by a newer version of the plugin, whose format this one cannot read.
    Newer {
        /// The state's format version.
        version: u32,
    },
    /// The data ends early or holds an impossible value.
    Corrupt {
        /// What was being read.
        what: &'static str,
    },
}

impl fmt::Display for StateError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::NotOurs => write!(f, "this state was not saved by the Partita convolution plugin"),
            Self::Newer { version } => write!(
                f,
                "this state was saved by a newer Partita plugin (state format {version}; this one reads up to \
                 {STATE_VERSION}): update the plugin to load it"
            ),
            Self::Corrupt { what } => write!(f, "the saved state is damaged ({what})"),
        }
    }
}

impl std::error::Error for StateError {}

impl SavedState {
    /// The state as bytes. Allocates.
    pub fn encode(&self) -> Vec<u8> {
        let mut out = Vec::new();
        out.extend_from_slice(&STATE_MAGIC);
        out.extend_from_slice(&STATE_VERSION.to_le_bytes());
        out.extend_from_slice(&(self.params.len() as u32).to_le_bytes());
        for (id, v) in &self.params {
            out.extend_from_slice(&id.to_le_bytes());
            out.extend_from_slice(&v.to_le_bytes());
        }
        match &self.file {
            None => out.push(0),
            Some(file) => {
                out.push(1);
                let path = file.path.to_string_lossy();
                out.extend_from_slice(&(path.len() as u32).to_le_bytes());
                out.extend_from_slice(path.as_bytes());
                match &file.audio {
                    None => out.push(0),
                    Some(audio) => {
                        out.push(1);
                        out.extend_from_slice(&audio.sample_rate_hz.to_le_bytes());
                        out.extend_from_slice(&(audio.channel_count() as u32).to_le_bytes());
                        out.extend_from_slice(&(audio.frames() as u64).to_le_bytes());
                        for ch in &audio.channels {
                            for s in ch {
                                out.extend_from_slice(&s.to_le_bytes());
                            }
                        }
                    }
                }
            }
        }
        out
    }

    /// Reads a state. Allocates.
    ///
    /// # Errors
    /// [`StateError::NotOurs`] without our magic, [`StateError::Newer`] for a newer format,
    /// [`StateError::Corrupt`] for short or impossible data.
    pub fn decode(bytes: &[u8]) -> Result<Self, StateError> {
        let mut r = Reader { bytes, at: 0 };
        if r.take(8, "magic").ok() != Some(&STATE_MAGIC[..]) {
            return Err(StateError::NotOurs);
        }
        let version = r.u32("version")?;
        if version > STATE_VERSION {
            return Err(StateError::Newer { version });
        }
        if version == 0 {
            return Err(StateError::Corrupt { what: "version 0" });
        }
        let count = r.u32("parameter count")?;
        if count > 1024 {
            return Err(StateError::Corrupt { what: "parameter count" });
        }
        let mut params = Vec::with_capacity(count as usize);
        for _ in 0..count {
            params.push((r.u32("parameter id")?, f64::from_le_bytes(r.array("parameter value")?)));
        }
        let file = match r.u8("source")? {
            0 => None,
            1 => {
                let len = r.u32("path length")? as usize;
                let path =
                    std::str::from_utf8(r.take(len, "path")?).map_err(|_| StateError::Corrupt { what: "path" })?.into();
                let audio = match r.u8("embedded flag")? {
                    0 => None,
                    1 => {
                        let rate = r.u32("sample rate")?;
                        let channels = r.u32("channels")? as u64;
                        let frames = u64::from_le_bytes(r.array("frames")?);
                        if !(1..=4).contains(&channels)
                            || frames == 0
                            // Divided, not multiplied: a damaged frame count may be near u64::MAX.
                            || frames > MAX_EMBEDDED_SAMPLES / channels
                            || rate == 0
                        {
                            return Err(StateError::Corrupt { what: "embedded IR size" });
                        }
                        let data = r.take((channels * frames * 4) as usize, "embedded samples")?;
                        let mut planar = Vec::with_capacity(channels as usize);
                        for c in data.chunks_exact(frames as usize * 4) {
                            let ch: Vec<f32> =
                                c.chunks_exact(4).map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]])).collect();
                            if ch.iter().any(|s| !s.is_finite()) {
                                return Err(StateError::Corrupt { what: "embedded samples" });
                            }
                            planar.push(ch);
                        }
                        Some(Audio::new(planar, rate))
                    }
                    _ => return Err(StateError::Corrupt { what: "embedded flag" }),
                };
                Some(SavedFile { path, audio })
            }
            _ => return Err(StateError::Corrupt { what: "source" }),
        };
        if r.at != bytes.len() {
            return Err(StateError::Corrupt { what: "trailing bytes" });
        }
        Ok(Self { params, file })
    }
}

struct Reader<'a> {
    bytes: &'a [u8],
    at: usize,
}

impl<'a> Reader<'a> {
    fn take(&mut self, n: usize, what: &'static str) -> Result<&'a [u8], StateError> {
        let end = self.at.checked_add(n).filter(|&e| e <= self.bytes.len()).ok_or(StateError::Corrupt { what })?;
        let s = &self.bytes[self.at..end];
        self.at = end;
        Ok(s)
    }

    fn array<const N: usize>(&mut self, what: &'static str) -> Result<[u8; N], StateError> {
        Ok(self.take(N, what)?.try_into().expect("N bytes"))
    }

    fn u32(&mut self, what: &'static str) -> Result<u32, StateError> {
        Ok(u32::from_le_bytes(self.array(what)?))
    }

    fn u8(&mut self, what: &'static str) -> Result<u8, StateError> {
        Ok(self.take(1, what)?[0])
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn sample() -> SavedState {
        SavedState {
            params: vec![(0, 30.0), (3, -6.5)],
            file: Some(SavedFile {
                path: PathBuf::from("/irs/hall.wav"),
                audio: Some(Audio::new(vec![vec![1.0, -0.5], vec![0.25, 0.125]], 44_100)),
            }),
        }
    }

    #[test]
    fn states_round_trip_exactly() {
        let s = sample();
        assert_eq!(SavedState::decode(&s.encode()).unwrap(), s);
        let plain = SavedState { params: vec![(1, 100.0)], file: None };
        assert_eq!(SavedState::decode(&plain.encode()).unwrap(), plain);
    }

    #[test]
    fn newer_foreign_and_damaged_states_are_refused() {
        let mut bytes = sample().encode();
        bytes[8..12].copy_from_slice(&(STATE_VERSION + 1).to_le_bytes());
        let err = SavedState::decode(&bytes).unwrap_err();
        assert_eq!(err, StateError::Newer { version: STATE_VERSION + 1 });
        assert!(err.to_string().contains("newer Partita plugin"), "{err}");
        assert_eq!(SavedState::decode(b"RIFF....WAVE"), Err(StateError::NotOurs));
        let good = sample().encode();
        // A frame count whose product with the channel count overflows (found by the plugin_state fuzz
        // target: it panicked in the size check).
        let mut huge = STATE_MAGIC.to_vec();
        huge.extend_from_slice(&STATE_VERSION.to_le_bytes());
        huge.extend_from_slice(&0u32.to_le_bytes());
        huge.extend_from_slice(&[1, 1, 0, 0, 0, b'a', 1]);
        huge.extend_from_slice(&48_000u32.to_le_bytes());
        huge.extend_from_slice(&4u32.to_le_bytes());
        huge.extend_from_slice(&(u64::MAX / 2).to_le_bytes());
        assert_eq!(SavedState::decode(&huge), Err(StateError::Corrupt { what: "embedded IR size" }));
        for cut in [10, 20, good.len() - 1] {
            assert!(matches!(SavedState::decode(&good[..cut]), Err(StateError::Corrupt { .. })), "cut at {cut}");
        }
    }
}
