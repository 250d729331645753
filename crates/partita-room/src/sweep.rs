//! Exponential sine sweeps for measuring impulse responses: Farina's sweep and its synchronized variant.
//!
//! - **Exponential sweep** (A. Farina, "Simultaneous measurement of impulse response and distortion with a
//!   swept-sine technique", AES 108th Convention, 2000): x(t) = sin(2 pi f1 L (e^(t/L) - 1)) for 0 <= t < T,
//!   with the rate constant L = T / ln(f2 / f1). The instantaneous frequency f1 e^(t/L) runs from f1 to f2 in
//!   T seconds, the same time per octave, so the spectrum falls 3 dB per octave (pink).
//! - **Synchronized sweep** (A. Novak, P. Lotton, L. Simon, "Synchronized swept-sine: theory, application, and
//!   implementation", J. AES 63(10), 2015): x(t) = sin(2 pi f1 L e^(t/L)) with f1 L rounded to a whole number,
//!   which fixes L = round(f1 T / ln(f2/f1)) / f1 and the duration to L ln(f2 / f1). Then sin(n phi(t)) =
//!   x(t + L ln n) exactly, so the n-th harmonic's response after deconvolution is the linear one moved
//!   L ln(n) earlier with its phase intact. Since f1 L is whole, this is the same signal as Farina's formula
//!   with that L and duration, and x(0) = 0.
//!
//! The phase is computed in f64 and only the final sample is rounded to f32. Fades are raised-cosine (half a
//! Hann window) at the start and the end of the sweep; the level is the peak amplitude in dBFS; a silence
//! follows the sweep so the room's reverberation is recorded too.
//!
//! ```
//! use partita_room::sweep::{SweepKind, SweepSpec};
//!
//! let spec = SweepSpec { duration_s: 2.0, silence_s: 0.5, ..SweepSpec::new(SweepKind::Synchronized, 48_000) };
//! let samples = spec.generate()?;
//! assert_eq!(samples.len(), spec.sweep_frames() + spec.silence_frames());
//! // Default level -20 dBFS: the peak is 0.1.
//! let peak = samples.iter().fold(0.0f32, |m, v| m.max(v.abs()));
//! assert!(peak <= 0.1 && peak > 0.099);
//! # Ok::<(), partita_room::sweep::SweepError>(())
//! ```

use std::f64::consts::PI;
use std::fmt;

/// Version of the generator: bump it whenever [`SweepSpec::generate`] would give different samples for the
/// same parameters, so a sidecar written by an older generator is recognised.
pub const SWEEP_GENERATOR_VERSION: u32 = 1;

/// The most frames a sweep and its silence may have together: 2^27 (46 minutes at 48 kHz, 5.8 at 384 kHz).
/// Generating one holds three f64 copies of the sweep, so this bounds it to about 3 GiB, whatever a sweep
/// sidecar asks for.
pub const MAX_SWEEP_FRAMES: u64 = 1 << 27;

/// The default level, dBFS (peak): low, for safety.
pub const DEFAULT_LEVEL_DBFS: f64 = -20.0;

/// Levels above this (dBFS) need an explicit override by the caller (the CLI's `--force`).
pub const MAX_UNFORCED_LEVEL_DBFS: f64 = -6.0;

/// Which sweep formula.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum SweepKind {
    /// Farina's exponential sweep, exactly the requested duration.
    Exponential,
    /// Novak et al.'s synchronized sweep: f1 L is whole, the duration is adjusted to L ln(f2 / f1).
    Synchronized,
}

impl SweepKind {
    /// The name used on the command line and in sidecars.
    pub fn name(self) -> &'static str {
        match self {
            Self::Exponential => "exponential",
            Self::Synchronized => "synchronized",
        }
    }

    /// The kind with this [`name`](Self::name), or `None`.
    pub fn from_name(name: &str) -> Option<Self> {
        [Self::Exponential, Self::Synchronized].into_iter().find(|k| k.name() == name)
    }
}

impl fmt::Display for SweepKind {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Why a sweep cannot be made.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum SweepError {
    /// The sample rate is zero.
    InvalidSampleRate,
    /// The frequencies must satisfy 0 < start < end < fs / 2.
    InvalidFrequencies {
        /// Start frequency.
        start_hz: f64,
        /// End frequency.
        end_hz: f64,
        /// Nyquist frequency.
        nyquist_hz: f64,
    },
    /// A duration is negative, not finite, or the sweep would be shorter than one sample.
    InvalidDuration {
        /// Which duration.
        what: &'static str,
        /// Its value in seconds.
        seconds: f64,
    },
    /// The fades together are longer than the sweep.
    FadesTooLong {
        /// Fade-in plus fade-out, seconds.
        fades_s: f64,
        /// The sweep's duration.
        sweep_s: f64,
    },
    /// The level is not finite or above 0 dBFS.
    InvalidLevel {
        /// The level asked for.
        level_dbfs: f64,
    },
    /// The sweep and its silence together are longer than [`MAX_SWEEP_FRAMES`].
    TooLong {
        /// Frames of sweep and silence asked for (saturated).
        frames: u64,
    },
    /// The synchronized sweep needs f1 L >= 1, a longer sweep or a higher start frequency.
    TooShortToSynchronize {
        /// f1 T / ln(f2 / f1) before rounding.
        cycles: f64,
    },
}

impl fmt::Display for SweepError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::InvalidSampleRate => write!(f, "the sample rate must be positive"),
            Self::InvalidFrequencies { start_hz, end_hz, nyquist_hz } => write!(
                f,
                "sweep from {start_hz} Hz to {end_hz} Hz is not possible: give 0 < start < end < {nyquist_hz} Hz \
                 (the Nyquist frequency)"
            ),
            Self::InvalidDuration { what, seconds } => {
                write!(f, "{what} of {seconds} s is not possible: give a finite, non-negative time (sweep > 0)")
            }
            Self::FadesTooLong { fades_s, sweep_s } => {
                write!(f, "fade-in and fade-out take {fades_s} s but the sweep lasts only {sweep_s} s; shorten them")
            }
            Self::InvalidLevel { level_dbfs } => {
                write!(f, "level {level_dbfs} dBFS is not possible: give a finite level at or below 0 dBFS")
            }
            Self::TooLong { frames } => write!(
                f,
                "the sweep and its silence would be {frames} frames, over the limit of {MAX_SWEEP_FRAMES}; use a \
                 shorter sweep, less silence or a lower sample rate"
            ),
            Self::TooShortToSynchronize { cycles } => write!(
                f,
                "a synchronized sweep needs f1 T / ln(f2/f1) >= 1 (here {cycles:.3}); use a longer sweep or a \
                 higher start frequency"
            ),
        }
    }
}

impl std::error::Error for SweepError {}

/// The parameters of a sweep and its trailing silence. Plain data; [`SweepSpec::generate`] makes the samples.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SweepSpec {
    /// Formula.
    pub kind: SweepKind,
    /// Sample rate of the generated signal.
    pub sample_rate_hz: u32,
    /// Start frequency f1.
    pub start_hz: f64,
    /// End frequency f2.
    pub end_hz: f64,
    /// Requested duration T of the sweep (the synchronized sweep adjusts it: [`SweepSpec::sweep_duration_s`]).
    pub duration_s: f64,
    /// Raised-cosine fade-in at the start of the sweep.
    pub fade_in_s: f64,
    /// Raised-cosine fade-out at the end of the sweep.
    pub fade_out_s: f64,
    /// Peak level of the sweep, dBFS.
    pub level_dbfs: f64,
    /// Silence after the sweep: at least the expected reverberation time.
    pub silence_s: f64,
}

impl SweepSpec {
    /// The defaults: 20 Hz to 20 kHz (or 0.45 fs when lower), 10 s, fade-in 0.1 s, fade-out 0.01 s,
    /// [`DEFAULT_LEVEL_DBFS`], 3 s of silence.
    pub fn new(kind: SweepKind, sample_rate_hz: u32) -> Self {
        Self {
            kind,
            sample_rate_hz,
            start_hz: 20.0,
            end_hz: 20_000f64.min(0.45 * sample_rate_hz as f64),
            duration_s: 10.0,
            fade_in_s: 0.1,
            fade_out_s: 0.01,
            level_dbfs: DEFAULT_LEVEL_DBFS,
            silence_s: 3.0,
        }
    }

    /// Checks the parameters.
    ///
    /// # Errors
    /// Every [`SweepError`] variant names its own condition.
    pub fn validate(&self) -> Result<(), SweepError> {
        if self.sample_rate_hz == 0 {
            return Err(SweepError::InvalidSampleRate);
        }
        let nyquist_hz = 0.5 * self.sample_rate_hz as f64;
        let (start_hz, end_hz) = (self.start_hz, self.end_hz);
        if !(start_hz.is_finite() && end_hz.is_finite() && start_hz > 0.0 && start_hz < end_hz && end_hz < nyquist_hz) {
            return Err(SweepError::InvalidFrequencies { start_hz, end_hz, nyquist_hz });
        }
        for (what, seconds) in [
            ("sweep duration", self.duration_s),
            ("fade-in", self.fade_in_s),
            ("fade-out", self.fade_out_s),
            ("silence", self.silence_s),
        ] {
            if !(seconds.is_finite() && seconds >= 0.0) {
                return Err(SweepError::InvalidDuration { what, seconds });
            }
        }
        if self.duration_s * self.sample_rate_hz as f64 <= 1.0 {
            return Err(SweepError::InvalidDuration { what: "sweep duration", seconds: self.duration_s });
        }
        if !(self.level_dbfs.is_finite() && self.level_dbfs <= 0.0) {
            return Err(SweepError::InvalidLevel { level_dbfs: self.level_dbfs });
        }
        if self.kind == SweepKind::Synchronized {
            let cycles = self.start_hz * self.duration_s / self.ln_ratio();
            if cycles.round() < 1.0 {
                return Err(SweepError::TooShortToSynchronize { cycles });
            }
        }
        let sweep_s = self.sweep_duration_s();
        let fs = self.sample_rate_hz as f64;
        let frames = (sweep_s * fs).ceil() + (self.silence_s * fs).round();
        if frames > MAX_SWEEP_FRAMES as f64 {
            return Err(SweepError::TooLong { frames: frames.min(u64::MAX as f64) as u64 });
        }
        if self.fade_in_s + self.fade_out_s > sweep_s {
            return Err(SweepError::FadesTooLong { fades_s: self.fade_in_s + self.fade_out_s, sweep_s });
        }
        Ok(())
    }

    fn ln_ratio(&self) -> f64 {
        (self.end_hz / self.start_hz).ln()
    }

    /// The rate constant L, seconds: T / ln(f2/f1), or for the synchronized sweep round(f1 T / ln(f2/f1)) / f1.
    /// The n-th harmonic's response lies L ln(n) before the linear one.
    pub fn rate_constant_s(&self) -> f64 {
        let l = self.duration_s / self.ln_ratio();
        match self.kind {
            SweepKind::Exponential => l,
            SweepKind::Synchronized => (self.start_hz * l).round() / self.start_hz,
        }
    }

    /// The sweep's actual duration: the requested one, or L ln(f2/f1) for the synchronized sweep.
    pub fn sweep_duration_s(&self) -> f64 {
        match self.kind {
            SweepKind::Exponential => self.duration_s,
            SweepKind::Synchronized => self.rate_constant_s() * self.ln_ratio(),
        }
    }

    /// Samples of the sweep itself: ceil(duration x fs), all with t < duration.
    pub fn sweep_frames(&self) -> usize {
        (self.sweep_duration_s() * self.sample_rate_hz as f64).ceil() as usize
    }

    /// Samples of the silence after the sweep.
    pub fn silence_frames(&self) -> usize {
        (self.silence_s * self.sample_rate_hz as f64).round() as usize
    }

    /// The peak amplitude, 10^(level / 20).
    pub fn amplitude(&self) -> f64 {
        10f64.powf(self.level_dbfs / 20.0)
    }

    /// The unfaded unit-amplitude sweep in f64 (no silence): sin(2 pi f1 L (e^(t/L) - 1)), t = n / fs. Allocates.
    pub fn unit_sweep(&self) -> Vec<f64> {
        let l = self.rate_constant_s();
        let fs = self.sample_rate_hz as f64;
        let k = 2.0 * PI * self.start_hz * l;
        (0..self.sweep_frames()).map(|n| (k * ((n as f64 / fs / l).exp_m1())).sin()).collect()
    }

    /// The gain of the fades at each sweep sample (1 between them). Allocates.
    pub fn fade_gains(&self) -> Vec<f64> {
        let fs = self.sample_rate_hz as f64;
        let n = self.sweep_frames();
        let fade_in = (self.fade_in_s * fs).round() as usize;
        let fade_out = (self.fade_out_s * fs).round() as usize;
        let ramp = |i: usize, len: usize| 0.5 - 0.5 * (PI * (i as f64 + 0.5) / len as f64).cos();
        (0..n)
            .map(|i| {
                let mut g = 1.0;
                if i < fade_in {
                    g *= ramp(i, fade_in);
                }
                if n - 1 - i < fade_out {
                    g *= ramp(n - 1 - i, fade_out);
                }
                g
            })
            .collect()
    }

    /// The sweep as played (f64): [`unit_sweep`](Self::unit_sweep) times the fades and the amplitude, no
    /// silence. Allocates.
    pub fn played_sweep(&self) -> Vec<f64> {
        let a = self.amplitude();
        self.unit_sweep().iter().zip(self.fade_gains()).map(|(x, g)| a * g * x).collect()
    }

    /// The signal to play: the faded sweep at its level, then the silence, as f32. Allocates.
    ///
    /// # Errors
    /// Those of [`validate`](Self::validate).
    pub fn generate(&self) -> Result<Vec<f32>, SweepError> {
        self.validate()?;
        let mut out: Vec<f32> = self.played_sweep().iter().map(|&v| v as f32).collect();
        out.resize(out.len() + self.silence_frames(), 0.0);
        Ok(out)
    }
}

/// FNV-1a, 64 bits, over the little-endian bytes of each f32 sample (offset basis 0xcbf29ce484222325, prime
/// 0x100000001b3; Fowler, Noll and Vo's public-domain hash as published by its authors). Identifies a generated
/// sweep; it is not a cryptographic hash.
pub fn fnv1a64_f32(samples: &[f32]) -> u64 {
    let mut h: u64 = 0xcbf2_9ce4_8422_2325;
    for s in samples {
        for b in s.to_le_bytes() {
            h ^= u64::from(b);
            h = h.wrapping_mul(0x0000_0100_0000_01b3);
        }
    }
    h
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn sweeps_past_the_frame_limit_are_refused_before_generating() {
        // Found by fuzzing the sweep sidecar: a sidecar may ask for any duration and silence.
        let ok = SweepSpec { silence_s: 0.0, ..SweepSpec::new(SweepKind::Exponential, 48_000) };
        ok.validate().unwrap();
        let long_silence = SweepSpec { silence_s: 1e9, ..ok };
        let err = long_silence.validate().unwrap_err();
        assert!(matches!(err, SweepError::TooLong { frames } if frames >= MAX_SWEEP_FRAMES), "{err:?}");
        assert!(err.to_string().contains("shorter sweep"), "{err}");
        let at_limit_s = MAX_SWEEP_FRAMES as f64 / 48_000.0;
        assert!(matches!(SweepSpec { duration_s: at_limit_s + 1.0, ..ok }.validate(), Err(SweepError::TooLong { .. })));
        assert!(SweepSpec { duration_s: at_limit_s - 1.0, ..ok }.validate().is_ok());
    }

    #[test]
    fn fnv1a_of_known_bytes() {
        // FNV-1a 64 of the empty input is the offset basis; of the bytes 00 00 80 3f (1.0f32) computed by hand
        // with the published constants, step by step in this test.
        assert_eq!(fnv1a64_f32(&[]), 0xcbf2_9ce4_8422_2325);
        let mut h: u64 = 0xcbf2_9ce4_8422_2325;
        for b in [0x00u8, 0x00, 0x80, 0x3f] {
            h = (h ^ u64::from(b)).wrapping_mul(0x100_0000_01b3);
        }
        assert_eq!(fnv1a64_f32(&[1.0]), h);
        assert_ne!(fnv1a64_f32(&[1.0]), fnv1a64_f32(&[-1.0]));
    }

    #[test]
    fn bad_parameters_are_refused() {
        let ok = SweepSpec::new(SweepKind::Exponential, 48_000);
        assert!(ok.validate().is_ok());
        let bad = |s: SweepSpec| s.validate().unwrap_err();
        assert!(matches!(bad(SweepSpec { end_hz: 30_000.0, ..ok }), SweepError::InvalidFrequencies { .. }));
        assert!(matches!(bad(SweepSpec { start_hz: 0.0, ..ok }), SweepError::InvalidFrequencies { .. }));
        assert!(matches!(bad(SweepSpec { level_dbfs: 1.0, ..ok }), SweepError::InvalidLevel { .. }));
        assert!(matches!(bad(SweepSpec { silence_s: -1.0, ..ok }), SweepError::InvalidDuration { .. }));
        assert!(matches!(bad(SweepSpec { fade_in_s: 20.0, ..ok }), SweepError::FadesTooLong { .. }));
        let sync = SweepSpec { kind: SweepKind::Synchronized, start_hz: 1.0, duration_s: 0.1, ..ok };
        assert!(matches!(bad(sync), SweepError::TooShortToSynchronize { .. }));
    }
}
