//! IEC 61260-1 octave bands and the Butterworth octave band-pass filter; the design is in the
//! [module docs](super).

use std::f64::consts::PI;
use std::fmt;

use rustfft::num_complex::Complex64;

use super::{check_rate, AnalysisError};

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
    /// One pass over the time-reversed signal, reversed back: the causal magnitude, with the filter's ringing
    /// moved *before* each event instead of after it, so it no longer lengthens a decay. The decay analysis
    /// (`analyze`) uses it by default; the bias then stays small down to bandwidth x T of about 4 instead of 16
    /// (F. Jacobsen and J. H. Rindel, "Time reversed decay measurements", J. Sound Vib. 117(1), 1987; from
    /// memory).
    TimeReversed,
}

impl FilterPhase {
    /// The name used on the command line and in reports.
    pub fn name(self) -> &'static str {
        match self {
            Self::Causal => "causal",
            Self::ZeroPhase => "zero-phase",
            Self::TimeReversed => "time-reversed",
        }
    }

    /// The phase with this [`name`](Self::name), or `None`.
    pub fn from_name(name: &str) -> Option<Self> {
        [Self::Causal, Self::ZeroPhase, Self::TimeReversed].into_iter().find(|p| p.name() == name)
    }

    /// Whether the signal passes through the filter forward in time (causal and zero phase), so that the
    /// filter's ringing trails each event.
    pub fn has_forward_pass(self) -> bool {
        self != Self::TimeReversed
    }
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
            FilterPhase::Causal | FilterPhase::TimeReversed => 1.0,
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

    /// The bandwidth, upper minus lower edge, Hz.
    pub fn bandwidth_hz(&self) -> f64 {
        self.band.upper_edge_hz() - self.band.lower_edge_hz()
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
        if self.phase == FilterPhase::TimeReversed {
            y.reverse();
        }
        self.sections.iter().for_each(|s| s.run(&mut y));
        match self.phase {
            FilterPhase::Causal => {}
            FilterPhase::ZeroPhase => {
                y.reverse();
                self.sections.iter().for_each(|s| s.run(&mut y));
                y.reverse();
            }
            FilterPhase::TimeReversed => y.reverse(),
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
    fn zero_phase_design_is_three_sections_with_unit_centre_gain() {
        for phase in [FilterPhase::Causal, FilterPhase::ZeroPhase] {
            let f = OctaveFilter::new(OctaveBand::new(0), 48_000.0, phase).unwrap();
            assert_eq!(f.sections.len(), OctaveFilter::ORDER);
            assert!(f.gain_db(1000.0).abs() < 0.01, "{phase:?} {}", f.gain_db(1000.0));
            assert!((f.gain_db(OctaveBand::new(0).upper_edge_hz()) + 3.0103).abs() < 0.01);
        }
    }
}
