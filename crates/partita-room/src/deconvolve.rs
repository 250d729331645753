//! Recovering an impulse response from a recorded sweep ([`crate::sweep`]).
//!
//! - **Inverse filter** (Farina, AES 108th Convention, 2000): the played sweep reversed in time, its amplitude
//!   shaped by e^(t/L) (t the time of the sample in the *forward* sweep: -6 dB per octave as the reversed
//!   sweep runs down in frequency) so the product of the sweep's pink spectrum and the filter's is flat. Scale:
//!   by stationary phase a sweep A sin(phi(t)) with instantaneous frequency f(t) = f1 e^(t/L) has
//!   |X(f)|^2 = A^2 L / (4 f) (continuous time), fs^2 times that for the sampled signal's DTFT; the filter
//!   g x(T - t) e^((T - t)/L) has |F| = g (f / f1) |X|, so |X F| = g fs^2 A^2 L / (4 f1), and
//!   g = 4 f1 / (fs^2 A^2 L) gives unity in-band gain. The recording is convolved with the filter by
//!   [`partita_core::offline::render`], the engine's own convolution.
//! - **Regularized spectral division**: H = Y conj(X) / (|X|^2 + eps(f)) over one FFT of the recording and of
//!   the played sweep, eps = 1e-6 max |X|^2 inside [f1, f2], rising to max |X|^2 half an octave outside along a raised cosine in
//!   log frequency (Kirkeby-style frequency
//!   dependent regularization, from memory: O. Kirkeby and P. A. Nelson, J. AES 47(7/8), 1999).
//!
//! Both give the *raw response*: time zero of the linear response at frame `sweep_frames - 1`, the n-th
//! harmonic's response L ln(n) earlier (Farina 2000; exact in phase for the synchronized sweep, Novak et al.
//! 2015), and valid up to `silence_frames` after time zero (the rest of the recording).
//!
//! The linear response is cut at its onset (ISO 3382-1:2009: the first sample within 20 dB of the peak),
//! searched only after the 2nd harmonic's window, which reaches halfway from the 2nd harmonic (L ln 2 before the
//! linear peak) to the linear peak: a loud harmonic can lie within 20 dB of the peak. A pre-onset margin (1 ms
//! by default) is kept before the onset. The tail can be cut where it meets the noise (Lundeby's crossing
//! point, [`crate::analysis::lundeby`]).

use std::fmt;

use partita_core::offline::{offline_plan, render};
use partita_core::{ImpulseResponse, Routing, Shape};
use realfft::num_complex::Complex64;
use realfft::RealFftPlanner;

use crate::analysis::{lundeby, ONSET_THRESHOLD_DB};
use crate::sweep::{SweepError, SweepSpec};

/// Default margin kept before the onset, ms.
pub const DEFAULT_PRE_ONSET_MS: f64 = 1.0;

/// How the sweep is removed from the recording.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Method {
    /// Convolution with the amplitude-shaped, time-reversed sweep (the default).
    InverseFilter,
    /// Regularized division of the spectra.
    Division,
}

impl Method {
    /// The name used on the command line.
    pub fn name(self) -> &'static str {
        match self {
            Self::InverseFilter => "inverse",
            Self::Division => "division",
        }
    }

    /// The method with this [`name`](Self::name), or `None`.
    pub fn from_name(name: &str) -> Option<Self> {
        [Self::InverseFilter, Self::Division].into_iter().find(|m| m.name() == name)
    }
}

/// Options of [`deconvolve`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DeconvolveOptions {
    /// The method.
    pub method: Method,
    /// Margin kept before the onset, ms.
    pub pre_onset_ms: f64,
    /// Cut the tail where it meets the noise floor (the latest crossing point over the channels).
    pub trim_tail: bool,
    /// Extract the harmonic responses of orders 2 to this (0 or 1: none).
    pub max_harmonic: usize,
    /// Threads for the convolution (0: all cores).
    pub threads: usize,
}

impl Default for DeconvolveOptions {
    fn default() -> Self {
        Self {
            method: Method::InverseFilter,
            pre_onset_ms: DEFAULT_PRE_ONSET_MS,
            trim_tail: false,
            max_harmonic: 0,
            threads: 1,
        }
    }
}

/// Why a recording cannot be deconvolved.
#[derive(Debug, Clone, PartialEq)]
pub enum DeconvolveError {
    /// The sweep's parameters are invalid.
    Sweep(SweepError),
    /// No channels, or channels of different lengths.
    BadChannels,
    /// The recording is shorter than the sweep.
    TooShort {
        /// Frames recorded.
        frames: usize,
        /// Frames of the sweep.
        sweep_frames: usize,
    },
    /// A recorded sample is NaN or infinite.
    NotFinite {
        /// Channel.
        channel: usize,
        /// Frame.
        frame: usize,
    },
    /// The recording is silent where the response should be.
    Silent,
    /// The convolution failed (an internal error).
    Render(String),
}

impl fmt::Display for DeconvolveError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Sweep(e) => write!(f, "invalid sweep: {e}"),
            Self::BadChannels => write!(f, "the recording needs at least one channel, all of one length"),
            Self::TooShort { frames, sweep_frames } => write!(
                f,
                "the recording has {frames} frames but the sweep alone has {sweep_frames}; record the whole sweep \
                 and the silence after it"
            ),
            Self::NotFinite { channel, frame } => {
                write!(f, "recorded sample {frame} of channel {channel} is NaN or infinite")
            }
            Self::Silent => write!(f, "the deconvolved response is silent: was the sweep recorded?"),
            Self::Render(e) => write!(f, "convolution failed: {e}"),
        }
    }
}

impl std::error::Error for DeconvolveError {}

impl From<SweepError> for DeconvolveError {
    fn from(e: SweepError) -> Self {
        Self::Sweep(e)
    }
}

/// The inverse filter of `spec`'s played sweep (module docs): reversed, shaped by e^(t/L), scaled by
/// 4 f1 / (fs^2 A^2 L). Allocates.
///
/// # Errors
/// Those of [`SweepSpec::validate`].
pub fn inverse_filter(spec: &SweepSpec) -> Result<Vec<f32>, SweepError> {
    spec.validate()?;
    let x = spec.played_sweep();
    let (fs, l, a) = (spec.sample_rate_hz as f64, spec.rate_constant_s(), spec.amplitude());
    let g = 4.0 * spec.start_hz / (fs * fs * a * a * l);
    let n = x.len();
    Ok((0..n)
        .map(|i| {
            let m = n - 1 - i;
            (g * x[m] * (m as f64 / fs / l).exp()) as f32
        })
        .collect())
}

/// The raw response of one recorded channel (module docs: time zero at `spec.sweep_frames() - 1`), as long
/// as the full convolution of the recording with the inverse filter. Allocates.
///
/// # Errors
/// [`DeconvolveError::Sweep`], [`DeconvolveError::TooShort`], [`DeconvolveError::Render`].
pub fn raw_response(
    recording: &[f32],
    spec: &SweepSpec,
    method: Method,
    threads: usize,
) -> Result<Vec<f32>, DeconvolveError> {
    spec.validate()?;
    let sweep_frames = spec.sweep_frames();
    if recording.len() < sweep_frames {
        return Err(DeconvolveError::TooShort { frames: recording.len(), sweep_frames });
    }
    match method {
        Method::InverseFilter => {
            let ir = ImpulseResponse::new(vec![inverse_filter(spec)?], spec.sample_rate_hz)
                .map_err(|e| DeconvolveError::Render(e.to_string()))?;
            let plan = offline_plan(ir.frames(), Shape::MONO).map_err(|e| DeconvolveError::Render(e.to_string()))?;
            let mut out = render(&plan, &ir, Routing::Mono, &[recording], threads, None)
                .map_err(|e| DeconvolveError::Render(e.to_string()))?;
            Ok(out.swap_remove(0))
        }
        Method::Division => Ok(divide(recording, spec)),
    }
}

/// Regularized spectral division, laid out like the inverse filter's output.
fn divide(recording: &[f32], spec: &SweepSpec) -> Vec<f32> {
    let x = spec.played_sweep();
    let out_len = recording.len() + x.len() - 1;
    let m = out_len.next_power_of_two();
    let mut planner = RealFftPlanner::<f64>::new();
    let (fwd, inv) = (planner.plan_fft_forward(m), planner.plan_fft_inverse(m));
    let spectrum = |v: &mut Vec<f64>| {
        v.resize(m, 0.0);
        let mut s = fwd.make_output_vec();
        fwd.process(v, &mut s).expect("buffer sizes from the plan");
        s
    };
    let xs = spectrum(&mut x.clone());
    let ys = spectrum(&mut recording.iter().map(|&v| v as f64).collect());
    let fs = spec.sample_rate_hz as f64;
    let max_x = xs.iter().map(|c| c.norm_sqr()).fold(0.0, f64::max);
    let mut hs: Vec<Complex64> = xs
        .iter()
        .zip(&ys)
        .enumerate()
        .map(|(k, (x, y))| {
            let f = k as f64 * fs / m as f64;
            let eps = 1e-6 * max_x + (max_x - 1e-6 * max_x) * outside(f, spec.start_hz, spec.end_hz);
            y * x.conj() / (x.norm_sqr() + eps)
        })
        .collect();
    // A real signal's DC and Nyquist bins are real.
    hs[0].im = 0.0;
    let last = hs.len() - 1;
    hs[last].im = 0.0;
    let mut h = inv.make_output_vec();
    inv.process(&mut hs, &mut h).expect("buffer sizes from the plan");
    let zero = x.len() - 1;
    (0..out_len).map(|i| (h[(i + m - zero % m) % m] / m as f64) as f32).collect()
}

/// How far `f` lies outside `[lo, hi]`, 0 inside to 1 half an octave or more outside, along a raised cosine in
/// log frequency (our choice: a hard switch would ring for long at the band edges).
fn outside(f: f64, lo: f64, hi: f64) -> f64 {
    let octaves = if f < lo {
        if f <= 0.0 {
            return 1.0;
        }
        (lo / f).log2()
    } else if f > hi {
        (f / hi).log2()
    } else {
        return 0.0;
    };
    let x = (octaves / 0.5).min(1.0);
    0.5 - 0.5 * (std::f64::consts::PI * x).cos()
}

/// One harmonic response of each channel.
#[derive(Debug, Clone, PartialEq)]
pub struct Harmonic {
    /// Order n (2 = second harmonic).
    pub order: usize,
    /// Its response per channel, cut like the linear one (the same pre-onset margin), as long as the gap to
    /// the next higher-frequency response allows.
    pub channels: Vec<Vec<f32>>,
}

/// The result of [`deconvolve`].
#[derive(Debug, Clone, PartialEq)]
pub struct Deconvolution {
    /// The linear impulse response per channel, from `pre_onset_ms` before the common onset.
    pub channels: Vec<Vec<f32>>,
    /// Frames from the written response's first sample to the onset (the margin actually kept).
    pub onset_frames: usize,
    /// Frames from the system's time zero (the sweep's first sample leaving the player) to the onset: the
    /// loop delay when playback and recording share a clock.
    pub delay_frames: usize,
    /// Peak-to-noise ratio per channel, dB: the peak squared over the noise's mean square (Lundeby's noise
    /// estimate, or the last 10% of the response when that fails).
    pub peak_to_noise_db: Vec<f64>,
    /// The harmonic responses asked for (those that fit in the raw response).
    pub harmonics: Vec<Harmonic>,
    /// Whether the tail was cut at the noise floor (asked for, and a crossing point found in every channel).
    pub tail_trimmed: bool,
}

/// Deconvolves every channel of a recording of `spec`'s sweep (module docs), with one onset for all channels
/// (the earliest), so their relative timing is kept. Allocates.
///
/// # Errors
/// [`DeconvolveError`]: bad channels, a recording shorter than the sweep, non-finite samples, silence.
pub fn deconvolve(
    recording: &[Vec<f32>],
    spec: &SweepSpec,
    options: &DeconvolveOptions,
) -> Result<Deconvolution, DeconvolveError> {
    spec.validate()?;
    let frames = recording.first().map(Vec::len).ok_or(DeconvolveError::BadChannels)?;
    if recording.iter().any(|c| c.len() != frames) {
        return Err(DeconvolveError::BadChannels);
    }
    for (channel, c) in recording.iter().enumerate() {
        if let Some(frame) = c.iter().position(|v| !v.is_finite()) {
            return Err(DeconvolveError::NotFinite { channel, frame });
        }
    }
    let raws: Vec<Vec<f32>> =
        recording.iter().map(|c| raw_response(c, spec, options.method, options.threads)).collect::<Result<_, _>>()?;
    let fs = spec.sample_rate_hz as f64;
    let zero = spec.sweep_frames() - 1;
    let end = (zero + frames - spec.sweep_frames() + 1).min(raws[0].len());
    let l_frames = spec.rate_constant_s() * fs;

    // Per channel: its linear peak in the causal part, then its onset searched after the 2nd harmonic's window
    // before that peak; the common onset is the earliest.
    let half_window = (0.5 * l_frames * 2f64.ln()).floor() as usize;
    let level = 10f64.powf(ONSET_THRESHOLD_DB / 20.0);
    let mut onset = usize::MAX;
    let mut search_from = usize::MAX;
    for raw in &raws {
        let (peak_at, peak) =
            raw[zero..end]
                .iter()
                .enumerate()
                .fold((zero, 0.0f32), |m, (i, v)| if v.abs() > m.1 { (zero + i, v.abs()) } else { m });
        if peak == 0.0 {
            continue;
        }
        let from = peak_at.saturating_sub(half_window);
        let threshold = peak as f64 * level;
        let at = raw[from..=peak_at].iter().position(|v| v.abs() as f64 >= threshold).map_or(peak_at, |i| from + i);
        if at < onset {
            (onset, search_from) = (at, from);
        }
    }
    if onset == usize::MAX {
        return Err(DeconvolveError::Silent);
    }
    let margin = (options.pre_onset_ms.max(0.0) * 1e-3 * fs).round() as usize;
    let start = onset.saturating_sub(margin).max(search_from);

    let mut cut_end = end;
    let mut peak_to_noise_db = Vec::with_capacity(raws.len());
    let mut crossings = Vec::new();
    for raw in &raws {
        let linear = &raw[onset..end];
        let peak_sq = linear.iter().fold(0.0f64, |m, &v| m.max(v as f64 * v as f64));
        let noise_ms = match lundeby(linear, fs) {
            Ok(floor) => {
                crossings.push(onset + floor.crossing_frames);
                floor.noise_mean_square
            }
            Err(_) => {
                let tail = &linear[linear.len() - (linear.len() / 10).max(1)..];
                tail.iter().map(|&v| v as f64 * v as f64).sum::<f64>() / tail.len() as f64
            }
        };
        peak_to_noise_db.push(10.0 * (peak_sq / noise_ms).log10());
    }
    let tail_trimmed = options.trim_tail && crossings.len() == raws.len();
    if tail_trimmed {
        cut_end = crossings.iter().copied().max().unwrap_or(end).clamp(onset + 1, end);
    }
    let channels = raws.iter().map(|raw| raw[start..cut_end].to_vec()).collect();

    let mut harmonics = Vec::new();
    for order in 2..=options.max_harmonic {
        let shift = (l_frames * (order as f64).ln()).round() as usize;
        let gap = (l_frames * (order as f64 / (order - 1) as f64).ln()).floor() as usize;
        let Some(h_start) = start.checked_sub(shift) else { break };
        let h_end = (h_start + gap).min(cut_end);
        harmonics.push(Harmonic { order, channels: raws.iter().map(|raw| raw[h_start..h_end].to_vec()).collect() });
    }
    Ok(Deconvolution {
        channels,
        onset_frames: onset - start,
        delay_frames: onset.saturating_sub(zero),
        peak_to_noise_db,
        harmonics,
        tail_trimmed,
    })
}
