//! Conditioning of impulse-response taps in memory: resampling to the engine's rate, tail trimming and
//! normalization. Each step is optional; by default an IR is used exactly as read, so a render is the exact
//! mathematical convolution with the file's taps. (Turning taps into spectra for an engine is the core's
//! `prepare` step.) [`resample_signal`] resamples a signal rather than an IR, keeping its level.
//!
//! # Gain rule for resampling
//! An IR is a filter, not a signal. Band-limited resampling keeps the *waveform* (the samples of the same
//! underlying continuous response at the new instants), so at a higher rate there are `to / from` times as
//! many taps per second and the filter's gain, H(f) = sum_n h\[n\] e^(-j 2 pi f n / fs), grows by `to / from`.
//! [`resample`] therefore multiplies the taps by `from / to`, which keeps the frequency response (in-band)
//! and changes the tap energy by `from / to` instead. For example a 44.1 kHz IR resampled to 48 kHz
//! without this rule would be 20 log10(48 / 44.1) = 0.74 dB too loud.

use std::fmt;
use std::str::FromStr;

use rubato::audioadapter_buffers::direct::SequentialSliceOfVecs;
use rubato::{Fft, FixedSync, Resampler, WindowFunction};

use crate::audio::Audio;
use crate::error::{ConditionError, ParseError};

/// Input frames per FFT of the resampler (rounded up to a multiple of `from / gcd(from, to)`). The
/// anti-aliasing filter is as long as this, so its passband reaches about 0.99 of the lower Nyquist frequency
/// (rubato's `calculate_cutoff` for BlackmanHarris2).
const RESAMPLE_CHUNK_FRAMES: usize = 2048;

/// The largest FFT (in frames, either side) the resampler may need: 2^20, about 100 MB of buffers. Every
/// pair of standard rates (8 kHz to 384 kHz) needs far less (44.1 to 48 kHz: 2058 / 2240).
const MAX_RESAMPLE_FFT_FRAMES: usize = 1 << 20;

fn gcd(mut a: u32, mut b: u32) -> u32 {
    while b != 0 {
        (a, b) = (b, a % b);
    }
    a
}

/// Frames after resampling `frames` from `from_hz` to `to_hz`: ceil(frames x to / from) (0 if `from_hz` is 0).
pub fn resampled_frames(frames: u64, from_hz: u32, to_hz: u32) -> u64 {
    if from_hz == 0 {
        return 0;
    }
    let (num, den) = (u128::from(frames) * u128::from(to_hz), u128::from(from_hz));
    num.div_ceil(den).min(u128::from(u64::MAX)) as u64
}

fn check_equal(audio: &Audio) -> Result<(), ConditionError> {
    let expected = audio.frames();
    match audio.channels.iter().enumerate().find(|(_, c)| c.len() != expected) {
        Some((channel, c)) => Err(ConditionError::UnequalChannels { channel, frames: c.len(), expected }),
        None => Ok(()),
    }
}

/// Resamples an impulse response to `to_hz` with rubato's synchronous FFT resampler (computed in f64) and
/// scales the taps by `from / to` so the frequency response is kept (see the [module docs](self)).
/// Allocates the result.
///
/// The output is aligned with the input (rubato's delay is trimmed: an event at input time t appears at output
/// time t) and has exactly [`resampled_frames`] frames. Content at or above the lower rate's Nyquist frequency
/// is filtered out. The same rate returns a copy.
///
/// # Errors
/// [`ConditionError::ResampleZeroRate`] for a 0 Hz rate, [`ConditionError::UnequalChannels`],
/// [`ConditionError::ResampleRates`] for a rate pair with too small a common divisor (e.g. 7 Hz to 48 kHz),
/// [`ConditionError::Resampler`] if rubato refuses.
pub fn resample(audio: &Audio, to_hz: u32) -> Result<Audio, ConditionError> {
    let from_hz = audio.sample_rate_hz;
    if from_hz == 0 || to_hz == 0 {
        return Err(ConditionError::ResampleZeroRate { from_hz, to_hz });
    }
    check_equal(audio)?;
    if from_hz == to_hz {
        return Ok(audio.clone());
    }
    let frames = audio.frames();
    let channels = audio.channel_count();
    let out_frames = resampled_frames(frames as u64, from_hz, to_hz) as usize;
    if frames == 0 || channels == 0 {
        return Ok(Audio { channels: vec![Vec::new(); channels], sample_rate_hz: to_hz });
    }
    // rubato's FFT sizes follow from the rates' common divisor; absurd rate pairs (say 7 Hz to 48 kHz) would
    // need FFTs of millions of points, so they are refused instead of exhausting memory.
    let gcd = gcd(from_hz, to_hz);
    let (min_in, min_out) = ((from_hz / gcd) as usize, (to_hz / gcd) as usize);
    let fft_chunks = RESAMPLE_CHUNK_FRAMES.div_ceil(min_in).max(1);
    let fft_frames = fft_chunks.saturating_mul(min_in.max(min_out));
    if fft_frames > MAX_RESAMPLE_FFT_FRAMES {
        return Err(ConditionError::ResampleRates { from_hz, to_hz, fft_frames });
    }
    let refused = |e: &dyn fmt::Display| ConditionError::Resampler { reason: e.to_string() };
    let input: Vec<Vec<f64>> = audio.channels.iter().map(|c| c.iter().map(|&v| f64::from(v)).collect()).collect();
    let mut resampler = Fft::<f64>::new_custom(
        from_hz as usize,
        to_hz as usize,
        RESAMPLE_CHUNK_FRAMES,
        1,
        channels,
        WindowFunction::BlackmanHarris2,
        FixedSync::Both,
    )
    .map_err(|e| refused(&e))?;
    let adapter = SequentialSliceOfVecs::new(&input, channels, frames).map_err(|e| refused(&e))?;
    // process_all trims the resampler's delay and pads the end, so frame k of the output is time k / to_hz.
    let out = resampler.process_all(&adapter, frames, None).map_err(|e| refused(&e))?.take_data();
    let got = out.len() / channels;
    let gain = f64::from(from_hz) / f64::from(to_hz);
    let channels_out = (0..channels)
        .map(|c| (0..out_frames).map(|i| if i < got { (out[i * channels + c] * gain) as f32 } else { 0.0 }).collect())
        .collect();
    Ok(Audio { channels: channels_out, sample_rate_hz: to_hz })
}

/// Cuts the tail after the last frame where any channel's |tap| reaches `peak x 10^(threshold_db / 20)`,
/// `peak` being the largest |tap| over all channels. All channels are cut at the same frame, and at least one
/// frame is kept. An all-zero IR is left as it is. Returns the number of frames removed.
///
/// # Errors
/// [`ConditionError::BadThreshold`] when `threshold_db` is above 0 dB or NaN; [`ConditionError::UnequalChannels`].
pub fn trim_tail(audio: &mut Audio, threshold_db: f64) -> Result<usize, ConditionError> {
    if threshold_db.is_nan() || threshold_db > 0.0 {
        return Err(ConditionError::BadThreshold { threshold_db });
    }
    check_equal(audio)?;
    let frames = audio.frames();
    let peak = f64::from(audio.peak());
    if frames == 0 || peak == 0.0 {
        return Ok(0);
    }
    let level = peak * 10f64.powf(threshold_db / 20.0);
    let last =
        audio.channels.iter().filter_map(|c| c.iter().rposition(|&v| f64::from(v.abs()) >= level)).max().unwrap_or(0);
    let keep = last + 1;
    for c in &mut audio.channels {
        c.truncate(keep);
    }
    Ok(frames - keep)
}

/// How an impulse response's gain is set before use. One gain is applied to every channel, so the balance
/// between channels is kept.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Default)]
pub enum Normalize {
    /// Taps used as they are (`none`, the default): a render is the exact convolution with the file.
    #[default]
    None,
    /// Largest |tap| over all channels becomes 1 (`peak`).
    Peak,
    /// The channel with the most energy (sum of squared taps) gets unit energy, sum h\[n\]^2 = 1 (`energy`):
    /// white noise keeps its power through that channel.
    Energy,
}

impl fmt::Display for Normalize {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Self::None => "none",
            Self::Peak => "peak",
            Self::Energy => "energy",
        })
    }
}

impl FromStr for Normalize {
    type Err = ParseError;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s.trim().to_ascii_lowercase().as_str() {
            "none" => Ok(Self::None),
            "peak" => Ok(Self::Peak),
            "energy" => Ok(Self::Energy),
            _ => Err(ParseError { what: "normalization", given: s.to_string(), expected: "none, peak or energy" }),
        }
    }
}

/// Resamples a *signal* to `to_hz`, keeping its waveform and level. Allocates. ([`resample`] is made for IRs:
/// it scales taps by from / to to keep a filter's gain; a signal must not change level, so that scale is undone
/// here.)
///
/// # Errors
/// As [`resample`].
pub fn resample_signal(audio: &Audio, to_hz: u32) -> Result<Audio, ConditionError> {
    let mut out = resample(audio, to_hz)?;
    let undo = f64::from(to_hz) / f64::from(audio.sample_rate_hz);
    for v in out.channels.iter_mut().flatten() {
        *v = (f64::from(*v) * undo) as f32;
    }
    Ok(out)
}

/// Scales the taps as `mode` says; returns the gain applied (1 for [`Normalize::None`]).
///
/// # Errors
/// [`ConditionError::Silent`] when peak or energy normalization meets an all-zero IR (or one with no taps).
pub fn normalize(audio: &mut Audio, mode: Normalize) -> Result<f64, ConditionError> {
    let measure = match mode {
        Normalize::None => return Ok(1.0),
        Normalize::Peak => f64::from(audio.peak()),
        Normalize::Energy => audio
            .channels
            .iter()
            .map(|c| c.iter().map(|&v| f64::from(v) * f64::from(v)).sum::<f64>())
            .fold(0.0, f64::max)
            .sqrt(),
    };
    if measure == 0.0 {
        return Err(ConditionError::Silent);
    }
    let gain = 1.0 / measure;
    for v in audio.channels.iter_mut().flatten() {
        *v = (f64::from(*v) * gain) as f32;
    }
    Ok(gain)
}

/// Scales every channel by one gain so that the largest |sample| becomes `peak_dbfs` (e.g. -1.0), computed in
/// f64 and rounded once; returns the gain applied. For finished signals (a render's output), not for IRs.
///
/// # Errors
/// [`ConditionError::Silent`] when every sample is zero (there is no peak to scale).
pub fn scale_to_peak(audio: &mut Audio, peak_dbfs: f64) -> Result<f64, ConditionError> {
    let peak = f64::from(audio.peak());
    if peak == 0.0 {
        return Err(ConditionError::Silent);
    }
    let gain = 10f64.powf(peak_dbfs / 20.0) / peak;
    for v in audio.channels.iter_mut().flatten() {
        *v = (f64::from(*v) * gain) as f32;
    }
    Ok(gain)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn resampled_length_is_the_exact_ceiling() {
        assert_eq!(resampled_frames(147, 44_100, 48_000), 160);
        assert_eq!(resampled_frames(148, 44_100, 48_000), 162);
        assert_eq!(resampled_frames(1, 96_000, 48_000), 1);
        assert_eq!(resampled_frames(3, 96_000, 48_000), 2);
        assert_eq!(resampled_frames(0, 44_100, 48_000), 0);
        assert_eq!(resampled_frames(u64::MAX, 1, 2), u64::MAX);
    }

    #[test]
    fn scale_to_peak_sets_the_largest_sample() {
        let mut a = Audio { channels: vec![vec![0.5, -0.25], vec![0.1, 0.0]], sample_rate_hz: 48_000 };
        let gain = scale_to_peak(&mut a, -6.0).unwrap();
        let want = 10f64.powf(-6.0 / 20.0); // the peak, 0.5012 (published dB definition: 20 log10)
        assert!((f64::from(a.channels[0][0]) - want).abs() < 1e-7 && (gain - 2.0 * want).abs() < 1e-12);
        assert!((f64::from(a.channels[0][1]) + want / 2.0).abs() < 1e-7);
        let mut silent = Audio { channels: vec![vec![0.0; 4]], sample_rate_hz: 48_000 };
        assert_eq!(scale_to_peak(&mut silent, -1.0), Err(ConditionError::Silent));
    }

    #[test]
    fn normalize_parses() {
        assert_eq!("Peak".parse::<Normalize>().unwrap(), Normalize::Peak);
        assert_eq!(Normalize::default(), Normalize::None);
        assert!("rms".parse::<Normalize>().unwrap_err().to_string().contains("none, peak or energy"));
    }

    #[test]
    fn resample_signal_keeps_the_level_that_resample_scales() {
        // A 1 kHz sine at 44.1 kHz, amplitude 0.5: resampled as a signal to 48 kHz its amplitude stays 0.5,
        // while the IR rule scales the taps by 44.1 / 48.
        let (from_hz, to_hz) = (44_100u32, 48_000u32);
        let sine = |rate: u32, n: usize| {
            (0..n).map(move |i| (0.5 * (2.0 * std::f64::consts::PI * 1000.0 * i as f64 / f64::from(rate)).sin()) as f32)
        };
        let audio = Audio::new(vec![sine(from_hz, 8820).collect()], from_hz);
        let signal = resample_signal(&audio, to_hz).unwrap();
        let ir = resample(&audio, to_hz).unwrap();
        assert_eq!(signal.sample_rate_hz, to_hz);
        assert_eq!(signal.frames() as u64, resampled_frames(8820, from_hz, to_hz));
        // Away from the ends the waveform is the 1 kHz sine at the new rate, at the input's level.
        let want: Vec<f32> = sine(to_hz, signal.frames()).collect();
        let middle = 2000..signal.frames() - 2000;
        let err = middle.clone().map(|n| (signal.channels[0][n] - want[n]).abs()).fold(0.0f32, f32::max);
        assert!(err < 1e-3, "max error {err}");
        let ratio = f64::from(to_hz) / f64::from(from_hz);
        for n in middle {
            let scaled = f64::from(ir.channels[0][n]) * ratio;
            assert!((f64::from(signal.channels[0][n]) - scaled).abs() < 1e-6, "frame {n}");
        }
        assert!(matches!(resample_signal(&audio, 0), Err(ConditionError::ResampleZeroRate { .. })));
    }
}
