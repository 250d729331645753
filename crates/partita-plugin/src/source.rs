//! Where the impulse response comes from: a built-in synthetic space (rendered by partita-room) or a WAV
//! file (read by partita-io, its samples kept so a project save can embed them), and how either becomes
//! the taps the engine runs at the host's rate. Everything here allocates: main thread only.

use std::fmt;
use std::path::{Path, PathBuf};
use std::sync::Arc;

use partita_core::ImpulseResponse;
use partita_io::{normalize, read_wav, resample, to_impulse_response, Audio, IoError, Normalize};
use partita_room::room::{render_room_ir, RoomSpec, RoomSpecError, DEMO_SEED};

/// Names of the built-in spaces, the entries of the Space parameter: 0 the custom room made from the room
/// parameters, then imagined places of our own.
pub const SPACE_NAMES: [&str; 4] = ["Custom room", "Tiled stairwell", "Timber barn", "Water tower"];

/// Environment variable naming the IR folder (overrides the per-OS default of [`ir_folder`]).
pub const IR_FOLDER_ENV: &str = "PARTITA_IR_DIR";

/// The room of built-in space `index` (see [`SPACE_NAMES`]) at `sample_rate_hz`; the custom room (0) is
/// made from volume, RT60 and high-frequency ratio ([`RoomSpec::from_character`]).
///
/// "Water tower": an imagined disused concrete water tower, its tank drained, listened to from the
/// gallery at the bottom: 1400 m^3, RT60 4.5 s at 500 Hz, the highs (4 kHz) dying in 0.55 of that time.
pub fn space_room(index: usize, custom: (f64, f64, f64), sample_rate_hz: u32) -> RoomSpec {
    let room = match index {
        1 => RoomSpec::tiled_stairwell(),
        2 => RoomSpec::timber_barn(),
        3 => RoomSpec::from_character("water-tower", 1400.0, 4.5, 0.55),
        _ => RoomSpec::from_character("custom-room", custom.0, custom.1, custom.2),
    };
    room.with_sample_rate(sample_rate_hz)
}

/// A WAV impulse response as read from its file, before any conditioning (so a project save can embed
/// exactly these samples and another machine condition them the same way).
#[derive(Debug, Clone, PartialEq)]
pub struct FileIr {
    /// The file it was read from (kept when the samples come from a saved state).
    pub path: PathBuf,
    /// The file's samples at the file's rate.
    pub audio: Arc<Audio>,
}

/// The source of the impulse response.
#[derive(Debug, Clone, PartialEq)]
pub enum IrSource {
    /// Built-in space `index` of [`SPACE_NAMES`], with the custom room's (volume m^3, RT60 s, HF ratio).
    Space {
        /// Index into [`SPACE_NAMES`].
        index: usize,
        /// The custom room's parameters (used when `index` is 0).
        custom: (f64, f64, f64),
    },
    /// A WAV file.
    File(FileIr),
}

/// Why an IR source cannot be made.
#[derive(Debug)]
pub enum SourceError {
    /// Reading or conditioning the WAV failed.
    Io(IoError),
    /// The WAV has a channel count the plugin has no routing for.
    Channels {
        /// The file.
        path: PathBuf,
        /// Its channels.
        channels: usize,
    },
    /// The room parameters make no room.
    Room(RoomSpecError),
}

impl fmt::Display for SourceError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Io(e) => write!(f, "{e}"),
            Self::Channels { path, channels } => write!(
                f,
                "{}: {channels} channels; the plugin takes mono (1), stereo (2) or true-stereo (4: LL, LR, RL, RR) \
                 impulse responses",
                path.display()
            ),
            Self::Room(e) => write!(f, "the room parameters make no room: {e}"),
        }
    }
}

impl std::error::Error for SourceError {}

/// Reads a WAV impulse response and checks its channel count. Allocates; does file I/O.
///
/// # Errors
/// [`SourceError::Io`] when the file cannot be read, [`SourceError::Channels`] for a channel count other
/// than 1, 2 or 4.
pub fn read_file_ir(path: &Path) -> Result<FileIr, SourceError> {
    let audio = read_wav(path).map_err(SourceError::Io)?;
    check_channels(path, audio.channel_count())?;
    Ok(FileIr { path: path.to_path_buf(), audio: Arc::new(audio) })
}

fn check_channels(path: &Path, channels: usize) -> Result<(), SourceError> {
    if matches!(channels, 1 | 2 | 4) {
        Ok(())
    } else {
        Err(SourceError::Channels { path: path.to_path_buf(), channels })
    }
}

/// The IR of `source` at `sample_rate_hz`, as the plugin convolves with it: a space rendered at that rate
/// (seed [`DEMO_SEED`]), or the file resampled to it; then normalized to unit energy in its strongest
/// channel (white noise keeps its level through the wet path at 100 %). 1, 2 or 4 channels. Allocates.
///
/// # Errors
/// [`SourceError`] when the room is invalid or the file's samples cannot be conditioned.
pub fn make_ir(source: &IrSource, sample_rate_hz: u32) -> Result<ImpulseResponse, SourceError> {
    let (mut audio, path) = match source {
        IrSource::Space { index, custom } => {
            let room = space_room(*index, *custom, sample_rate_hz);
            room.validate().map_err(SourceError::Room)?;
            (Audio::new(render_room_ir(&room, DEMO_SEED), sample_rate_hz), PathBuf::from(&room.name))
        }
        IrSource::File(file) => {
            check_channels(&file.path, file.audio.channel_count())?;
            let audio = if file.audio.sample_rate_hz == sample_rate_hz {
                (*file.audio).clone()
            } else {
                resample(&file.audio, sample_rate_hz)
                    .map_err(|source| SourceError::Io(IoError::Condition { path: file.path.clone(), source }))?
            };
            (audio, file.path.clone())
        }
    };
    normalize(&mut audio, Normalize::Energy)
        .map_err(|source| SourceError::Io(IoError::Condition { path: path.clone(), source }))?;
    to_impulse_response(audio, &path).map_err(SourceError::Io)
}

/// The IR as the engine's routing takes it: two channels (left to left, right to right) for a mono or
/// stereo IR, or four for true stereo (LL, LR, RL, RR). A mono IR serves both sides; in a true-stereo
/// engine a stereo IR has silent cross paths. Allocates.
///
/// # Panics
/// For an IR of another channel count than 1, 2 or 4 ([`make_ir`] makes none).
pub fn engine_taps(ir: &ImpulseResponse, true_stereo: bool) -> ImpulseResponse {
    let ch = ir.as_planar();
    let zero = vec![0.0f32; ir.frames()];
    let (l, r) = match ch.len() {
        1 => (ch[0].clone(), ch[0].clone()),
        2 => (ch[0].clone(), ch[1].clone()),
        4 => return ir.clone(),
        n => panic!("an IR of {n} channels reached the engine"),
    };
    let channels = if true_stereo { vec![l, zero.clone(), zero, r] } else { vec![l, r] };
    ImpulseResponse::new(channels, ir.sample_rate_hz()).expect("the taps were valid")
}

/// The folder whose WAV files the IR file parameter lists: `$PARTITA_IR_DIR` when set; otherwise
/// `~/.local/share/partita/impulse-responses` (`$XDG_DATA_HOME/partita/impulse-responses` when set) on
/// Linux and other Unix systems, `~/Library/Application Support/Partita/Impulse Responses` on macOS,
/// `%APPDATA%\Partita\Impulse Responses` on Windows. `None` when no home folder is known.
pub fn ir_folder() -> Option<PathBuf> {
    if let Some(dir) = std::env::var_os(IR_FOLDER_ENV).filter(|d| !d.is_empty()) {
        return Some(PathBuf::from(dir));
    }
    if cfg!(windows) {
        return std::env::var_os("APPDATA").map(|d| PathBuf::from(d).join("Partita").join("Impulse Responses"));
    }
    let home = std::env::var_os("HOME").map(PathBuf::from);
    if cfg!(target_os = "macos") {
        return home.map(|h| h.join("Library/Application Support/Partita/Impulse Responses"));
    }
    let data = std::env::var_os("XDG_DATA_HOME")
        .filter(|d| !d.is_empty())
        .map(PathBuf::from)
        .or_else(|| home.map(|h| h.join(".local/share")));
    data.map(|d| d.join("partita").join("impulse-responses"))
}

/// The `.wav` files directly in `folder` (any case of the extension), sorted by file name; empty when the
/// folder cannot be read.
pub fn wav_files(folder: &Path) -> Vec<PathBuf> {
    let Ok(entries) = std::fs::read_dir(folder) else { return Vec::new() };
    let mut files: Vec<PathBuf> = entries
        .filter_map(|e| e.ok().map(|e| e.path()))
        .filter(|p| p.is_file() && p.extension().is_some_and(|x| x.eq_ignore_ascii_case("wav")))
        .collect();
    files.sort();
    files
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn every_space_renders_a_valid_normalized_stereo_ir() {
        for index in 0..SPACE_NAMES.len() {
            let source = IrSource::Space { index, custom: (800.0, 1.6, 0.6) };
            let room = space_room(index, (800.0, 1.6, 0.6), 44_100);
            room.validate().unwrap();
            if index > 0 {
                continue; // the named rooms are measured in partita-room's tests; rendering each costs seconds
            }
            let ir = make_ir(&source, 44_100).unwrap();
            assert_eq!(ir.channels(), 2);
            assert_eq!(ir.sample_rate_hz(), 44_100);
            let energy: Vec<f64> =
                ir.as_planar().iter().map(|c| c.iter().map(|&x| f64::from(x) * f64::from(x)).sum()).collect();
            let top = energy.iter().copied().fold(0.0, f64::max);
            assert!((top - 1.0).abs() < 1e-4, "unit energy in the strongest channel: {energy:?}");
        }
    }

    #[test]
    fn engine_taps_route_mono_stereo_and_true_stereo() {
        let mono = ImpulseResponse::new(vec![vec![1.0, 0.5]], 48_000).unwrap();
        assert_eq!(engine_taps(&mono, false).as_planar(), &[vec![1.0, 0.5], vec![1.0, 0.5]]);
        let z = vec![0.0, 0.0];
        assert_eq!(engine_taps(&mono, true).as_planar(), &[vec![1.0, 0.5], z.clone(), z.clone(), vec![1.0, 0.5]]);
        let four = ImpulseResponse::new(vec![vec![1.0], vec![2.0], vec![3.0], vec![4.0]], 48_000).unwrap();
        assert_eq!(engine_taps(&four, true), four);
    }
}
