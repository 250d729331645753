//! The synthetic demo files kept in `demo-data/`: two impulse responses of imagined spaces and a dry phrase,
//! all made by code in this repository. `partita make-demo-data` writes them; `partita demo` reads them, or
//! makes the same samples in memory when the folder is missing.
//!
//! - `tiled-stairwell.wav`, `timber-barn.wav`: [`render_room_ir`] of [`RoomSpec::tiled_stairwell`] and
//!   [`RoomSpec::timber_barn`] (image sources + band-shaped decaying noise; see
//!   `partita_room::room`) with seed [`DEMO_SEED`], stereo, 48 kHz, each peak-normalized to
//!   [`IR_PEAK_DBFS`].
//! - `dry-phrase.wav`: [`demo_phrase`] at 48 kHz (plucked strings by Karplus-Strong and percussive hits;
//!   see `partita_room::phrase`), mono, peak -3 dBFS.
//!
//! All are written as 24-bit PCM with plain rounding. No dither: the phrase's gaps stay digital silence, and
//! the IR tails, which decay about 100 dB below their -12 dBFS peaks, still end above one 24-bit step (the
//! rounding error, -149 dBFS RMS, is far below anything audible). Float32 would exceed the 3 MB budget of the
//! folder; 24-bit keeps it at 2.7 MB. `partita demo` generates the same samples in memory
//! ([`generate`]) when the folder is missing.

use partita_io::{scale_to_peak, Audio, SampleFormat};
use partita_room::phrase::demo_phrase;
use partita_room::room::{render_room_ir, RoomSpec, DEMO_SEED};

/// File name of the dry phrase.
pub const DRY_FILE: &str = "dry-phrase.wav";

/// Sample rate of every demo file.
pub const DEMO_RATE_HZ: u32 = 48_000;

/// Peak level each demo IR is normalized to before quantizing, dB re. full scale. The rendered rooms are
/// unnormalized (direct sound 1 / r). At -12 dBFS a render through them without `--normalize` keeps about
/// the input's loudness (their energy gains, sqrt(sum h^2), are about 1.6 and 1.1, +4 and +1 dB for broadband
/// sound), so a plain `partita render` of a normal recording rarely exceeds full scale. The quietest part of
/// the tails (the last 100 ms, about 100 dB below the peak) stays 18 to 27 dB above one 24-bit step. `partita demo` energy-normalizes them, so it does not depend on this.
pub const IR_PEAK_DBFS: f64 = -12.0;

/// Format of the committed files.
pub const DEMO_FORMAT: SampleFormat = SampleFormat::Pcm24;

/// One imagined space: its parameters and its rendered, normalized, quantized IR.
#[derive(Debug, Clone)]
pub struct DemoSpace {
    /// The room it was rendered from.
    pub spec: RoomSpec,
    /// The stereo IR, on the 24-bit grid.
    pub ir: Audio,
}

impl DemoSpace {
    /// `<name>.wav`, e.g. `timber-barn.wav`.
    pub fn file_name(&self) -> String {
        file_name(&self.spec)
    }
}

/// `<name>.wav` for a room.
pub fn file_name(spec: &RoomSpec) -> String {
    format!("{}.wav", spec.name)
}

/// The demo's files: the dry phrase and every space.
#[derive(Debug, Clone)]
pub struct DemoData {
    /// The mono dry phrase, on the 24-bit grid.
    pub dry: Audio,
    /// The spaces, smallest first.
    pub spaces: Vec<DemoSpace>,
}

/// Rounds to the 24-bit PCM grid exactly as writing [`DEMO_FORMAT`] without dither and reading it back does:
/// round(x 2^23), halves away from zero, clamped to the 24-bit range, divided by 2^23.
pub fn quantize_pcm24(x: f32) -> f32 {
    const SCALE: f64 = 8_388_608.0;
    ((f64::from(x) * SCALE).round().clamp(-SCALE, SCALE - 1.0) / SCALE) as f32
}

/// The samples on the 24-bit grid, after scaling the peak to `peak_dbfs` when given.
fn quantized(channels: Vec<Vec<f32>>, peak_dbfs: Option<f64>) -> Audio {
    let mut audio = Audio::new(channels, DEMO_RATE_HZ);
    if let Some(db) = peak_dbfs {
        // A rendered room is never silent; if one were, it would stay as it is.
        let _ = scale_to_peak(&mut audio, db);
    }
    for v in audio.channels.iter_mut().flatten() {
        *v = quantize_pcm24(*v);
    }
    audio
}

/// Renders every demo file in memory (the rooms on threads of their own). Allocates; about half a second
/// in an optimized build.
pub fn generate() -> DemoData {
    let specs: Vec<RoomSpec> = RoomSpec::presets().into_iter().map(|s| s.with_sample_rate(DEMO_RATE_HZ)).collect();
    std::thread::scope(|scope| {
        let rooms: Vec<_> = specs.iter().map(|spec| scope.spawn(move || render_room_ir(spec, DEMO_SEED))).collect();
        let dry = quantized(vec![demo_phrase(DEMO_RATE_HZ)], None);
        let spaces = specs
            .iter()
            .zip(rooms)
            .map(|(spec, handle)| {
                let taps = handle.join().unwrap_or_else(|panic| std::panic::resume_unwind(panic));
                DemoSpace { spec: spec.clone(), ir: quantized(taps, Some(IR_PEAK_DBFS)) }
            })
            .collect();
        DemoData { dry, spaces }
    })
}
