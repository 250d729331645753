//! Synthetic rooms: stereo impulse responses of imagined shoebox spaces, made from a parameter set of our own.
//!
//! An IR is rendered in two parts that meet at a *mixing time*:
//!
//! 1. **Early part** by the image-source method for a rectangular room (J. B. Allen & D. A. Berkley, "Image
//!    method for efficiently simulating small-room acoustics", JASA 65(4), 1979): every image of the source in
//!    the lattice of mirrored rooms arrives after distance / c with amplitude beta^k / distance, k the number of
//!    wall reflections on its path, placed at its fractional arrival time with a Blackman-windowed sinc (common
//!    practice). The reflection factor beta = sqrt(1 - alpha) is the same for all six walls and differs per
//!    octave band: alpha is the Eyring absorption ([`eyring_absorption`]) that gives the band's intended RT60,
//!    so the early part and the tail decay alike.
//! 2. **Diffuse tail**: seeded noise split into octave bands (63 Hz to 16 kHz; the outer two take the RT60 of
//!    125 Hz and 8 kHz), each band multiplied by its exponential envelope e^(-delta t) with
//!    delta = 6.9078 / RT60 (an amplitude envelope e^(-delta t) falls 60 dB in 3 ln(10) / delta seconds;
//!    REFERENCES.md), starting at the level a lossless shoebox's image sources would have (energy 4 pi c / V
//!    per second re. the direct sound at 1 m; our derivation from the image density 1 / V). Each band's noise
//!    is held at constant short-time power over 20 ms windows (our choice): plain noise gives a band energy
//!    that fluctuates like a chi-square variable, which scatters the measured decay of one take by several per
//!    cent in the low bands; the flattened noise keeps the fine structure random while the decay follows its
//!    band's RT60. The two channels use independent noise (decorrelated tails).
//!
//! The image sources fade out and the tail fades in with a sine/cosine (equal-power) crossfade centred on the
//! mixing time. The band split is a zero-phase partition of unity in the frequency domain (raised-cosine
//! crossovers 0.2 octave wide at the IEC 61260-1 band edges, weights summing to 1), so the direct sound (no
//! reflections, the same in every band) comes out unfiltered. The last [`END_FADE_S`] fade to zero. Output is
//! unnormalized: the direct sound from a source r metres away has amplitude 1 / r.
//!
//! The presets are spaces we made up; see [`RoomSpec::tiled_stairwell`] and [`RoomSpec::timber_barn`].

use std::f64::consts::{LN_10, PI};
use std::fmt;

use partita_core::synth::Noise;
use realfft::RealFftPlanner;
use rustfft::num_complex::Complex64;

use crate::analysis::{OctaveBand, OCTAVE_RATIO};

/// Speed of sound used throughout, m/s (dry air at about 20 degrees C; common practice).
pub const SPEED_OF_SOUND_M_PER_S: f64 = 343.0;

/// Sabine's constant 24 ln(10) / c in s/m at [`SPEED_OF_SOUND_M_PER_S`]: 0.1611 (published as 0.161).
pub const SABINE_CONSTANT_S_PER_M: f64 = 24.0 * LN_10 / SPEED_OF_SOUND_M_PER_S;

/// The octave bands a [`RoomSpec`] gives an RT60 for: 125 Hz to 8 kHz ([`OctaveBand::ROOM`]).
pub const ROOM_BANDS: [OctaveBand; 7] = OctaveBand::ROOM;

/// The seed the demo IRs are rendered with (any seed gives the same room; this one is the shipped take).
pub const DEMO_SEED: u64 = 1979;

/// Length of the fade to zero at the end of a rendered IR, seconds.
pub const END_FADE_S: f64 = 0.05;

/// Window over which each tail band's short-time power is held constant, seconds.
const TAIL_POWER_WINDOW_S: f64 = 0.02;
/// Band indices the renderer splits into: 63 Hz to 16 kHz. The bands outside [`ROOM_BANDS`] take the RT60 of
/// the nearest room band, so that the 125 Hz and 8 kHz bands are shaped like the inner ones.
const SYNTH_BANDS: [i32; 9] = [-4, -3, -2, -1, 0, 1, 2, 3, 4];
/// Half-width of the band crossovers, in octaves (band units) either side of an edge.
const CROSSOVER_HALF_WIDTH: f64 = 0.1;
/// Half-length of the windowed-sinc fractional delay, samples.
const SINC_HALF_TAPS: i64 = 16;

/// Sabine's reverberation time T = 0.161 V / (S alpha) for a shoebox of `dimensions_m` whose surfaces absorb
/// `mean_absorption` on average (W. C. Sabine, Collected Papers on Acoustics, 1922; REFERENCES.md).
pub fn sabine_rt60_s(dimensions_m: [f64; 3], mean_absorption: f64) -> f64 {
    SABINE_CONSTANT_S_PER_M * volume(dimensions_m) / (surface(dimensions_m) * mean_absorption)
}

/// Eyring's reverberation time T = 0.161 V / (-S ln(1 - alpha)) (C. F. Eyring, JASA 1, 1930; REFERENCES.md).
/// Shorter than Sabine's, by little when alpha is small.
pub fn eyring_rt60_s(dimensions_m: [f64; 3], mean_absorption: f64) -> f64 {
    SABINE_CONSTANT_S_PER_M * volume(dimensions_m) / (-surface(dimensions_m) * (1.0 - mean_absorption).ln())
}

/// The mean absorption coefficient that gives `rt60_s` by Eyring's formula: alpha = 1 - exp(-0.161 V / (S T)).
pub fn eyring_absorption(dimensions_m: [f64; 3], rt60_s: f64) -> f64 {
    1.0 - (-SABINE_CONSTANT_S_PER_M * volume(dimensions_m) / (surface(dimensions_m) * rt60_s)).exp()
}

fn volume(d: [f64; 3]) -> f64 {
    d[0] * d[1] * d[2]
}

fn surface(d: [f64; 3]) -> f64 {
    2.0 * (d[0] * d[1] + d[0] * d[2] + d[1] * d[2])
}

/// An imagined shoebox room, a source and a spaced pair of omnidirectional receivers: everything
/// [`render_room_ir`] needs. Coordinates are metres from one corner, inside `[0, dimensions_m[i]]` on each axis
/// (x length, y width, z height).
#[derive(Debug, Clone, PartialEq)]
pub struct RoomSpec {
    /// Short name, usable in file names (`"tiled-stairwell"`).
    pub name: String,
    /// Inner size along x, y, z in metres.
    pub dimensions_m: [f64; 3],
    /// Source position.
    pub source_m: [f64; 3],
    /// Left and right receiver positions (the IR's two channels).
    pub receivers_m: [[f64; 3]; 2],
    /// Intended reverberation time per band of [`ROOM_BANDS`] (125 Hz .. 8 kHz), seconds.
    pub rt60_s: [f64; 7],
    /// Where the image sources hand over to the diffuse tail, seconds after the sound leaves the source.
    pub mixing_time_s: f64,
    /// Length of the handover crossfade, centred on the mixing time, seconds.
    pub crossfade_s: f64,
    /// IR length in seconds.
    pub length_s: f64,
    /// Sample rate of the rendered IR.
    pub sample_rate_hz: u32,
}

/// Why a [`RoomSpec`] cannot be rendered.
#[derive(Debug, Clone, PartialEq)]
pub enum RoomSpecError {
    /// A room dimension is not a positive finite length.
    Dimension {
        /// Axis 0, 1, 2 = x, y, z.
        axis: usize,
        /// The value given.
        metres: f64,
    },
    /// The source or a receiver is not strictly inside the room.
    OutsideRoom {
        /// `"source"`, `"left receiver"` or `"right receiver"`.
        point: &'static str,
        /// Its position.
        position_m: [f64; 3],
    },
    /// A band's RT60 is not a positive finite time.
    Rt60 {
        /// The band.
        band: OctaveBand,
        /// The value given.
        seconds: f64,
    },
    /// The mixing time, crossfade and length do not fit: 0 < crossfade / 2 < mixing time and mixing time +
    /// crossfade / 2 + [`END_FADE_S`] < length.
    Timing {
        /// Mixing time given.
        mixing_time_s: f64,
        /// Crossfade given.
        crossfade_s: f64,
        /// Length given.
        length_s: f64,
    },
    /// A receiver is closer than 0.1 m to the source.
    TooClose {
        /// 0 left, 1 right.
        receiver: usize,
        /// Its distance from the source.
        distance_m: f64,
    },
    /// The handover to the tail starts before the direct sound reaches a receiver.
    MixingBeforeDirect {
        /// When the crossfade starts (mixing time - crossfade / 2), seconds.
        fade_start_s: f64,
        /// When the direct sound reaches the farther receiver, seconds.
        direct_s: f64,
    },
    /// The sample rate is below 8 kHz.
    SampleRate {
        /// The rate given.
        sample_rate_hz: u32,
    },
}

impl fmt::Display for RoomSpecError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Dimension { axis, metres } => {
                write!(f, "room dimension {axis} is {metres} m; give a positive length")
            }
            Self::OutsideRoom { point, position_m } => {
                write!(f, "the {point} at {position_m:?} m is not inside the room; move it inside the walls")
            }
            Self::Rt60 { band, seconds } => write!(f, "RT60 at {band} is {seconds} s; give a positive time"),
            Self::Timing { mixing_time_s, crossfade_s, length_s } => write!(
                f,
                "mixing time {mixing_time_s} s with a {crossfade_s} s crossfade does not fit a {length_s} s \
                 IR; need 0 < crossfade / 2 < mixing time and mixing time + crossfade / 2 + {END_FADE_S} s < \
                 length"
            ),
            Self::TooClose { receiver, distance_m } => {
                write!(f, "receiver {receiver} is {distance_m} m from the source; keep at least 0.1 m between them")
            }
            Self::MixingBeforeDirect { fade_start_s, direct_s } => write!(
                f,
                "the tail crossfade starts at {fade_start_s} s, before the direct sound arrives at {direct_s} s; \
                 use a later mixing time"
            ),
            Self::SampleRate { sample_rate_hz } => {
                write!(f, "sample rate {sample_rate_hz} Hz is too low for a room IR; use 8000 Hz or more")
            }
        }
    }
}

impl std::error::Error for RoomSpecError {}

impl RoomSpec {
    /// **Tiled stairwell**: the stairwell of an imagined four-storey school building from about 1900, walls in
    /// glazed tile, terrazzo stairs and landings, an iron banister; a cellist plays on the ground-floor landing
    /// and a spaced pair (60 cm) listens two floors up. Small, tall and bright.
    ///
    /// Shoebox 3.4 m x 2.8 m x 12.5 m (V = 119 m^3, S = 174 m^2). Source (1.1, 0.9, 1.3); receivers
    /// (2.3, 1.4, 7.2) and (2.3, 2.0, 7.2), 6.0 m and 6.1 m from it (direct sound after 18 ms). Mixing time
    /// 45 ms after emission, crossfade 20 ms, 1.6 s long at 48 kHz.
    ///
    /// | band (Hz) | 125 | 250 | 500 | 1k | 2k | 4k | 8k |
    /// |---|---|---|---|---|---|---|---|
    /// | intended RT60 (s) | 1.45 | 1.40 | 1.30 | 1.20 | 1.10 | 0.97 | 0.85 |
    pub fn tiled_stairwell() -> Self {
        Self {
            name: "tiled-stairwell".into(),
            dimensions_m: [3.4, 2.8, 12.5],
            source_m: [1.1, 0.9, 1.3],
            receivers_m: [[2.3, 1.4, 7.2], [2.3, 2.0, 7.2]],
            rt60_s: [1.45, 1.40, 1.30, 1.20, 1.10, 0.97, 0.85],
            mixing_time_s: 0.045,
            crossfade_s: 0.020,
            length_s: 1.6,
            sample_rate_hz: 48_000,
        }
    }

    /// **Timber barn**: an imagined empty threshing barn, oak frame and board walls, plank floor, the roof
    /// treated as a flat ceiling at the mean height; a fiddler stands near one gable and the spaced pair (60 cm)
    /// stands mid-barn. Large, with a long warm low end and a shorter, duller top (boards and air absorb highs).
    ///
    /// Shoebox 30 m x 14 m x 9 m (V = 3780 m^3, S = 1632 m^2). Source (6.0, 5.8, 1.5); receivers
    /// (20.5, 7.1, 1.9) and (20.5, 7.7, 1.9), 14.6 m and 14.7 m from it (direct sound after 43 ms). Mixing time
    /// 120 ms after emission, crossfade 30 ms, 3.0 s long at 48 kHz.
    ///
    /// | band (Hz) | 125 | 250 | 500 | 1k | 2k | 4k | 8k |
    /// |---|---|---|---|---|---|---|---|
    /// | intended RT60 (s) | 2.60 | 2.50 | 2.35 | 2.20 | 1.95 | 1.70 | 1.45 |
    pub fn timber_barn() -> Self {
        Self {
            name: "timber-barn".into(),
            dimensions_m: [30.0, 14.0, 9.0],
            source_m: [6.0, 5.8, 1.5],
            receivers_m: [[20.5, 7.1, 1.9], [20.5, 7.7, 1.9]],
            rt60_s: [2.60, 2.50, 2.35, 2.20, 1.95, 1.70, 1.45],
            mixing_time_s: 0.120,
            crossfade_s: 0.030,
            length_s: 3.0,
            sample_rate_hz: 48_000,
        }
    }

    /// A room described the way a musician does: its volume in m^3, its reverberation time in seconds (the
    /// RT60 at 500 Hz and 1 kHz, and below) and how fast the highs die, as the ratio `hf_ratio` of the RT60
    /// at 4 kHz to the one at 500 Hz (1 keeps the highs as long as the mids, 0.5 halves them). Named `name`.
    ///
    /// Our own choices fill in the rest: a shoebox with sides in the ratio 1.6 : 1 : 0.62 (long, a little
    /// low); the source a quarter of the length in, the spaced pair (60 cm) at 0.6 of the length, both
    /// near the middle of the width, 1.5 m and 1.7 m up (40% and 50% of the height in low rooms). Above
    /// 500 Hz the RT60 moves geometrically with frequency towards `hf_ratio` at 4 kHz (and on to 8 kHz);
    /// below it stays at `rt60_s`. The mixing time is sqrt(V) ms (a rule of thumb for where reflections
    /// become dense), at least 20 ms after the direct sound and at most 200 ms; the crossfade is 30 ms (less
    /// in small rooms); the IR lasts 1.1 times the longest band's RT60 plus 0.1 s. Rendered at 48 kHz:
    /// [`with_sample_rate`](Self::with_sample_rate) changes that. Check the result with
    /// [`validate`](Self::validate): a non-finite or non-positive figure fails there.
    ///
    /// ```
    /// use partita_room::room::RoomSpec;
    /// let room = RoomSpec::from_character("hall", 2000.0, 1.8, 0.6);
    /// assert!(room.validate().is_ok());
    /// assert!((room.volume_m3() - 2000.0).abs() < 1e-6);
    /// assert!((room.rt60_s[2] - 1.8).abs() < 1e-12 && (room.rt60_s[5] - 1.8 * 0.6).abs() < 1e-12);
    /// ```
    pub fn from_character(name: &str, volume_m3: f64, rt60_s: f64, hf_ratio: f64) -> Self {
        const SIDES: [f64; 3] = [1.6, 1.0, 0.62];
        let k = (volume_m3 / (SIDES[0] * SIDES[1] * SIDES[2])).cbrt();
        let [l, w, h] = SIDES.map(|r| r * k);
        let source_m = [0.25 * l, 0.45 * w, (0.4 * h).min(1.5)];
        let ear = (0.5 * h).min(1.7);
        let receivers_m = [[0.6 * l, 0.5 * w - 0.3, ear], [0.6 * l, 0.5 * w + 0.3, ear]];
        // Octaves above 500 Hz of each band (125 Hz .. 8 kHz); 4 kHz is three octaves up.
        let octaves_above_500 = [0.0, 0.0, 0.0, 1.0, 2.0, 3.0, 4.0];
        let rt60 = octaves_above_500.map(|o: f64| rt60_s * hf_ratio.powf(o / 3.0));
        let mut spec = Self {
            name: name.into(),
            dimensions_m: [l, w, h],
            source_m,
            receivers_m,
            rt60_s: rt60,
            mixing_time_s: 0.0,
            crossfade_s: 0.030,
            length_s: 1.1 * rt60.iter().copied().fold(0.0, f64::max) + 0.1,
            sample_rate_hz: 48_000,
        };
        let direct_s = spec.direct_distance_m(0).max(spec.direct_distance_m(1)) / SPEED_OF_SOUND_M_PER_S;
        spec.mixing_time_s = (volume_m3.sqrt() * 1e-3).max(direct_s + 0.020).min(0.200);
        spec.crossfade_s = spec.crossfade_s.min(spec.mixing_time_s - direct_s);
        spec
    }

    /// Every preset, smallest first.
    pub fn presets() -> Vec<Self> {
        vec![Self::tiled_stairwell(), Self::timber_barn()]
    }

    /// The same room rendered at another sample rate.
    pub fn with_sample_rate(mut self, sample_rate_hz: u32) -> Self {
        self.sample_rate_hz = sample_rate_hz;
        self
    }

    /// Room volume, m^3.
    pub fn volume_m3(&self) -> f64 {
        volume(self.dimensions_m)
    }

    /// Total surface area, m^2.
    pub fn surface_m2(&self) -> f64 {
        surface(self.dimensions_m)
    }

    /// IR length in frames, `round(length_s x sample_rate_hz)`.
    pub fn frames(&self) -> usize {
        (self.length_s * f64::from(self.sample_rate_hz)).round() as usize
    }

    /// The intended RT60 of `band`, or `None` outside [`ROOM_BANDS`].
    pub fn intended_rt60_s(&self, band: OctaveBand) -> Option<f64> {
        ROOM_BANDS.iter().position(|&b| b == band).map(|i| self.rt60_s[i])
    }

    /// Mean wall absorption per band of [`ROOM_BANDS`]: the Eyring absorption that gives the intended RT60.
    pub fn absorption(&self) -> [f64; 7] {
        self.rt60_s.map(|t| eyring_absorption(self.dimensions_m, t))
    }

    /// Distance from the source to receiver `receiver` (0 left, 1 right), metres.
    ///
    /// # Panics
    /// If `receiver > 1`.
    pub fn direct_distance_m(&self, receiver: usize) -> f64 {
        let r = self.receivers_m[receiver];
        (0..3).map(|i| (r[i] - self.source_m[i]).powi(2)).sum::<f64>().sqrt()
    }

    /// Checks the spec can be rendered.
    ///
    /// # Errors
    /// The first problem found, as a [`RoomSpecError`].
    pub fn validate(&self) -> Result<(), RoomSpecError> {
        for (axis, &metres) in self.dimensions_m.iter().enumerate() {
            if !(metres.is_finite() && metres > 0.0) {
                return Err(RoomSpecError::Dimension { axis, metres });
            }
        }
        let points = [
            ("source", self.source_m),
            ("left receiver", self.receivers_m[0]),
            ("right receiver", self.receivers_m[1]),
        ];
        for (point, p) in points {
            if !(0..3).all(|i| p[i] > 0.0 && p[i] < self.dimensions_m[i]) {
                return Err(RoomSpecError::OutsideRoom { point, position_m: p });
            }
        }
        for (&band, &seconds) in ROOM_BANDS.iter().zip(&self.rt60_s) {
            if !(seconds.is_finite() && seconds > 0.0) {
                return Err(RoomSpecError::Rt60 { band, seconds });
            }
        }
        let (m, x, l) = (self.mixing_time_s, self.crossfade_s, self.length_s);
        if !(x > 0.0 && x / 2.0 < m && m + x / 2.0 + END_FADE_S < l && l.is_finite()) {
            return Err(RoomSpecError::Timing { mixing_time_s: m, crossfade_s: x, length_s: l });
        }
        for receiver in 0..2 {
            let distance_m = self.direct_distance_m(receiver);
            if distance_m < 0.1 {
                return Err(RoomSpecError::TooClose { receiver, distance_m });
            }
        }
        let direct_s = self.direct_distance_m(0).max(self.direct_distance_m(1)) / SPEED_OF_SOUND_M_PER_S;
        let fade_start_s = m - x / 2.0;
        if fade_start_s <= direct_s {
            return Err(RoomSpecError::MixingBeforeDirect { fade_start_s, direct_s });
        }
        if self.sample_rate_hz < 8000 {
            return Err(RoomSpecError::SampleRate { sample_rate_hz: self.sample_rate_hz });
        }
        Ok(())
    }
}

/// One image of the source in the lattice of mirrored rooms (Allen & Berkley 1979).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ImageSource {
    /// Position of the image, metres (in the room's coordinates, usually outside the room).
    pub position_m: [f64; 3],
    /// Distance from the image to the receiver, metres.
    pub distance_m: f64,
    /// Arrival time after emission, distance / c, seconds.
    pub delay_s: f64,
    /// Number of wall reflections on the path (0 for the direct sound).
    pub reflections: u32,
}

/// Lists (allocating) the image sources of `spec` heard at receiver `receiver` (0 left, 1 right) that arrive no
/// later than `max_delay_s`, sorted by arrival. Along each axis the images sit at (1 - 2u) x_s + 2 l L for u in
/// {0, 1} and integer l, with |2l - u| reflections (Allen & Berkley 1979: their |l - u| + |l| per axis pair of walls).
///
/// # Panics
/// If `receiver > 1`.
pub fn image_sources(spec: &RoomSpec, receiver: usize, max_delay_s: f64) -> Vec<ImageSource> {
    let rx = spec.receivers_m[receiver];
    let radius = max_delay_s * SPEED_OF_SOUND_M_PER_S;
    // Per axis: every (coordinate, reflections) whose offset from the receiver is within the radius.
    let axis = |i: usize| -> Vec<(f64, u32)> {
        let (len, s) = (spec.dimensions_m[i], spec.source_m[i]);
        let l_max = ((radius + len) / (2.0 * len)).ceil() as i64 + 1;
        let mut out = Vec::new();
        for l in -l_max..=l_max {
            for u in 0..2i64 {
                let x = (1 - 2 * u) as f64 * s + 2.0 * l as f64 * len;
                if (x - rx[i]).abs() <= radius {
                    out.push((x, (2 * l - u).unsigned_abs() as u32));
                }
            }
        }
        out
    };
    let (ax, ay, az) = (axis(0), axis(1), axis(2));
    let mut images = Vec::new();
    for &(x, kx) in &ax {
        for &(y, ky) in &ay {
            for &(z, kz) in &az {
                let d = ((x - rx[0]).powi(2) + (y - rx[1]).powi(2) + (z - rx[2]).powi(2)).sqrt();
                if d <= radius {
                    images.push(ImageSource {
                        position_m: [x, y, z],
                        distance_m: d,
                        delay_s: d / SPEED_OF_SOUND_M_PER_S,
                        reflections: kx + ky + kz,
                    });
                }
            }
        }
    }
    images.sort_by(|a, b| a.delay_s.total_cmp(&b.delay_s));
    images
}

/// Zero-phase band weights on the `nfft / 2 + 1` real-FFT bins: one row per band of [`SYNTH_BANDS`], summing
/// to 1 at every bin. Band b covers continuous band index u in [x_b - 1/2, x_b + 1/2] (u = log_G(f / 1 kHz)), with
/// raised-cosine crossovers of half-width [`CROSSOVER_HALF_WIDTH`] at the edges; the end bands extend to DC and
/// Nyquist.
fn band_weights(nfft: usize, sample_rate_hz: f64) -> Vec<Vec<f64>> {
    let bins = nfft / 2 + 1;
    let bands = SYNTH_BANDS;
    let rise = |u: f64, edge: f64| -> f64 {
        let t = ((u - edge + CROSSOVER_HALF_WIDTH) / (2.0 * CROSSOVER_HALF_WIDTH)).clamp(0.0, 1.0);
        0.5 - 0.5 * (PI * t).cos()
    };
    let edges: Vec<f64> = bands.windows(2).map(|w| f64::from(w[0]) + 0.5).collect();
    let mut weights = vec![vec![0.0; bins]; bands.len()];
    for k in 0..bins {
        let f = k as f64 * sample_rate_hz / nfft as f64;
        let u = if k == 0 { f64::NEG_INFINITY } else { (f / 1000.0).ln() / OCTAVE_RATIO.ln() };
        // S_j = share of the spectrum above edge j; W_b = S_(b-1) - S_b telescopes to 1.
        let share_above = |j: Option<usize>| match j {
            None => 1.0,
            Some(j) => edges.get(j).map_or(0.0, |&e| rise(u, e)),
        };
        for (b, row) in weights.iter_mut().enumerate() {
            row[k] = share_above(b.checked_sub(1)) - share_above(Some(b));
        }
    }
    weights
}

/// Blackman-windowed sinc taps for a delay of `delay` samples: `(first index, taps)`.
fn fractional_impulse(delay: f64) -> (i64, [f64; (2 * SINC_HALF_TAPS + 1) as usize]) {
    let centre = delay.round() as i64;
    let first = centre - SINC_HALF_TAPS;
    let mut taps = [0.0; (2 * SINC_HALF_TAPS + 1) as usize];
    let half = (SINC_HALF_TAPS + 1) as f64;
    for (j, tap) in taps.iter_mut().enumerate() {
        let x = (first + j as i64) as f64 - delay;
        let sinc = if x.abs() < 1e-12 { 1.0 } else { (PI * x).sin() / (PI * x) };
        let w = 0.42 + 0.5 * (PI * x / half).cos() + 0.08 * (2.0 * PI * x / half).cos();
        *tap = sinc * w;
    }
    (first, taps)
}

/// Renders (allocating) the stereo impulse response of `spec`: planar `[left, right]`, each
/// [`RoomSpec::frames`] long, unnormalized (direct sound 1 / r). The same spec and seed give the same samples
/// (bit for bit on one build; across platforms up to FFT rounding). About 0.1 to 0.3 s for the presets in an
/// optimized build.
///
/// See the module docs for the method.
///
/// # Panics
/// If [`RoomSpec::validate`] fails.
pub fn render_room_ir(spec: &RoomSpec, seed: u64) -> Vec<Vec<f32>> {
    if let Err(e) = spec.validate() {
        panic!("render_room_ir: {e}");
    }
    let fs = f64::from(spec.sample_rate_hz);
    let frames = spec.frames();
    let power_window = (TAIL_POWER_WINDOW_S * fs).round() as usize;
    let pad = (frames / 8).max(8 * power_window).max(4096);
    let nfft = (frames + pad).next_power_of_two();
    let bins = nfft / 2 + 1;

    let mut planner = RealFftPlanner::<f64>::new();
    let forward = planner.plan_fft_forward(nfft);
    let inverse = planner.plan_fft_inverse(nfft);
    let weights = band_weights(nfft, fs);
    // Share of white-noise power each band carries (Parseval over the interior bins).
    let band_power: Vec<f64> =
        weights.iter().map(|w| w[1..bins - 1].iter().map(|v| v * v).sum::<f64>() / (bins - 2) as f64).collect();
    let rt60: Vec<f64> = SYNTH_BANDS.iter().map(|&x| spec.rt60_s[(x + 3).clamp(0, 6) as usize]).collect();
    let delta: Vec<f64> = rt60.iter().map(|t| 3.0 * LN_10 / t).collect();
    let beta: Vec<f64> = rt60.iter().map(|&t| (1.0 - eyring_absorption(spec.dimensions_m, t)).sqrt()).collect();

    let c = SPEED_OF_SOUND_M_PER_S;
    let tail_rms = (4.0 * PI * c / (spec.volume_m3() * fs)).sqrt();
    let fade_start = spec.mixing_time_s - spec.crossfade_s / 2.0;
    let fade_end = spec.mixing_time_s + spec.crossfade_s / 2.0;
    let handover = |t: f64| ((t - fade_start) / spec.crossfade_s).clamp(0.0, 1.0) * PI / 2.0;

    let mut noise = Noise::new(seed);
    let mut out = Vec::with_capacity(2);
    for receiver in 0..2 {
        // --- early part: image sources, one train per band (the reflection factor is per band) ---
        let images = image_sources(spec, receiver, fade_end);
        let placed: Vec<(i64, [f64; (2 * SINC_HALF_TAPS + 1) as usize], f64, i32)> = images
            .iter()
            .map(|im| {
                let (first, taps) = fractional_impulse(im.delay_s * fs);
                (first, taps, handover(im.delay_s).cos() / im.distance_m, im.reflections as i32)
            })
            .collect();
        let mut acc = vec![Complex64::new(0.0, 0.0); bins];
        let mut time = vec![0.0; nfft];
        let mut spectrum = forward.make_output_vec();
        for (b, w) in weights.iter().enumerate() {
            time.iter_mut().for_each(|v| *v = 0.0);
            for (first, taps, gain, k) in &placed {
                let g = gain * beta[b].powi(*k);
                for (j, tap) in taps.iter().enumerate() {
                    let i = first + j as i64;
                    if (0..nfft as i64).contains(&i) {
                        time[i as usize] += g * tap;
                    }
                }
            }
            forward.process(&mut time, &mut spectrum).expect("buffer sizes come from the plan");
            for ((a, s), wk) in acc.iter_mut().zip(&spectrum).zip(w) {
                *a += s * wk;
            }
        }
        acc[0].im = 0.0;
        acc[bins - 1].im = 0.0;
        let mut ir = vec![0.0; nfft];
        inverse.process(&mut acc, &mut ir).expect("DC and Nyquist bins are real");
        ir.truncate(frames);
        ir.iter_mut().for_each(|v| *v /= nfft as f64);

        // --- diffuse tail: band noise at constant short-time power, exponential envelope per band ---
        let mut white: Vec<f64> = (0..nfft).map(|_| f64::from(noise.sample()) * 3f64.sqrt()).collect();
        let mut white_spectrum = forward.make_output_vec();
        forward.process(&mut white, &mut white_spectrum).expect("buffer sizes come from the plan");
        let mut band = vec![0.0; nfft];
        let first_tail = (fade_start * fs).floor() as usize;
        for (b, w) in weights.iter().enumerate() {
            let mut s: Vec<Complex64> = white_spectrum.iter().zip(w).map(|(x, wk)| x * wk / nfft as f64).collect();
            s[0].im = 0.0;
            s[bins - 1].im = 0.0;
            inverse.process(&mut s, &mut band).expect("DC and Nyquist bins are real");
            // Running mean square over a centred window, from a prefix sum.
            let mut prefix = vec![0.0; frames + power_window + 1];
            for i in 0..frames + power_window {
                prefix[i + 1] = prefix[i] + band[i] * band[i];
            }
            let level = tail_rms * band_power[b].sqrt();
            for (n, y) in ir.iter_mut().enumerate().skip(first_tail) {
                let lo = n.saturating_sub(power_window / 2);
                let hi = lo + power_window;
                let ms = (prefix[hi] - prefix[lo]) / power_window as f64;
                let t = n as f64 / fs;
                let env = level * (-delta[b] * t).exp() * handover(t).sin();
                if ms > 0.0 {
                    *y += env * band[n] / ms.sqrt();
                }
            }
        }

        let fade = (END_FADE_S * fs).round() as usize;
        for (j, y) in ir[frames - fade..].iter_mut().enumerate() {
            *y *= 0.5 + 0.5 * (PI * (j as f64 + 0.5) / fade as f64).cos();
        }
        out.push(ir.iter().map(|&v| v as f32).collect());
    }
    out
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn band_weights_are_a_partition_of_unity() {
        let w = band_weights(4096, 48_000.0);
        for k in 0..w[0].len() {
            let sum: f64 = w.iter().map(|row| row[k]).sum();
            assert!((sum - 1.0).abs() < 1e-12, "bin {k}: {sum}");
            assert!(w.iter().all(|row| (0.0..=1.0).contains(&row[k])));
        }
        // 1 kHz lies deep inside its band.
        let k = (1000.0 * 4096.0 / 48_000.0) as usize;
        assert!((w[4][k] - 1.0).abs() < 1e-12);
    }

    #[test]
    fn fractional_impulse_has_unit_sum_and_energy() {
        for d in [100.0, 100.25, 100.5, 100.9] {
            let (_, taps) = fractional_impulse(d);
            let sum: f64 = taps.iter().sum();
            let energy: f64 = taps.iter().map(|t| t * t).sum();
            assert!((sum - 1.0).abs() < 0.01, "{d}: sum {sum}");
            // A half-sample delay loses some energy near Nyquist (finite filter): -0.27 dB at 0.5.
            assert!((energy - 1.0).abs() < 0.08, "{d}: energy {energy}");
        }
    }

    #[test]
    fn presets_validate() {
        for spec in RoomSpec::presets() {
            assert_eq!(spec.validate(), Ok(()), "{}", spec.name);
        }
        let mut bad = RoomSpec::tiled_stairwell();
        bad.source_m[2] = 13.0;
        assert!(matches!(bad.validate(), Err(RoomSpecError::OutsideRoom { point: "source", .. })));
        let mut bad = RoomSpec::tiled_stairwell();
        bad.mixing_time_s = 0.005;
        assert!(matches!(bad.validate(), Err(RoomSpecError::Timing { .. })));
        let mut bad = RoomSpec::tiled_stairwell();
        bad.mixing_time_s = 0.02;
        assert!(matches!(bad.validate(), Err(RoomSpecError::MixingBeforeDirect { .. })));
        let mut bad = RoomSpec::tiled_stairwell();
        bad.receivers_m[1] = bad.source_m;
        assert!(matches!(bad.validate(), Err(RoomSpecError::TooClose { receiver: 1, .. })));
    }
}
