//! The whole analysis of one measured channel: broadband and per octave band, noise floor by Lundeby's
//! method with tail compensation, every parameter with its flags.

use std::fmt;

use super::decay::{onset_of, to_f64};
use super::noise::{compensated_energy, lundeby, NoiseFloor};
use super::{check_rate, fit_decay, AnalysisError, DecayFit, DecayRange, FilterPhase, OctaveBand, OctaveFilter};

/// Headroom (dB) between the bottom of an evaluation range and the noise that ISO 3382-1:2009 asks for (from
/// memory: the bottom of the range at least 10 dB above the noise). A parameter needs a dynamic range of its
/// range's depth plus this: EDT 20 dB, T20 35 dB, T30 45 dB.
pub const RANGE_HEADROOM_DB: f64 = 10.0;

/// Dynamic range (dB) below which the energy parameters (C50, C80, D50, centre time) are flagged: as EDT's
/// (our own rule: they weigh the first part of the decay as EDT does; the tail compensation supplies the rest).
pub const ENERGY_PARAMETER_RANGE_DB: f64 = 20.0;

/// Bandwidth x T below which a band filter run forward in time biases T upward by its own ringing: about 16
/// (ISO 3382-2; from memory).
pub const MIN_BT_FORWARD: f64 = 16.0;

/// The same for time-reversed filtering: about 4 (Jacobsen and Rindel, J. Sound Vib. 117(1), 1987; from memory).
pub const MIN_BT_REVERSED: f64 = 4.0;

/// One reported parameter.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, PartialOrd, Ord)]
pub enum Parameter {
    /// Early decay time, s.
    Edt,
    /// T20, s.
    T20,
    /// T30, s.
    T30,
    /// Clarity C50, dB.
    C50,
    /// Clarity C80, dB.
    C80,
    /// Definition D50, 0..=1.
    D50,
    /// Centre time, s.
    Ts,
}

impl Parameter {
    /// Every parameter, in report order.
    pub const ALL: [Parameter; 7] = [Self::Edt, Self::T20, Self::T30, Self::C50, Self::C80, Self::D50, Self::Ts];

    /// Short name (`EDT`, `T20`, ...).
    pub fn name(self) -> &'static str {
        match self {
            Self::Edt => "EDT",
            Self::T20 => "T20",
            Self::T30 => "T30",
            Self::C50 => "C50",
            Self::C80 => "C80",
            Self::D50 => "D50",
            Self::Ts => "Ts",
        }
    }

    /// Unit of the value: `s`, `dB` or empty.
    pub fn unit(self) -> &'static str {
        match self {
            Self::Edt | Self::T20 | Self::T30 | Self::Ts => "s",
            Self::C50 | Self::C80 => "dB",
            Self::D50 => "",
        }
    }

    /// The decay range of a reverberation time, `None` for the energy parameters.
    pub fn range(self) -> Option<DecayRange> {
        match self {
            Self::Edt => Some(DecayRange::Edt),
            Self::T20 => Some(DecayRange::T20),
            Self::T30 => Some(DecayRange::T30),
            _ => None,
        }
    }

    /// The dynamic range this parameter needs, dB: its range's depth plus [`RANGE_HEADROOM_DB`], or
    /// [`ENERGY_PARAMETER_RANGE_DB`].
    pub fn needed_range_db(self) -> f64 {
        match self.range() {
            Some(r) => -r.levels_db().1 + RANGE_HEADROOM_DB,
            None => ENERGY_PARAMETER_RANGE_DB,
        }
    }
}

impl fmt::Display for Parameter {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(self.name())
    }
}

/// Why a value should be read with care.
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Flag {
    /// The decay falls only `available_db` before it meets the noise; the parameter needs `needed_db`.
    DynamicRange {
        /// Fall of the compensated decay curve from the onset to the crossing with the noise, dB.
        available_db: f64,
        /// What the parameter needs ([`Parameter::needed_range_db`]).
        needed_db: f64,
    },
    /// The band filter's own ringing biases this reverberation time: bandwidth x T is below the limit for the
    /// filter's phase ([`MIN_BT_FORWARD`] or [`MIN_BT_REVERSED`]).
    FilterRinging {
        /// Bandwidth (Hz) x the measured time (s).
        bandwidth_times_t: f64,
        /// The limit for this phase.
        needed: f64,
    },
    /// No noise floor could be estimated (Lundeby's fit failed); the curve is the plain Schroeder integral.
    NoNoiseEstimate,
}

impl fmt::Display for Flag {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::DynamicRange { available_db, needed_db } => {
                // Rounded down, so a value just short of the need (19.96 dB) never reads as the need itself.
                let shown_db = (available_db * 10.0).floor() / 10.0;
                write!(f, "dynamic range {shown_db:.1} dB < {needed_db:.0} dB needed")
            }
            Self::FilterRinging { bandwidth_times_t, needed } => {
                write!(f, "filter ringing: bandwidth x T = {bandwidth_times_t:.1} < {needed:.0}")
            }
            Self::NoNoiseEstimate => write!(f, "no noise floor estimate"),
        }
    }
}

/// A parameter's value (or why there is none), its flags and, for reverberation times, the fitted line.
#[derive(Debug, Clone, PartialEq)]
pub struct Measured {
    /// Which parameter.
    pub parameter: Parameter,
    /// The value, or why there is none.
    pub value: Result<f64, AnalysisError>,
    /// Reasons to doubt the value.
    pub flags: Vec<Flag>,
    /// The fitted line of a reverberation time (times from the onset).
    pub fit: Option<DecayFit>,
}

/// The analysis of one band (or the broadband signal) of one channel.
#[derive(Debug, Clone, PartialEq)]
pub struct BandAnalysis {
    /// The octave band, `None` for broadband.
    pub band: Option<OctaveBand>,
    /// Onset of the band's response, frames from the channel's first sample (first sample within 20 dB of the
    /// band's peak at or after the broadband onset).
    pub onset_frames: usize,
    /// Lundeby's noise floor and crossing point (frames from the onset), when found.
    pub noise: Option<NoiseFloor>,
    /// How far the compensated decay curve falls from the onset to the crossing point, dB (infinite when
    /// there is no estimate).
    pub dynamic_range_db: f64,
    /// The compensated Schroeder curve in dB re. its start, one value per frame from the onset.
    pub edc_db: Vec<f64>,
    /// Every [`Parameter`], in [`Parameter::ALL`] order.
    pub values: Vec<Measured>,
}

impl BandAnalysis {
    /// The entry for `parameter`.
    pub fn get(&self, parameter: Parameter) -> &Measured {
        self.values.iter().find(|m| m.parameter == parameter).expect("every parameter is reported")
    }
}

/// What [`analyze`] measures and how.
#[derive(Debug, Clone, PartialEq)]
pub struct AnalysisOptions {
    /// How the band filters run; the default [`FilterPhase::TimeReversed`] keeps their ringing out of the decay.
    pub phase: FilterPhase,
    /// The bands to report (those whose upper edge reaches the Nyquist frequency are left out).
    pub bands: Vec<OctaveBand>,
}

impl Default for AnalysisOptions {
    /// Time-reversed filtering; the octave bands 63 Hz to 8 kHz.
    fn default() -> Self {
        Self { phase: FilterPhase::TimeReversed, bands: (-4..=3).map(OctaveBand::new).collect() }
    }
}

/// The analysis of one channel: broadband, then each band.
#[derive(Debug, Clone, PartialEq)]
pub struct ChannelAnalysis {
    /// Sample rate of the response.
    pub sample_rate_hz: f64,
    /// The filter phase the bands used.
    pub phase: FilterPhase,
    /// The unfiltered response.
    pub broadband: BandAnalysis,
    /// One entry per requested band below the Nyquist frequency.
    pub bands: Vec<BandAnalysis>,
}

/// Analyses one channel of an impulse response: broadband and per band ([`AnalysisOptions`]). Per band: the
/// onset (first sample within 20 dB of the band's peak, ISO 3382-1, searched from the broadband onset on, so
/// that the ringing a time-reversed or zero-phase filter spreads before the direct sound does not move a band's
/// time zero earlier), Lundeby's noise floor and crossing point
/// ([`lundeby`]), the Schroeder curve truncated there with the tail compensation, EDT, T20, T30 by
/// least-squares fits over the ISO 3382-1 ranges, C50, C80, D50 and centre time from the same compensated
/// energies, and each value's flags. Allocates.
///
/// # Errors
/// [`AnalysisError::Empty`], [`AnalysisError::NotFinite`], [`AnalysisError::InvalidSampleRate`] for the whole
/// channel; a band that cannot be measured carries its error in its values instead.
pub fn analyze<T: Copy + Into<f64>>(
    ir: &[T],
    sample_rate_hz: f64,
    options: &AnalysisOptions,
) -> Result<ChannelAnalysis, AnalysisError> {
    check_rate(sample_rate_hz)?;
    let h: Vec<f64> = match to_f64(ir) {
        Ok(h) => h,
        Err(AnalysisError::Silent) => vec![0.0; ir.len()],
        Err(e) => return Err(e),
    };
    let broadband = analyze_band(&h, sample_rate_hz, None, options.phase, 0);
    let from = broadband.onset_frames;
    let bands = options
        .bands
        .iter()
        .filter(|b| b.upper_edge_hz() < 0.5 * sample_rate_hz)
        .map(|&band| {
            let filter = OctaveFilter::new(band, sample_rate_hz, options.phase).expect("band checked below Nyquist");
            analyze_band(&filter.process(&h), sample_rate_hz, Some(band), options.phase, from)
        })
        .collect();
    Ok(ChannelAnalysis { sample_rate_hz, phase: options.phase, broadband, bands })
}

fn failed(band: Option<OctaveBand>, e: AnalysisError) -> BandAnalysis {
    let values =
        Parameter::ALL.iter().map(|&parameter| Measured { parameter, value: Err(e), flags: vec![], fit: None });
    BandAnalysis {
        band,
        onset_frames: 0,
        noise: None,
        dynamic_range_db: f64::NAN,
        edc_db: vec![],
        values: values.collect(),
    }
}

/// `search_from`: the band's onset is searched from the broadband onset on (see [`analyze`]).
fn analyze_band(h: &[f64], fs: f64, band: Option<OctaveBand>, phase: FilterPhase, search_from: usize) -> BandAnalysis {
    let search_from = search_from.min(h.len());
    if h[search_from..].iter().all(|&v| v == 0.0) {
        return failed(band, AnalysisError::Silent);
    }
    let onset = search_from + onset_of(&h[search_from..]);
    let h = &h[onset..];
    let (energy, noise, common_flags) = match lundeby(h, fs) {
        Ok(floor) => (compensated_energy(h, &floor, fs), Some(floor), vec![]),
        Err(_) => {
            let mut e = vec![0.0; h.len()];
            let mut acc = 0.0;
            for (slot, v) in e.iter_mut().zip(h).rev() {
                acc += v * v;
                *slot = acc;
            }
            (e, None, vec![Flag::NoNoiseEstimate])
        }
    };
    let total = energy[0];
    let edc_db: Vec<f64> = energy.iter().map(|&v| 10.0 * (v / total).log10()).collect();
    let dynamic_range_db = match noise {
        Some(f) if f.crossing_frames < h.len() => -edc_db[f.crossing_frames],
        Some(f) => -10.0 * (f.compensation / total).log10(),
        None => f64::INFINITY,
    };

    let mut values = Vec::with_capacity(Parameter::ALL.len());
    for parameter in Parameter::ALL {
        let mut flags = common_flags.clone();
        if dynamic_range_db < parameter.needed_range_db() {
            flags.push(Flag::DynamicRange { available_db: dynamic_range_db, needed_db: parameter.needed_range_db() });
        }
        let (value, fit) = match parameter.range() {
            Some(range) => {
                let (start_db, end_db) = range.levels_db();
                match fit_decay(&edc_db, fs, start_db, end_db) {
                    Ok(fit) => (Ok(fit.reverberation_time_s), Some(fit)),
                    Err(e) => (Err(e), None),
                }
            }
            None => (energy_parameter(parameter, &energy, fs, noise.as_ref()), None),
        };
        if let (Some(band), Ok(t)) = (band, value) {
            if parameter.range().is_some() {
                let bt = (band.upper_edge_hz() - band.lower_edge_hz()) * t;
                let needed = if phase.has_forward_pass() { MIN_BT_FORWARD } else { MIN_BT_REVERSED };
                if bt < needed {
                    flags.push(Flag::FilterRinging { bandwidth_times_t: bt, needed });
                }
            }
        }
        values.push(Measured { parameter, value, flags, fit });
    }
    BandAnalysis { band, onset_frames: onset, noise, dynamic_range_db, edc_db, values }
}

/// C50, C80, D50 and centre time from the compensated energies E[n] (energy from frame n on; E[0] the total):
/// early = E[0] - E[split], late = E[split]; Ts = sum_{n >= 1} E[n] / E[0] / fs (since sum_n n h^2 =
/// sum_{n >= 1} E[n]), with the late line's geometric tail past the last frame added in closed form.
fn energy_parameter(
    parameter: Parameter,
    energy: &[f64],
    fs: f64,
    noise: Option<&NoiseFloor>,
) -> Result<f64, AnalysisError> {
    let total = energy[0];
    let split = |ms: f64| -> Result<f64, AnalysisError> {
        let n = (ms * 1e-3 * fs).round() as usize;
        energy.get(n).copied().ok_or(AnalysisError::TooShort { needed_frames: n, frames: energy.len() })
    };
    match parameter {
        Parameter::C50 | Parameter::C80 => {
            let late = split(if parameter == Parameter::C50 { 50.0 } else { 80.0 })?;
            if late <= 0.0 {
                return Err(AnalysisError::TooShort { needed_frames: energy.len(), frames: energy.len() });
            }
            Ok(10.0 * ((total - late) / late).log10())
        }
        Parameter::D50 => Ok(1.0 - split(50.0)? / total),
        Parameter::Ts => {
            let last = energy[energy.len() - 1];
            let tail = match noise {
                Some(f) => {
                    let q = 10f64.powf(f.late_slope_db_per_s / fs / 10.0);
                    last * q / (1.0 - q)
                }
                None => 0.0,
            };
            Ok((energy[1..].iter().sum::<f64>() + tail) / total / fs)
        }
        _ => unreachable!("reverberation times are fitted"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The flag's dynamic range is rounded down: a range just short of the need never shows as the need.
    #[test]
    fn a_dynamic_range_flag_never_shows_the_needed_value() {
        let flag = |available_db| Flag::DynamicRange { available_db, needed_db: 20.0 }.to_string();
        assert_eq!(flag(19.96), "dynamic range 19.9 dB < 20 dB needed");
        assert_eq!(flag(19.999_9), "dynamic range 19.9 dB < 20 dB needed");
        assert_eq!(flag(12.34), "dynamic range 12.3 dB < 20 dB needed");
    }
}
