//! Room-acoustic analysis of impulse responses: Schroeder decay curves, reverberation times (EDT, T20, T30),
//! octave-band filters, clarity, definition and centre time, noise floors (Lundeby) and the whole per-band
//! analysis of a measured response ([`analyze`]).
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
//! bottom of the evaluation range. A response that simply stops before it has decayed enough is refused by the
//! same check.
//!
//! For measured responses use [`analyze`] instead: it finds the noise floor and the point where the decay
//! meets it by Lundeby's iteration (Lundeby et al., Acustica 81, 1995; [`lundeby`]), truncates the Schroeder
//! sum there and adds the decay's missing tail (compensation), measures every parameter broadband and per
//! octave band, and flags each value whose band lacks the dynamic range for it or whose band filter rings
//! about as long as the decay ([`Flag`]).
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

use std::fmt;

mod bands;
mod decay;
mod noise;
mod report;

pub use bands::{FilterPhase, OctaveBand, OctaveFilter, OCTAVE_RATIO};
pub use decay::{
    centre_time_s, clarity_db, definition, edt, fit_decay, onset_index, reverberation_time, schroeder_decay_db, t20,
    t30, DecayFit, DecayRange, NOISE_HEADROOM_DB, ONSET_THRESHOLD_DB,
};
pub use noise::{lundeby, NoiseFloor};
pub use report::{
    analyze, AnalysisOptions, BandAnalysis, ChannelAnalysis, Flag, Measured, Parameter, ENERGY_PARAMETER_RANGE_DB,
    MIN_BT_FORWARD, MIN_BT_REVERSED, RANGE_HEADROOM_DB,
};

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
            Self::DecayTooShallow { needed_db, reached_db } => {
                write!(
                    f,
                    "the decay curve reaches only {reached_db:.1} dB but the range needs {needed_db:.1} dB; \
                     use a longer response"
                )?;
                // Only the standard ranges that end above the level this one needs are any help: none for
                // EDT, EDT for T20.
                let shorter: Vec<&str> = [(DecayRange::T20, "T20"), (DecayRange::Edt, "EDT")]
                    .into_iter()
                    .filter(|(range, _)| range.levels_db().1 > *needed_db)
                    .map(|(_, name)| name)
                    .collect();
                if !shorter.is_empty() {
                    write!(f, " or a shorter range ({})", shorter.join(", "))?;
                }
                Ok(())
            }
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

pub(crate) fn check_rate(sample_rate_hz: f64) -> Result<(), AnalysisError> {
    if sample_rate_hz.is_finite() && sample_rate_hz > 0.0 {
        Ok(())
    } else {
        Err(AnalysisError::InvalidSampleRate { sample_rate_hz })
    }
}

#[cfg(test)]
mod tests {
    use super::*;

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

    /// A too shallow decay suggests only the standard ranges that end above the level it missed.
    #[test]
    fn a_shallow_decay_suggests_only_shorter_ranges() {
        let message = |needed_db| AnalysisError::DecayTooShallow { needed_db, reached_db: -8.0 }.to_string();
        assert!(message(-35.0).ends_with("use a longer response or a shorter range (T20, EDT)"), "{}", message(-35.0));
        assert!(message(-25.0).ends_with("use a longer response or a shorter range (EDT)"), "{}", message(-25.0));
        assert!(message(-10.0).ends_with("use a longer response"), "{}", message(-10.0));
        assert!(message(-5.0).ends_with("use a longer response"), "{}", message(-5.0));
    }
}
