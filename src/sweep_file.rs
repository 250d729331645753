//! The sweep sidecar: a small JSON file (our own format) beside a sweep WAV written by `partita sweep`, holding
//! the sweep's parameters, the generator's version and a hash of the samples, so a recording made with any
//! playback gear can be deconvolved later (`partita deconvolve REC.wav --sweep SWEEP.json`).
//!
//! The hash is FNV-1a 64 over the little-endian bytes of the f32 sweep samples, silence included
//! ([`partita_room::sweep::fnv1a64_f32`]), written as 16 hex digits. `deconvolve` regenerates the sweep from the
//! parameters and refuses the sidecar when the hash differs: the parameters were edited, or another generator
//! version (or platform maths library) makes other samples.
//!
//! ```json
//! {
//!   "format": "partita-sweep",
//!   "format_version": 1,
//!   "generator": "partita 0.1.0",
//!   "generator_version": 1,
//!   "kind": "synchronized",
//!   "sample_rate_hz": 48000,
//!   "start_hz": 20.0,
//!   "end_hz": 20000.0,
//!   "requested_duration_s": 10.0,
//!   "sweep_duration_s": 9.9976,
//!   "rate_constant_s": 1.45,
//!   "fade_in_s": 0.1,
//!   "fade_out_s": 0.01,
//!   "level_dbfs": -20.0,
//!   "silence_s": 3.0,
//!   "frames": 623885,
//!   "hash": "fnv1a64-f32le:0123456789abcdef"
//! }
//! ```

use std::fmt;
use std::path::{Path, PathBuf};

use partita_room::sweep::{fnv1a64_f32, SweepKind, SweepSpec, SWEEP_GENERATOR_VERSION};
use serde::{Deserialize, Serialize};

/// The `format` field of every sidecar.
pub const SIDECAR_FORMAT: &str = "partita-sweep";
/// The sidecar layout's version.
pub const SIDECAR_FORMAT_VERSION: u32 = 1;
/// The prefix of the `hash` field: the algorithm and the bytes it covers.
pub const HASH_PREFIX: &str = "fnv1a64-f32le:";

/// The sidecar's fields (module docs).
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct SweepSidecar {
    /// Always [`SIDECAR_FORMAT`].
    pub format: String,
    /// [`SIDECAR_FORMAT_VERSION`].
    pub format_version: u32,
    /// The program that wrote it, with its version.
    pub generator: String,
    /// [`SWEEP_GENERATOR_VERSION`] of the writer.
    pub generator_version: u32,
    /// `exponential` or `synchronized`.
    pub kind: String,
    /// Sample rate.
    pub sample_rate_hz: u32,
    /// Start frequency.
    pub start_hz: f64,
    /// End frequency.
    pub end_hz: f64,
    /// The duration asked for.
    pub requested_duration_s: f64,
    /// The sweep's actual duration (informative).
    pub sweep_duration_s: f64,
    /// The rate constant L (informative).
    pub rate_constant_s: f64,
    /// Fade-in.
    pub fade_in_s: f64,
    /// Fade-out.
    pub fade_out_s: f64,
    /// Peak level.
    pub level_dbfs: f64,
    /// Silence after the sweep.
    pub silence_s: f64,
    /// Frames in the file (sweep and silence).
    pub frames: usize,
    /// [`HASH_PREFIX`] and 16 hex digits.
    pub hash: String,
}

/// Why a sidecar cannot be used.
#[derive(Debug)]
pub enum SidecarError {
    /// The file cannot be read or written.
    Io {
        /// The file.
        path: PathBuf,
        /// What went wrong.
        error: std::io::Error,
    },
    /// The file is not a sweep sidecar.
    Parse {
        /// The file.
        path: PathBuf,
        /// What the JSON reader said.
        error: String,
    },
    /// The sidecar's parameters do not make a valid sweep.
    Invalid {
        /// The file.
        path: PathBuf,
        /// Why.
        error: String,
    },
    /// The regenerated sweep's hash differs from the sidecar's.
    HashMismatch {
        /// The file.
        path: PathBuf,
        /// The sidecar's hash.
        stored: String,
        /// The regenerated sweep's hash.
        regenerated: String,
    },
}

impl fmt::Display for SidecarError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Io { path, error } => write!(f, "{}: {error}", path.display()),
            Self::Parse { path, error } => {
                write!(f, "{}: not a sweep sidecar written by `partita sweep` ({error})", path.display())
            }
            Self::Invalid { path, error } => write!(f, "{}: {error}", path.display()),
            Self::HashMismatch { path, stored, regenerated } => write!(
                f,
                "{}: the sweep regenerated from these parameters has hash {regenerated}, but the sidecar says \
                 {stored}; the parameters were changed or another generator version wrote it. Use the sidecar \
                 written with the sweep you played",
                path.display()
            ),
        }
    }
}

impl std::error::Error for SidecarError {}

/// The hash field for `samples`.
pub fn hash_field(samples: &[f32]) -> String {
    format!("{HASH_PREFIX}{:016x}", fnv1a64_f32(samples))
}

impl SweepSidecar {
    /// The sidecar of `spec`, whose generated samples are `samples`.
    pub fn new(spec: &SweepSpec, samples: &[f32]) -> Self {
        Self {
            format: SIDECAR_FORMAT.into(),
            format_version: SIDECAR_FORMAT_VERSION,
            generator: format!("partita {}", env!("CARGO_PKG_VERSION")),
            generator_version: SWEEP_GENERATOR_VERSION,
            kind: spec.kind.name().into(),
            sample_rate_hz: spec.sample_rate_hz,
            start_hz: spec.start_hz,
            end_hz: spec.end_hz,
            requested_duration_s: spec.duration_s,
            sweep_duration_s: spec.sweep_duration_s(),
            rate_constant_s: spec.rate_constant_s(),
            fade_in_s: spec.fade_in_s,
            fade_out_s: spec.fade_out_s,
            level_dbfs: spec.level_dbfs,
            silence_s: spec.silence_s,
            frames: samples.len(),
            hash: hash_field(samples),
        }
    }

    /// The sweep parameters, or why they are not usable.
    pub fn spec(&self) -> Result<SweepSpec, String> {
        if self.format != SIDECAR_FORMAT || self.format_version != SIDECAR_FORMAT_VERSION {
            return Err(format!(
                "format {} version {} is not {SIDECAR_FORMAT} version {SIDECAR_FORMAT_VERSION}",
                self.format, self.format_version
            ));
        }
        let kind = SweepKind::from_name(&self.kind).ok_or_else(|| format!("unknown sweep kind {:?}", self.kind))?;
        let spec = SweepSpec {
            kind,
            sample_rate_hz: self.sample_rate_hz,
            start_hz: self.start_hz,
            end_hz: self.end_hz,
            duration_s: self.requested_duration_s,
            fade_in_s: self.fade_in_s,
            fade_out_s: self.fade_out_s,
            level_dbfs: self.level_dbfs,
            silence_s: self.silence_s,
        };
        spec.validate().map_err(|e| e.to_string())?;
        Ok(spec)
    }

    /// Writes the sidecar as pretty JSON.
    ///
    /// # Errors
    /// [`SidecarError::Io`].
    pub fn write(&self, path: &Path) -> Result<(), SidecarError> {
        let text = serde_json::to_string_pretty(self).expect("plain data serializes");
        std::fs::write(path, text + "\n").map_err(|error| SidecarError::Io { path: path.into(), error })
    }

    /// Reads a sidecar, regenerates its sweep and checks the hash. Returns the parameters and the samples.
    ///
    /// # Errors
    /// Every [`SidecarError`].
    pub fn read_verified(path: &Path) -> Result<(Self, SweepSpec, Vec<f32>), SidecarError> {
        let bytes = std::fs::read(path).map_err(|error| SidecarError::Io { path: path.into(), error })?;
        Self::from_json_verified(&bytes, path)
    }

    /// Parses sidecar bytes and checks its parameters, without generating the sweep; `path` is the file the
    /// errors name.
    ///
    /// # Errors
    /// [`SidecarError::Parse`], [`SidecarError::Invalid`].
    pub fn from_json(bytes: &[u8], path: &Path) -> Result<(Self, SweepSpec), SidecarError> {
        let sidecar: Self = serde_json::from_slice(bytes)
            .map_err(|e| SidecarError::Parse { path: path.into(), error: short_json_error(&e) })?;
        let spec = sidecar.spec().map_err(|error| SidecarError::Invalid { path: path.into(), error })?;
        Ok((sidecar, spec))
    }

    /// [`read_verified`](Self::read_verified) for sidecar bytes already read; `path` is the file the errors
    /// name. Allocates the sweep.
    ///
    /// # Errors
    /// [`SidecarError::Parse`], [`SidecarError::Invalid`], [`SidecarError::HashMismatch`].
    pub fn from_json_verified(bytes: &[u8], path: &Path) -> Result<(Self, SweepSpec, Vec<f32>), SidecarError> {
        let (sidecar, spec) = Self::from_json(bytes, path)?;
        let samples = spec.generate().map_err(|e| SidecarError::Invalid { path: path.into(), error: e.to_string() })?;
        if samples.len() != sidecar.frames {
            return Err(SidecarError::Invalid {
                path: path.into(),
                error: format!(
                    "the sidecar says {} frames but its parameters make {}; the file was edited. Use the sidecar \
                     written with the sweep you played",
                    sidecar.frames,
                    samples.len()
                ),
            });
        }
        let regenerated = hash_field(&samples);
        if regenerated != sidecar.hash {
            return Err(SidecarError::HashMismatch { path: path.into(), stored: sidecar.hash, regenerated });
        }
        Ok((sidecar, spec, samples))
    }
}

/// The sidecar path beside a sweep WAV: the same name with the extension `.json`.
pub fn sidecar_path(wav: &Path) -> PathBuf {
    wav.with_extension("json")
}

/// The JSON reader's message, cut to a line a person reads: serde_json quotes the offending value whole,
/// which for a damaged file can be kilobytes (found by the sweep_sidecar fuzz target).
fn short_json_error(e: &serde_json::Error) -> String {
    const KEEP: usize = 160;
    let full = e.to_string();
    if full.chars().count() <= KEEP + 40 {
        return full;
    }
    let head: String = full.chars().take(KEEP).collect();
    format!("{head}... at line {} column {}", e.line(), e.column())
}

#[cfg(test)]
mod tests {
    use super::*;

    /// A damaged sidecar whose offending value is long gives a short message (the JSON reader quotes the
    /// value whole; found by the sweep_sidecar fuzz target).
    #[test]
    fn a_long_bad_value_gives_a_short_message() {
        let json = format!("\"{}\"", "a".repeat(5000));
        let err = SweepSidecar::from_json(json.as_bytes(), Path::new("x.json")).unwrap_err().to_string();
        assert!(err.len() < 300, "{} bytes: {err}", err.len());
        assert!(err.starts_with("x.json: not a sweep sidecar") && err.contains("at line 1 column"), "{err}");
        let short = SweepSidecar::from_json(b"{}", Path::new("x.json")).unwrap_err().to_string();
        assert!(short.contains("missing field"), "short messages stay whole: {short}");
    }
}
