//! Room-acoustic analysis of impulse responses: Schroeder decay curves, reverberation times (EDT, T20, T30),
//! octave-band filters, clarity, definition and centre time.
//!
//! Pure DSP on slices: no I/O, no state between calls. Every function that returns a `Vec` allocates; none of
//! this belongs on the audio thread.
//!
//! # Methods
//!
//! - **Energy decay curve** (EDC): Schroeder's backward integration of the squared impulse response,
//!   E(t) = sum over tau >= t of h^2(tau), in dB re. the total energy (M. R. Schroeder, "New method of measuring
//!   reverberation time", JASA 37(3), 1965). See [`schroeder_decay_db`].
//! - **Reverberation time**: a least-squares line through the EDC between two levels, extrapolated to a 60 dB
//!   fall (ISO 3382-1:2009 and ISO 3382-2:2008): EDT from 0 to -10 dB, T20 from -5 to -25 dB, T30 from -5 to
//!   -35 dB, each range starting where the curve *first* reaches its upper level and ending where it first
//!   reaches its lower one. See [`reverberation_time`], [`t30`], [`t20`], [`edt`], [`fit_decay`].
//! - **Octave bands**: IEC 61260-1:2014 base-10 bands, G = 10^(3/10), centres 1000 G^x Hz, edges a factor
//!   G^(1/2) either side. The filter is a Butterworth band-pass of order 3 (six poles; order 3 is common
//!   practice for class-1 octave filters, from memory), designed from the analog prototype by the low-pass to
//!   band-pass transform and the bilinear transform with both edges pre-warped, run as three biquads in f64.
//!   See [`OctaveFilter`].
//! - **Clarity, definition, centre time** (ISO 3382-1:2009, annex A): [`clarity_db`], [`definition`],
//!   [`centre_time_s`].
//!
//! # When there is no answer
//!
//! A decay that does not reach the needed level, or one that is buried in noise before it gets there, has no
//! reverberation time; the functions return [`AnalysisError`] instead of a number.
//! [`reverberation_time`] refuses a fit when the energy still to come from a noise floor (estimated as the mean
//! square of the last 10% of the response) is less than [`NOISE_HEADROOM_DB`] below the integrated energy at the
//! bottom of the evaluation range: a floor that close bends the Schroeder curve and lengthens the result. This
//! is our own conservative check in the spirit of ISO 3382-1's rule that the noise be at least 10 dB below the
//! bottom of the evaluation range; it is not Lundeby's iterative truncation (Lundeby et al., Acustica 81,
//! 1995), so trim a measured response to where it meets its noise floor before analysing it. A response that
//! simply stops before it has decayed enough is refused by the same check.
//!
//! ```
//! use partita_room::analysis::{t30, OctaveBand, OctaveFilter, FilterPhase};
//!
//! // White noise under an exponential envelope with T60 = 2 s.
//! let fs = 48_000.0;
//! let delta = 6.9078 / 2.0;
//! let mut noise = partita_core::synth::Noise::new(3);
//! let ir: Vec<f32> = (0..120_000).map(|n| noise.sample() * (-delta * n as f64 / fs).exp() as f32).collect();
//! let broadband = t30(&ir, fs)?;
//! assert!((broadband - 2.0).abs() < 0.04);
//!
//! // One octave band: band-limited noise scatters more from take to take.
//! let filter = OctaveFilter::new(OctaveBand::from_nominal_hz(1000.0).unwrap(), fs, FilterPhase::Causal)?;
//! let band = t30(&filter.process(&ir), fs)?;
//! assert!((band - 2.0).abs() < 0.1);
//! # Ok::<(), partita_room::analysis::AnalysisError>(())
//! ```

use std::f64::consts::PI;
use std::fmt;

use rustfft::num_complex::Complex64;

/// How far (dB) the noise energy still to come must lie below the integrated energy at the bottom of an
/// evaluation range for [`reverberation_time`] to accept the fit. 10 dB, after ISO 3382-1's headroom rule.
pub const NOISE_HEADROOM_DB: f64 = 10.0;

/// The onset threshold: the response starts at its first sample within 20 dB of its peak (ISO 3382-1:2009,
/// annex A: the start is where the signal rises significantly above the noise but before the maximum, and no
/// more than 20 dB below it; from memory).
pub const ONSET_THRESHOLD_DB: f64 = -20.0;

/// Why an analysis produced no number.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum AnalysisError {
    /// The signal has no samples.
    Empty,
    /// A sample is NaN or infinite.
    NotFinite {
        /// Index of the first bad sample.
        index: usize,
    },
    /// Every sample is zero: there is nothing to measure.
    Silent,
    /// The sample rate is not a positive finite number.
    InvalidSampleRate {
        /// The rate given.
        sample_rate_hz: f64,
    },
    /// An evaluation range must fall: `0 >= start_db > end_db`, both finite.
    InvalidRange {
        /// Upper level of the range.
        start_db: f64,
        /// Lower level of the range.
        end_db: f64,
    },
    /// The decay curve never falls to `needed_db`; the lowest level it reaches is `reached_db`.
    DecayTooShallow {
        /// The level the range needs.
        needed_db: f64,
        /// The lowest finite level of the curve.
        reached_db: f64,
    },
    /// Fewer than three points lie in the evaluation range: the decay is too fast for the sample rate.
    TooFewPoints {
        /// Points found.
        points: usize,
    },
    /// The fitted line does not fall.
    NotDecaying {
        /// Its slope in dB per second.
        slope_db_per_s: f64,
    },
    /// A noise floor lies too close below the bottom of the evaluation range (see the module docs).
    NoiseFloorTooHigh {
        /// How far below the integrated energy the noise still to come lies, in dB.
        headroom_db: f64,
        /// How far it has to lie ([`NOISE_HEADROOM_DB`]).
        needed_db: f64,
    },
    /// An octave band's upper edge is at or above the Nyquist frequency.
    BandAboveNyquist {
        /// Exact centre frequency of the band.
        centre_hz: f64,
        /// The sample rate.
        sample_rate_hz: f64,
    },
    /// The response ends before the time limit a parameter needs (e.g. 80 ms for C80).
    TooShort {
        /// Frames after the onset the parameter needs.
        needed_frames: usize,
        /// Frames after the onset there are.
        frames: usize,
    },
}

impl fmt::Display for AnalysisError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Empty => write!(f, "the impulse response has no samples"),
            Self::NotFinite { index } => write!(f, "sample {index} is NaN or infinite; sanitize the response first"),
            Self::Silent => write!(f, "the impulse response is all zeros; there is no decay to measure"),
            Self::InvalidSampleRate { sample_rate_hz } => {
                write!(f, "sample rate {sample_rate_hz} Hz is not a positive finite number")
            }
            Self::InvalidRange { start_db, end_db } => write!(
                f,
                "evaluation range {start_db} dB to {end_db} dB does not fall; give 0 >= start > end, both finite"
            ),
            Self::DecayTooShallow { needed_db, reached_db } => write!(
                f,
                "the decay curve reaches only {reached_db:.1} dB but the range needs {needed_db:.1} dB; \
                 use a longer response or a shorter range (T20, EDT)"
            ),
            Self::TooFewPoints { points } => write!(
                f,
                "only {points} samples lie in the evaluation range; the decay is too fast for this sample rate"
            ),
            Self::NotDecaying { slope_db_per_s } => {
                write!(f, "the fitted decay slope is {slope_db_per_s} dB/s; the response does not decay")
            }
            Self::NoiseFloorTooHigh { headroom_db, needed_db } => write!(
                f,
                "the noise floor lies only {headroom_db:.1} dB below the decay at the bottom of the range \
                 (needs {needed_db:.1} dB); trim the response where it meets the noise, or use a shorter range"
            ),
            Self::BandAboveNyquist { centre_hz, sample_rate_hz } => write!(
                f,
                "the {centre_hz:.0} Hz octave band reaches above the Nyquist frequency of a {sample_rate_hz} Hz \
                 signal; use a lower band or a higher sample rate"
            ),
            Self::TooShort { needed_frames, frames } => write!(
                f,
                "the response has {frames} frames after its onset but the parameter needs more than \
                 {needed_frames}"
            ),
        }
    }
}

impl std::error::Error for AnalysisError {}

fn check_rate(sample_rate_hz: f64) -> Result<(), AnalysisError> {
    if sample_rate_hz.is_finite() && sample_rate_hz > 0.0 {
        Ok(())
    } else {
        Err(AnalysisError::InvalidSampleRate { sample_rate_hz })
    }
}

/// Converts, checks finiteness and non-silence.
fn to_f64<T: Copy + Into<f64>>(ir: &[T]) -> Result<Vec<f64>, AnalysisError> {
    if ir.is_empty() {
        return Err(AnalysisError::Empty);
    }
    let h: Vec<f64> = ir.iter().map(|&v| v.into()).collect();
    if let Some(index) = h.iter().position(|v| !v.is_finite()) {
        return Err(AnalysisError::NotFinite { index });
    }
    if h.iter().all(|&v| v == 0.0) {
        return Err(AnalysisError::Silent);
    }
    Ok(h)
}

/// Backward-integrated energy: `e[n] = sum_{k >= n} h[k]^2`, summed from the end (small terms first).
fn backward_energy(h: &[f64]) -> Vec<f64> {
    let mut e = vec![0.0; h.len()];
    let mut acc = 0.0;
    for (slot, &v) in e.iter_mut().zip(h).rev() {
        acc += v * v;
        *slot = acc;
    }
    e
}

fn energy_to_db(e: &[f64]) -> Vec<f64> {
    let total = e[0];
    e.iter().map(|&v| 10.0 * (v / total).log10()).collect()
}

/// The index of the first sample within [`ONSET_THRESHOLD_DB`] (20 dB) of the response's peak magnitude: where
/// the response starts, for the parameters that are timed from the start (EDT, C80, D50, centre time).
///
/// # Errors
/// [`AnalysisError::Empty`], [`AnalysisError::NotFinite`], [`AnalysisError::Silent`].
pub fn onset_index<T: Copy + Into<f64>>(ir: &[T]) -> Result<usize, AnalysisError> {
    let h = to_f64(ir)?;
    Ok(onset_of(&h))
}

fn onset_of(h: &[f64]) -> usize {
    let peak = h.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let threshold = peak * 10f64.powf(ONSET_THRESHOLD_DB / 20.0);
    h.iter().position(|v| v.abs() >= threshold).unwrap_or(0)
}

/// The Schroeder energy decay curve of `ir`, in a new vector, in dB re. its total energy: element n is
/// `10 log10(sum_{k >= n} h[k]^2 / sum_k h[k]^2)`, so element 0 is exactly 0 dB and the curve never rises. Where
/// no energy remains (trailing zeros) the value is negative infinity. The integration runs to the last sample:
/// there is no noise compensation (see the module docs).
///
/// Schroeder, JASA 37(3), 1965.
///
/// # Errors
/// [`AnalysisError::Empty`], [`AnalysisError::NotFinite`], [`AnalysisError::Silent`].
pub fn schroeder_decay_db<T: Copy + Into<f64>>(ir: &[T]) -> Result<Vec<f64>, AnalysisError> {
    let h = to_f64(ir)?;
    Ok(energy_to_db(&backward_energy(&h)))
}

/// A straight line fitted to a decay curve over an evaluation range, and the reverberation time it implies.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DecayFit {
    /// Upper level of the evaluation range (dB re. the curve's start).
    pub start_db: f64,
    /// Lower level of the evaluation range.
    pub end_db: f64,
    /// Time of the first point of the range, seconds after the curve's first sample.
    pub start_s: f64,
    /// Time of the last point of the range.
    pub end_s: f64,
    /// Fitted slope in dB per second (negative for a decay).
    pub slope_db_per_s: f64,
    /// Fitted level at time zero, dB.
    pub intercept_db: f64,
    /// The line's time to fall 60 dB: -60 / slope, seconds.
    pub reverberation_time_s: f64,
    /// Non-linearity of the decay, xi = 1000 (1 - r^2) in per mille, r the correlation coefficient of the fit
    /// (ISO 3382-2:2008, annex B; from memory). Near 0 for a straight decay; above about 10 the curve is bent.
    pub nonlinearity_permille: f64,
    /// Number of curve points the line was fitted to.
    pub points: usize,
}

/// Fits a least-squares line to the decay curve `edc_db` (one value per sample, dB, as from
/// [`schroeder_decay_db`]) between the first point at or below `start_db` and the first point at or below
/// `end_db`, both included; non-finite points are skipped.
///
/// ISO 3382-1:2009 / ISO 3382-2:2008 evaluation ranges: EDT (0, -10), T20 (-5, -25), T30 (-5, -35).
///
/// # Errors
/// [`AnalysisError::InvalidSampleRate`], [`AnalysisError::InvalidRange`], [`AnalysisError::Empty`],
/// [`AnalysisError::DecayTooShallow`] when the curve never reaches `start_db` or `end_db`,
/// [`AnalysisError::TooFewPoints`] with fewer than 3 points in range, [`AnalysisError::NotDecaying`].
pub fn fit_decay(edc_db: &[f64], sample_rate_hz: f64, start_db: f64, end_db: f64) -> Result<DecayFit, AnalysisError> {
    check_rate(sample_rate_hz)?;
    if !(start_db.is_finite() && end_db.is_finite() && start_db <= 0.0 && end_db < start_db) {
        return Err(AnalysisError::InvalidRange { start_db, end_db });
    }
    if edc_db.is_empty() {
        return Err(AnalysisError::Empty);
    }
    let reached_db = edc_db.iter().copied().filter(|v| v.is_finite()).fold(f64::INFINITY, f64::min);
    let shallow = |needed_db| AnalysisError::DecayTooShallow { needed_db, reached_db };
    let i0 = edc_db.iter().position(|&v| v <= start_db).ok_or(shallow(start_db))?;
    let i1 = i0 + edc_db[i0..].iter().position(|&v| v <= end_db).ok_or(shallow(end_db))?;

    // Centred sums keep the normal equations well conditioned for long curves.
    let pts = || (i0..=i1).filter(|&i| edc_db[i].is_finite()).map(|i| (i as f64 / sample_rate_hz, edc_db[i]));
    let n = pts().count();
    if n < 3 {
        return Err(AnalysisError::TooFewPoints { points: n });
    }
    let (sx, sy) = pts().fold((0.0, 0.0), |(a, b), (x, y)| (a + x, b + y));
    let (mx, my) = (sx / n as f64, sy / n as f64);
    let (mut sxx, mut sxy, mut syy) = (0.0, 0.0, 0.0);
    for (x, y) in pts() {
        let (dx, dy) = (x - mx, y - my);
        sxx += dx * dx;
        sxy += dx * dy;
        syy += dy * dy;
    }
    let slope = sxy / sxx;
    // A flat or NaN slope is no decay.
    if slope.is_nan() || slope >= 0.0 {
        return Err(AnalysisError::NotDecaying { slope_db_per_s: slope });
    }
    let r2 = if syy > 0.0 { (sxy * sxy) / (sxx * syy) } else { 1.0 };
    Ok(DecayFit {
        start_db,
        end_db,
        start_s: i0 as f64 / sample_rate_hz,
        end_s: i1 as f64 / sample_rate_hz,
        slope_db_per_s: slope,
        intercept_db: my - slope * mx,
        reverberation_time_s: -60.0 / slope,
        nonlinearity_permille: 1000.0 * (1.0 - r2),
        points: n,
    })
}

/// An ISO 3382 evaluation range of the decay curve.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum DecayRange {
    /// Early decay time: 0 to -10 dB.
    Edt,
    /// T20: -5 to -25 dB.
    T20,
    /// T30: -5 to -35 dB.
    T30,
}

impl DecayRange {
    /// `(start_db, end_db)` of the range (ISO 3382-1:2009, clause 3 and annex A).
    pub fn levels_db(self) -> (f64, f64) {
        match self {
            Self::Edt => (0.0, -10.0),
            Self::T20 => (-5.0, -25.0),
            Self::T30 => (-5.0, -35.0),
        }
    }
}

/// Measures a reverberation time of `ir`: trims it to its onset ([`onset_index`]), computes the Schroeder curve
/// ([`schroeder_decay_db`]), fits the `range` ([`fit_decay`]) and checks the noise headroom (module docs).
/// Times in the result count from the onset. Band-filter the response first ([`OctaveFilter`]) for a band value.
///
/// # Errors
/// Those of [`schroeder_decay_db`] and [`fit_decay`], and [`AnalysisError::NoiseFloorTooHigh`].
pub fn reverberation_time<T: Copy + Into<f64>>(
    ir: &[T],
    sample_rate_hz: f64,
    range: DecayRange,
) -> Result<DecayFit, AnalysisError> {
    check_rate(sample_rate_hz)?;
    let h = to_f64(ir)?;
    let h = &h[onset_of(&h)..];
    let energy = backward_energy(h);
    let (start_db, end_db) = range.levels_db();
    let fit = fit_decay(&energy_to_db(&energy), sample_rate_hz, start_db, end_db)?;

    let bottom = (fit.end_s * sample_rate_hz).round() as usize;
    let tail = (h.len() / 10).max(1);
    let noise_ms = h[h.len() - tail..].iter().map(|v| v * v).sum::<f64>() / tail as f64;
    let noise_to_come = noise_ms * (h.len() - bottom) as f64;
    if noise_to_come > 0.0 {
        let headroom_db = 10.0 * (energy[bottom] / noise_to_come).log10();
        if headroom_db < NOISE_HEADROOM_DB {
            return Err(AnalysisError::NoiseFloorTooHigh { headroom_db, needed_db: NOISE_HEADROOM_DB });
        }
    }
    Ok(fit)
}

/// T30 in seconds: [`reverberation_time`] over -5 to -35 dB.
///
/// # Errors
/// Those of [`reverberation_time`].
pub fn t30<T: Copy + Into<f64>>(ir: &[T], sample_rate_hz: f64) -> Result<f64, AnalysisError> {
    reverberation_time(ir, sample_rate_hz, DecayRange::T30).map(|f| f.reverberation_time_s)
}

/// T20 in seconds: [`reverberation_time`] over -5 to -25 dB.
///
/// # Errors
/// Those of [`reverberation_time`].
pub fn t20<T: Copy + Into<f64>>(ir: &[T], sample_rate_hz: f64) -> Result<f64, AnalysisError> {
    reverberation_time(ir, sample_rate_hz, DecayRange::T20).map(|f| f.reverberation_time_s)
}

/// Early decay time in seconds: [`reverberation_time`] over 0 to -10 dB, extrapolated to 60 dB.
///
/// # Errors
/// Those of [`reverberation_time`].
pub fn edt<T: Copy + Into<f64>>(ir: &[T], sample_rate_hz: f64) -> Result<f64, AnalysisError> {
    reverberation_time(ir, sample_rate_hz, DecayRange::Edt).map(|f| f.reverberation_time_s)
}

/// Early and late energy of `ir` split `early_ms` after its onset, `(early, late, frames after onset)`.
fn split_energy<T: Copy + Into<f64>>(
    ir: &[T],
    sample_rate_hz: f64,
    early_ms: f64,
) -> Result<(f64, f64, usize), AnalysisError> {
    check_rate(sample_rate_hz)?;
    let h = to_f64(ir)?;
    let h = &h[onset_of(&h)..];
    let split = (early_ms * 1e-3 * sample_rate_hz).round().max(0.0) as usize;
    if split >= h.len() {
        return Err(AnalysisError::TooShort { needed_frames: split, frames: h.len() });
    }
    let early = h[..split].iter().map(|v| v * v).sum::<f64>();
    let late = h[split..].iter().map(|v| v * v).sum::<f64>();
    Ok((early, late, split))
}

/// Clarity C_te in dB: 10 log10(early / late energy) split `early_ms` after the onset; `early_ms` = 80 gives
/// C80 (music), 50 gives C50 (speech) (ISO 3382-1:2009, annex A). The split falls on the nearest sample.
///
/// # Errors
/// Those of [`onset_index`], [`AnalysisError::InvalidSampleRate`], and [`AnalysisError::TooShort`] when the
/// response ends before the split or holds no energy after it.
pub fn clarity_db<T: Copy + Into<f64>>(ir: &[T], sample_rate_hz: f64, early_ms: f64) -> Result<f64, AnalysisError> {
    let (early, late, split) = split_energy(ir, sample_rate_hz, early_ms)?;
    if late == 0.0 {
        return Err(AnalysisError::TooShort { needed_frames: split, frames: split });
    }
    Ok(10.0 * (early / late).log10())
}

/// Definition D50: the fraction (0..=1) of the energy that arrives in the first 50 ms after the onset
/// (ISO 3382-1:2009, annex A).
///
/// # Errors
/// As [`clarity_db`] (a response shorter than 50 ms after its onset is [`AnalysisError::TooShort`]).
pub fn definition<T: Copy + Into<f64>>(ir: &[T], sample_rate_hz: f64) -> Result<f64, AnalysisError> {
    let (early, late, _) = split_energy(ir, sample_rate_hz, 50.0)?;
    Ok(early / (early + late))
}

/// Centre time Ts in seconds: the first moment of the squared response, sum t h^2 / sum h^2, t from the onset
/// (ISO 3382-1:2009, annex A).
///
/// # Errors
/// Those of [`onset_index`] and [`AnalysisError::InvalidSampleRate`].
pub fn centre_time_s<T: Copy + Into<f64>>(ir: &[T], sample_rate_hz: f64) -> Result<f64, AnalysisError> {
    check_rate(sample_rate_hz)?;
    let h = to_f64(ir)?;
    let h = &h[onset_of(&h)..];
    let (mut num, mut den) = (0.0, 0.0);
    for (n, v) in h.iter().enumerate() {
        num += n as f64 * v * v;
        den += v * v;
    }
    Ok(num / den / sample_rate_hz)
}

/// The IEC 61260-1:2014 octave band ratio G = 10^(3/10) (base-10 system).
pub const OCTAVE_RATIO: f64 = 1.995_262_314_968_879_6;

/// An octave band of the IEC 61260-1:2014 base-10 series: band `x` has the exact centre 1000 G^x Hz,
/// G = 10^(3/10), and edges a factor G^(1/2) below and above it. Band 0 is 1 kHz.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub struct OctaveBand {
    index: i32,
}

/// Nominal centres of bands -5..=4 (IEC 61260-1 / ISO 266 preferred values, from memory).
const NOMINAL_HZ: [f64; 10] = [31.5, 63.0, 125.0, 250.0, 500.0, 1000.0, 2000.0, 4000.0, 8000.0, 16000.0];

impl OctaveBand {
    /// The seven bands room acoustics usually reports, 125 Hz to 8 kHz (ISO 3382-1 asks for 125 Hz to 4 kHz at
    /// least; from memory).
    pub const ROOM: [OctaveBand; 7] =
        [Self::new(-3), Self::new(-2), Self::new(-1), Self::new(0), Self::new(1), Self::new(2), Self::new(3)];

    /// Band `index` of the series (0 = 1 kHz, -1 = 500 Hz, 1 = 2 kHz, ...).
    pub const fn new(index: i32) -> Self {
        Self { index }
    }

    /// The band whose nominal centre is `hz` (31.5 Hz to 16 kHz), or `None`.
    pub fn from_nominal_hz(hz: f64) -> Option<Self> {
        NOMINAL_HZ.iter().position(|&n| (n - hz).abs() < 1e-9 * n).map(|i| Self::new(i as i32 - 5))
    }

    /// The band's index in the series (0 = 1 kHz).
    pub fn index(self) -> i32 {
        self.index
    }

    /// Exact mid-band frequency, 1000 G^x Hz.
    pub fn centre_hz(self) -> f64 {
        1000.0 * OCTAVE_RATIO.powi(self.index)
    }

    /// The nominal (rounded) centre used in labels: 125, 250, ... Hz; the exact centre outside 31.5 Hz..16 kHz.
    pub fn nominal_hz(self) -> f64 {
        usize::try_from(self.index + 5).ok().and_then(|i| NOMINAL_HZ.get(i).copied()).unwrap_or(self.centre_hz())
    }

    /// Lower band edge, centre / G^(1/2).
    pub fn lower_edge_hz(self) -> f64 {
        self.centre_hz() / OCTAVE_RATIO.sqrt()
    }

    /// Upper band edge, centre x G^(1/2).
    pub fn upper_edge_hz(self) -> f64 {
        self.centre_hz() * OCTAVE_RATIO.sqrt()
    }
}

impl fmt::Display for OctaveBand {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        let hz = self.nominal_hz();
        if hz >= 1000.0 {
            write!(f, "{} kHz", hz / 1000.0)
        } else {
            write!(f, "{hz} Hz")
        }
    }
}

/// How an [`OctaveFilter`] runs over a signal.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum FilterPhase {
    /// One causal pass: magnitude -3.01 dB at the band edges. Its group delay (a few periods of the centre
    /// frequency, largest near the edges) shifts the decay later but leaves its slope, so T20/T30 are unaffected;
    /// its own ringing (time constant about 1 / (pi x bandwidth), under 4 ms at 125 Hz) can lengthen a very short
    /// EDT in low bands.
    Causal,
    /// Forward then backward over the whole signal (zero phase, no group delay). The design's bandwidth is
    /// widened so the *combined* magnitude is -3.01 dB at the band edges like the causal filter, with twice the
    /// stop-band attenuation in dB. Ringing spreads both ways in time, so the decay onset smears slightly earlier.
    ZeroPhase,
}

#[derive(Debug, Clone, Copy, PartialEq)]
struct Biquad {
    b0: f64,
    b1: f64,
    b2: f64,
    a1: f64,
    a2: f64,
}

impl Biquad {
    /// Transposed direct form II, in place.
    fn run(&self, x: &mut [f64]) {
        let (mut s1, mut s2) = (0.0, 0.0);
        for v in x.iter_mut() {
            let input = *v;
            let y = self.b0 * input + s1;
            s1 = self.b1 * input - self.a1 * y + s2;
            s2 = self.b2 * input - self.a2 * y;
            *v = y;
        }
    }

    fn response(&self, z_inv: Complex64) -> Complex64 {
        let z2 = z_inv * z_inv;
        (self.b0 + z_inv * self.b1 + z2 * self.b2) / (1.0 + z_inv * self.a1 + z2 * self.a2)
    }
}

/// An octave band-pass filter: Butterworth, order [`OctaveFilter::ORDER`] (2 x ORDER poles), bilinear transform
/// with pre-warped edges, normalized to 0 dB at the digital image of the analog centre frequency.
///
/// Design: analog Butterworth low-pass prototype poles p_k = exp(j pi (2k + N + 1) / (2N)); low-pass to
/// band-pass substitution s -> (s^2 + w0^2) / (B s) with w0^2 = w1 w2 and B = w2 - w1 (pre-warped edges
/// w = 2 fs tan(pi f / fs)); bilinear transform z = (1 + s/(2 fs)) / (1 - s/(2 fs)) (textbook: Oppenheim &
/// Schafer, Discrete-Time Signal Processing, ch. 7). Each section has zeros at z = 1 and z = -1.
///
/// Within its design the filter meets the shape IEC 61260-1 asks for (0 dB in the band, -3 dB at the edges,
/// about -19.6 dB at the neighbouring centres); it is not certified against the standard's class limits.
#[derive(Debug, Clone, PartialEq)]
pub struct OctaveFilter {
    band: OctaveBand,
    sample_rate_hz: f64,
    phase: FilterPhase,
    sections: Vec<Biquad>,
}

impl OctaveFilter {
    /// Butterworth prototype order.
    pub const ORDER: usize = 3;

    /// Designs the filter for `band` at `sample_rate_hz`. Allocates.
    ///
    /// # Errors
    /// [`AnalysisError::InvalidSampleRate`]; [`AnalysisError::BandAboveNyquist`] when the upper edge is not
    /// below fs / 2.
    pub fn new(band: OctaveBand, sample_rate_hz: f64, phase: FilterPhase) -> Result<Self, AnalysisError> {
        check_rate(sample_rate_hz)?;
        let fs = sample_rate_hz;
        if band.upper_edge_hz() >= 0.5 * fs {
            return Err(AnalysisError::BandAboveNyquist { centre_hz: band.centre_hz(), sample_rate_hz });
        }
        let n = Self::ORDER;
        let warp = |f: f64| 2.0 * fs * (PI * f / fs).tan();
        let (w1, w2) = (warp(band.lower_edge_hz()), warp(band.upper_edge_hz()));
        let w0 = (w1 * w2).sqrt();
        // Zero phase squares the magnitude: widen the prototype so each pass is -1.505 dB at the edges,
        // |H(1)|^2 = 1 / (1 + W^(-2N)) = 2^(-1/2)  =>  W = (sqrt(2) - 1)^(-1 / (2N)).
        let widen = match phase {
            FilterPhase::Causal => 1.0,
            FilterPhase::ZeroPhase => (std::f64::consts::SQRT_2 - 1.0).powf(-1.0 / (2 * n) as f64),
        };
        let bw = (w2 - w1) * widen;

        let mut sections = Vec::with_capacity(n);
        let mut push = |s: Complex64| {
            let half = s / (2.0 * fs);
            let z = (1.0 + half) / (1.0 - half);
            sections.push(Biquad { b0: 1.0, b1: 0.0, b2: -1.0, a1: -2.0 * z.re, a2: z.norm_sqr() });
        };
        for k in 0..n {
            let p = Complex64::from_polar(1.0, PI * (2 * k + n + 1) as f64 / (2 * n) as f64);
            if p.im < -1e-12 {
                continue; // the conjugate of an upper pole: its band-pass poles are already in a section
            }
            // Band-pass poles from p: roots of s^2 - p B s + w0^2 = 0.
            let pb = p * bw;
            let disc = (pb * pb - 4.0 * w0 * w0).sqrt();
            push((pb + disc) / 2.0);
            if p.im > 1e-12 {
                push((pb - disc) / 2.0);
            } // a real prototype pole gives one conjugate pair: one section
        }
        let mut filter = Self { band, sample_rate_hz, phase, sections };
        // Normalize each section to unit gain at the centre's digital image.
        let omega0 = 2.0 * (w0 / (2.0 * fs)).atan();
        let z_inv = Complex64::from_polar(1.0, -omega0);
        for s in &mut filter.sections {
            let g = 1.0 / s.response(z_inv).norm();
            s.b0 *= g;
            s.b2 *= g;
        }
        Ok(filter)
    }

    /// The band this filter passes.
    pub fn band(&self) -> OctaveBand {
        self.band
    }

    /// The sample rate it was designed for.
    pub fn sample_rate_hz(&self) -> f64 {
        self.sample_rate_hz
    }

    /// Causal or zero phase.
    pub fn phase(&self) -> FilterPhase {
        self.phase
    }

    /// Filters `x` into a new vector of the same length (the response beyond the last input sample is not
    /// computed).
    pub fn process<T: Copy + Into<f64>>(&self, x: &[T]) -> Vec<f64> {
        let mut y: Vec<f64> = x.iter().map(|&v| v.into()).collect();
        self.sections.iter().for_each(|s| s.run(&mut y));
        if self.phase == FilterPhase::ZeroPhase {
            y.reverse();
            self.sections.iter().for_each(|s| s.run(&mut y));
            y.reverse();
        }
        y
    }

    /// The designed magnitude response at `frequency_hz` in dB, evaluated from the coefficients (the combined
    /// two-pass response for [`FilterPhase::ZeroPhase`]).
    pub fn gain_db(&self, frequency_hz: f64) -> f64 {
        let z_inv = Complex64::from_polar(1.0, -2.0 * PI * frequency_hz / self.sample_rate_hz);
        let mag: f64 = self.sections.iter().map(|s| s.response(z_inv).norm()).product();
        let passes = if self.phase == FilterPhase::ZeroPhase { 2.0 } else { 1.0 };
        passes * 20.0 * mag.log10()
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn band_centres_follow_iec_61260_base_10() {
        // IEC 61260-1:2014: fm = 1000 * 10^(3x/10); 500 Hz band exact centre 501.19 Hz, 2 kHz band 1995.26 Hz.
        assert!((OctaveBand::new(-1).centre_hz() - 501.187).abs() < 1e-3);
        assert!((OctaveBand::new(1).centre_hz() - 1995.262).abs() < 1e-3);
        assert!((OctaveBand::new(-3).centre_hz() - 125.893).abs() < 1e-3);
        assert_eq!(OctaveBand::from_nominal_hz(125.0), Some(OctaveBand::new(-3)));
        assert_eq!(OctaveBand::from_nominal_hz(130.0), None);
        assert_eq!(OctaveBand::new(2).to_string(), "4 kHz");
        assert_eq!(OctaveBand::new(-2).to_string(), "250 Hz");
        let b = OctaveBand::new(0);
        assert!((b.upper_edge_hz() / b.lower_edge_hz() - OCTAVE_RATIO).abs() < 1e-12);
    }

    #[test]
    fn schroeder_curve_starts_at_zero_and_never_rises() {
        let mut noise = partita_core::synth::Noise::new(9);
        let h: Vec<f32> = (0..5000).map(|n| noise.sample() * (-(n as f32) / 800.0).exp()).collect();
        let edc = schroeder_decay_db(&h).unwrap();
        assert_eq!(edc[0], 0.0);
        assert!(edc.windows(2).all(|w| w[1] <= w[0]));
        let with_zeros = [1.0f32, 0.5, 0.0, 0.0];
        let edc = schroeder_decay_db(&with_zeros).unwrap();
        assert!(edc[2].is_infinite() && edc[2] < 0.0);
        assert!((edc[1] - 10.0 * (0.25f64 / 1.25).log10()).abs() < 1e-12);
    }

    #[test]
    fn bad_inputs_are_refused() {
        assert_eq!(schroeder_decay_db::<f32>(&[]), Err(AnalysisError::Empty));
        assert_eq!(schroeder_decay_db(&[0.0f32; 8]), Err(AnalysisError::Silent));
        assert_eq!(schroeder_decay_db(&[1.0, f64::NAN]), Err(AnalysisError::NotFinite { index: 1 }));
        let line: Vec<f64> = (0..100).map(|i| -(i as f64)).collect();
        assert!(matches!(fit_decay(&line, 0.0, -5.0, -35.0), Err(AnalysisError::InvalidSampleRate { .. })));
        assert!(matches!(fit_decay(&line, 1.0, -35.0, -5.0), Err(AnalysisError::InvalidRange { .. })));
        assert!(matches!(fit_decay(&line, 1.0, 3.0, -5.0), Err(AnalysisError::InvalidRange { .. })));
        assert_eq!(fit_decay(&line[..3], 1.0, -0.5, -1.5), Err(AnalysisError::TooFewPoints { points: 2 }));
        assert!(OctaveFilter::new(OctaveBand::new(4), 32_000.0, FilterPhase::Causal).is_err());
        assert!(matches!(
            clarity_db(&[1.0f32; 10], 48_000.0, 80.0),
            Err(AnalysisError::TooShort { needed_frames: 3840, frames: 10 })
        ));
    }

    #[test]
    fn fit_of_a_straight_line_is_exact() {
        // -60 dB over 1.5 s at 1 kHz sampling: slope -40 dB/s.
        let fs = 1000.0;
        let line: Vec<f64> = (0..2000).map(|i| -40.0 * i as f64 / fs).collect();
        let fit = fit_decay(&line, fs, -5.0, -35.0).unwrap();
        assert!((fit.reverberation_time_s - 1.5).abs() < 1e-9);
        assert!((fit.slope_db_per_s + 40.0).abs() < 1e-9);
        assert!(fit.intercept_db.abs() < 1e-9);
        assert!(fit.nonlinearity_permille.abs() < 1e-9);
        assert_eq!(fit.points, 751); // indices 125..=875
    }

    #[test]
    fn zero_phase_design_is_three_sections_with_unit_centre_gain() {
        for phase in [FilterPhase::Causal, FilterPhase::ZeroPhase] {
            let f = OctaveFilter::new(OctaveBand::new(0), 48_000.0, phase).unwrap();
            assert_eq!(f.sections.len(), OctaveFilter::ORDER);
            assert!(f.gain_db(1000.0).abs() < 0.01, "{phase:?} {}", f.gain_db(1000.0));
            assert!((f.gain_db(OctaveBand::new(0).upper_edge_hz()) + 3.0103).abs() < 0.01);
        }
    }
}
