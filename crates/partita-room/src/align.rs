//! Takes of a sweep recorded on a clock of their own: finding them, estimating the clock skew, lining them
//! up for averaging.
//!
//! When the sweep is played by one device and recorded by another (separate USB interfaces, a laptop's
//! built-in microphone beside an external output), the two run on separate crystals: the recording holds
//! `1 + skew` recorded frames per played frame (a few ppm to a few hundred), and the devices start at
//! moments nobody knows to the frame. Then the takes cannot be aligned by their position in one stream:
//!
//! - [`locate_takes`] convolves the whole recording with the sweep's inverse filter (a cross-correlation
//!   with the sweep, weighted -6 dB per octave so that the peak is the system's impulse response:
//!   [`raw_response`]) and finds each take's linear peak: the first as the largest value within the first
//!   take's span, each following one within [`search_half_width`] of where the takes so far predict it.
//!   Each peak is refined below a frame by band-limited interpolation (a Blackman-windowed sinc over
//!   +-[`REFINE_TAPS`] frames, its maximum found by golden-section search).
//! - The skew is the slope of a least-squares line through the arrivals against the take number, over
//!   the nominal spacing of one take: recorded frames per played frame, minus one. It needs two takes or
//!   more. The line's largest residual tells a steady skew from a jump (frames dropped by an overrun).
//! - [`aligned_takes`] cuts each take from the recording at its own arrival, shifted by the fractional
//!   part with an exact band-limited delay (a linear phase over one FFT), so that averaging keeps the
//!   high frequencies. Shifts within [`INTEGER_SNAP_FRAMES`] of a whole frame are taken as whole: takes on
//!   one clock are cut exactly as the one-stream path cuts them.
//!
//! Skew also stretches each take: the recorded sweep reaches a frequency f at L ln(f/f1) / (1 + skew)
//! instead of L ln(f/f1), so the recovered response is smeared by up to skew x T across the band
//! (Farina's time-frequency relation of the exponential sweep, 2000): 1 frame at 10 ppm for a 2 s sweep at
//! 48 kHz. That is why `partita capture` warns above [`SKEW_WARN_PPM`].

use realfft::num_complex::Complex64;
use realfft::RealFftPlanner;

use crate::deconvolve::{raw_response, DeconvolveError, Method};
use crate::sweep::SweepSpec;

/// A skew above this many ppm is worth a warning: it smears a 2 s sweep's response by a frame or more at
/// 48 kHz (module docs).
pub const SKEW_WARN_PPM: f64 = 10.0;

/// The largest skew the search allows for, ppm (consumer devices are specified to +-50 to +-200 ppm).
pub const MAX_SKEW_PPM: f64 = 1000.0;

/// Half the length of the interpolating sinc used to refine a peak, frames.
pub const REFINE_TAPS: usize = 32;

/// A shift this close to a whole number of frames is taken as whole.
pub const INTEGER_SNAP_FRAMES: f64 = 0.05;

/// Where each take lies in a recording, and what that says of the two clocks.
#[derive(Debug, Clone, PartialEq)]
pub struct TakeAlignment {
    /// Per take: the recording frame (fractional) at which the take's linear response peaks, counting its
    /// sweep's start as that take's time zero: the sweep's start in the recording plus the peak's delay.
    pub arrivals: Vec<f64>,
    /// Per take: the magnitude of that peak in the raw response.
    pub peaks: Vec<f64>,
    /// Recorded frames per played frame, minus one, in ppm: positive when the recording clock runs fast.
    /// `None` with a single take.
    pub skew_ppm: Option<f64>,
    /// The largest distance of an arrival from the least-squares line, frames (0 with one or two takes).
    pub residual_frames: f64,
    /// The nominal spacing of the takes in the played signal, frames.
    pub take_frames: usize,
}

/// Why the takes could not be found.
#[derive(Debug, Clone, PartialEq)]
pub enum AlignError {
    /// The deconvolution itself failed (a bad spec, a short recording).
    Deconvolve(DeconvolveError),
    /// The recording does not reach the peak of take `take` (0-based).
    TakeMissing {
        /// The take, 0-based.
        take: usize,
    },
    /// The first take's response is silent.
    Silent,
    /// A take's spacing is not at least the sweep's length.
    BadSpacing,
}

impl std::fmt::Display for AlignError {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::Deconvolve(e) => write!(f, "{e}"),
            Self::TakeMissing { take } => {
                write!(f, "the recording ends before take {} of the sweep arrived", take + 1)
            }
            Self::Silent => f.write_str("no sweep was found in the recording: it is silent or holds only noise"),
            Self::BadSpacing => f.write_str("the takes must be at least as long as the sweep"),
        }
    }
}

impl std::error::Error for AlignError {}

impl From<DeconvolveError> for AlignError {
    fn from(e: DeconvolveError) -> Self {
        Self::Deconvolve(e)
    }
}

/// How far from its predicted position a take's peak is searched for, frames: the larger of the
/// [`MAX_SKEW_PPM`] drift over one take and a third of the gap L ln 2 between the linear response and the
/// second harmonic's (so that neither a dropped period nor the neighbouring harmonic is mistaken), and at
/// most a quarter of a take.
pub fn search_half_width(spec: &SweepSpec, take_frames: usize) -> usize {
    let fs = f64::from(spec.sample_rate_hz);
    let harmonic_gap = spec.rate_constant_s() * fs * std::f64::consts::LN_2 / 3.0;
    let drift = MAX_SKEW_PPM * 1e-6 * take_frames as f64;
    (harmonic_gap.max(drift).ceil() as usize).clamp(1, (take_frames / 4).max(1))
}

/// Finds `takes` takes of `spec`'s sweep, played every `take_frames` frames, in `recording` (module docs).
/// Allocates; its cost is one convolution of the recording with the inverse filter.
///
/// # Errors
/// [`AlignError`]: the deconvolution's errors, a silent recording, a recording that ends before a take.
pub fn locate_takes(
    recording: &[f32],
    spec: &SweepSpec,
    take_frames: usize,
    takes: usize,
    threads: usize,
) -> Result<TakeAlignment, AlignError> {
    if take_frames < spec.sweep_frames() || takes == 0 {
        return Err(AlignError::BadSpacing);
    }
    let raw = raw_response(recording, spec, Method::InverseFilter, threads)?;
    let zero = spec.sweep_frames() - 1;
    let causal = &raw[zero.min(raw.len())..];
    let first_end = take_frames.min(causal.len());
    let Some(p0) = argmax_abs(&causal[..first_end]) else { return Err(AlignError::Silent) };
    if causal[p0] == 0.0 {
        return Err(AlignError::Silent);
    }
    let half = search_half_width(spec, take_frames) as f64;
    let mut arrivals = vec![refine_peak(causal, p0)];
    let mut peaks = vec![f64::from(causal[p0].abs())];
    for k in 1..takes {
        let predicted = match line_fit(&arrivals) {
            Some((a, b)) => a + b * k as f64,
            None => arrivals[0] + (k * take_frames) as f64,
        };
        let from = (predicted - half).floor().max(0.0) as usize;
        let to = ((predicted + half).ceil() as usize + 1).min(causal.len());
        if from >= to || (predicted + REFINE_TAPS as f64) >= causal.len() as f64 {
            return Err(AlignError::TakeMissing { take: k });
        }
        let p = from + argmax_abs(&causal[from..to]).ok_or(AlignError::TakeMissing { take: k })?;
        arrivals.push(refine_peak(causal, p));
        peaks.push(f64::from(causal[p].abs()));
    }
    let (skew_ppm, residual_frames) = match line_fit(&arrivals) {
        Some((a, b)) if arrivals.len() >= 2 => {
            let residual =
                arrivals.iter().enumerate().map(|(k, &x)| (x - (a + b * k as f64)).abs()).fold(0.0, f64::max);
            (Some((b / take_frames as f64 - 1.0) * 1e6), residual)
        }
        _ => (None, 0.0),
    };
    Ok(TakeAlignment { arrivals, peaks, skew_ppm, residual_frames, take_frames })
}

/// The takes cut from `recording`, each `take_frames` long: the first from frame `first_start` (where its
/// sweep starts, as far as the caller knows: the lead-in before the first take), take k from
/// `first_start + arrivals[k] - arrivals[0]`, so every take's response lands where the first take's does;
/// fractional starts by an exact band-limited shift (module docs); frames beyond the recording are zeros.
/// Allocates.
pub fn aligned_takes(recording: &[f32], alignment: &TakeAlignment, first_start: usize) -> Vec<Vec<f32>> {
    let n = alignment.take_frames;
    let first = alignment.arrivals.first().copied().unwrap_or(0.0);
    alignment
        .arrivals
        .iter()
        .map(|&x| {
            let start = (first_start as f64 + x - first).max(0.0);
            let whole = start.round();
            if (start - whole).abs() <= INTEGER_SNAP_FRAMES {
                let s = whole as usize;
                (0..n).map(|i| recording.get(s + i).copied().unwrap_or(0.0)).collect()
            } else {
                shifted_segment(recording, start, n)
            }
        })
        .collect()
}

/// `n` frames of `x` from the fractional position `start` (`y[i] = x(start + i)`, band-limited), through
/// one FFT of the segment with `PAD` frames of context each side.
fn shifted_segment(x: &[f32], start: f64, n: usize) -> Vec<f32> {
    const PAD: usize = 256;
    let base = start.floor() as usize;
    let frac = start - base as f64;
    let m = (n + 2 * PAD).next_power_of_two();
    let mut buf: Vec<f64> =
        (0..m).map(|j| (base + j).checked_sub(PAD).and_then(|i| x.get(i)).map_or(0.0, |&v| f64::from(v))).collect();
    let mut planner = RealFftPlanner::<f64>::new();
    let (fwd, inv) = (planner.plan_fft_forward(m), planner.plan_fft_inverse(m));
    let mut spec = fwd.make_output_vec();
    fwd.process(&mut buf, &mut spec).expect("buffer sizes from the plan");
    // An advance by `frac`: multiply bin k by e^(+j 2 pi k frac / m). The Nyquist bin must stay real: its
    // component is a cosine whose shift cannot be represented, so it keeps its cosine part.
    let last = spec.len() - 1;
    for (k, c) in spec.iter_mut().enumerate() {
        let w = 2.0 * std::f64::consts::PI * k as f64 * frac / m as f64;
        *c *= Complex64::from_polar(1.0, w);
    }
    spec[0].im = 0.0;
    spec[last].im = 0.0;
    let mut out = inv.make_output_vec();
    inv.process(&mut spec, &mut out).expect("buffer sizes from the plan");
    out[PAD..PAD + n].iter().map(|&v| (v / m as f64) as f32).collect()
}

/// Index of the largest magnitude (the first of equals); `None` when empty.
fn argmax_abs(x: &[f32]) -> Option<usize> {
    let mut best: Option<(usize, f32)> = None;
    for (i, v) in x.iter().enumerate() {
        if best.is_none_or(|(_, b)| v.abs() > b) {
            best = Some((i, v.abs()));
        }
    }
    best.map(|b| b.0)
}

/// The position of the band-limited maximum of `|x|` near the sample peak `p`, searched within one frame
/// either side (module docs).
fn refine_peak(x: &[f32], p: usize) -> f64 {
    let value = |t: f64| -> f64 {
        let c = t.floor() as i64;
        let mut acc = 0.0;
        for j in (c - REFINE_TAPS as i64 + 1)..=(c + REFINE_TAPS as i64) {
            let Some(&v) = usize::try_from(j).ok().and_then(|j| x.get(j)) else { continue };
            let d = t - j as f64;
            acc += f64::from(v) * windowed_sinc(d, REFINE_TAPS as f64);
        }
        acc.abs()
    };
    // Golden-section search for the maximum on [p - 1, p + 1].
    let g = (5f64.sqrt() - 1.0) / 2.0;
    let (mut a, mut b) = (p as f64 - 1.0, p as f64 + 1.0);
    let mut c = b - g * (b - a);
    let mut d = a + g * (b - a);
    let (mut fc, mut fd) = (value(c), value(d));
    for _ in 0..48 {
        if fc > fd {
            b = d;
            (d, fd) = (c, fc);
            c = b - g * (b - a);
            fc = value(c);
        } else {
            a = c;
            (c, fc) = (d, fd);
            d = a + g * (b - a);
            fd = value(d);
        }
    }
    let t = 0.5 * (a + b);
    // Never worse than the sample peak itself.
    if value(t) >= f64::from(x[p].abs()) {
        t
    } else {
        p as f64
    }
}

/// sinc(d) under a Blackman window of half-length `half`.
fn windowed_sinc(d: f64, half: f64) -> f64 {
    if d.abs() >= half {
        return 0.0;
    }
    let pi = std::f64::consts::PI;
    let sinc = if d == 0.0 { 1.0 } else { (pi * d).sin() / (pi * d) };
    let u = (d + half) / (2.0 * half);
    let w = 0.42 - 0.5 * (2.0 * pi * u).cos() + 0.08 * (4.0 * pi * u).cos();
    sinc * w
}

/// Least-squares line `a + b k` through `y[k]`; `None` for fewer than two points.
fn line_fit(y: &[f64]) -> Option<(f64, f64)> {
    let n = y.len();
    if n < 2 {
        return None;
    }
    let nf = n as f64;
    let mk = (nf - 1.0) / 2.0;
    let my = y.iter().sum::<f64>() / nf;
    let (mut sxy, mut sxx) = (0.0, 0.0);
    for (k, &v) in y.iter().enumerate() {
        let dk = k as f64 - mk;
        sxy += dk * (v - my);
        sxx += dk * dk;
    }
    let b = sxy / sxx;
    Some((my - b * mk, b))
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn line_fit_recovers_a_line() {
        let (a, b) = line_fit(&[3.0, 5.5, 8.0, 10.5]).unwrap();
        assert!((a - 3.0).abs() < 1e-12 && (b - 2.5).abs() < 1e-12);
        assert!(line_fit(&[1.0]).is_none());
    }

    #[test]
    fn a_band_limited_peak_is_found_between_frames() {
        // A pulse band-limited to 0.9 of Nyquist (a sweep to 20 kHz at 44.1 kHz reaches 0.91), centred at
        // 100.3 frames and sampled: the refined peak is 100.3 within 0.002 frames.
        let x: Vec<f32> = (0..200)
            .map(|i| {
                let d = 0.9 * (i as f64 - 100.3);
                0.9 * (std::f64::consts::PI * d).sin() / (std::f64::consts::PI * d)
            })
            .map(|v| v as f32)
            .collect();
        let t = refine_peak(&x, argmax_abs(&x).unwrap());
        assert!((t - 100.3).abs() < 0.002, "{t}");
    }

    #[test]
    fn a_fractional_shift_of_a_band_limited_signal_is_exact() {
        // A sum of sines well below Nyquist under a smooth window, shifted by 7.4 frames: equals the same
        // signal evaluated 7.4 frames later (closed form) within 1e-4 of its peak.
        let f = |t: f64| {
            let w = if (0.0..4000.0).contains(&t) { (std::f64::consts::PI * t / 4000.0).sin().powi(4) } else { 0.0 };
            w * ((0.05 * t).sin() + 0.5 * (0.31 * t + 1.0).sin())
        };
        let x: Vec<f32> = (0..4000).map(|i| f(i as f64) as f32).collect();
        let y = shifted_segment(&x, 7.4, 3000);
        let worst = (0..3000).map(|i| (f64::from(y[i]) - f(i as f64 + 7.4)).abs()).fold(0.0, f64::max);
        assert!(worst < 1e-4, "{worst}");
    }
}
