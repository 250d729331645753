//! IR conditioning: resampling keeps the frequency response, trimming, normalization, routings, and `load_ir`.

mod support;

use partita_core::synth::{decaying_noise, Noise};
use partita_core::Routing;
use partita_io::{
    load_ir, normalize, resample, resampled_frames, to_impulse_response, trim_tail, write_wav, Audio, ConditionError,
    Dither, IoError, IrOptions, Normalize, SampleFormat,
};
use support::*;

/// |H(f)| in dB of the taps at rate `fs`: a single-bin DFT, H(f) = sum_n h[n] e^(-j 2 pi f n / fs)
/// (the definition of the DTFT, Oppenheim & Schafer).
fn response_db(h: &[f32], fs: u32, f_hz: f64) -> f64 {
    let w = 2.0 * std::f64::consts::PI * f_hz / f64::from(fs);
    let (re, im) = h.iter().enumerate().fold((0.0f64, 0.0f64), |(re, im), (n, &v)| {
        let (s, c) = (w * n as f64).sin_cos();
        (re + f64::from(v) * c, im - f64::from(v) * s)
    });
    20.0 * (re * re + im * im).sqrt().log10()
}

/// A room-like IR: a few frames of pre-delay (as measured IRs have), then a direct impulse and a decaying
/// noise tail, so |H| is smooth enough around the test frequencies.
fn room_ir(frames: usize, rate: u32, seed: u64) -> Vec<f32> {
    let mut h = vec![0.0f32; 16];
    h.extend(decaying_noise(frames - 16, f64::from(rate) * 0.15, seed).iter().map(|v| v * 0.5));
    h
}

#[test]
fn resampling_keeps_the_response_at_1_khz_within_0_1_db() {
    for (from, to) in [(44_100u32, 48_000u32), (96_000, 48_000), (48_000, 44_100), (22_050, 48_000)] {
        let h = room_ir(from as usize / 5, from, u64::from(from));
        let ir = Audio::new(vec![h.clone()], from);
        let out = resample(&ir, to).unwrap();
        assert_eq!(out.sample_rate_hz, to);
        assert_eq!(out.frames() as u64, resampled_frames(h.len() as u64, from, to), "{from} -> {to}: length");
        for f in [1000.0, 250.0, 4000.0] {
            let before = response_db(&h, from, f);
            let after = response_db(&out.channels[0], to, f);
            eprintln!("{from} -> {to} Hz at {f} Hz: {before:.4} dB -> {after:.4} dB");
            assert!((after - before).abs() < 0.1, "{from} -> {to} at {f} Hz: {before:.3} dB vs {after:.3} dB");
        }
        // Without the from/to gain rule the level would be off by 20 log10(to / from) (0.74 dB for
        // 44.1 -> 48 kHz, -6.02 dB for 96 -> 48 kHz): the 0.1 dB check above would fail.
        let unscaled: Vec<f32> = out.channels[0].iter().map(|v| v * to as f32 / from as f32).collect();
        let off = response_db(&unscaled, to, 1000.0) - response_db(&h, from, 1000.0);
        assert!((off - 20.0 * (f64::from(to) / f64::from(from)).log10()).abs() < 0.1, "{off}");
    }
}

#[test]
fn resampling_is_aligned_in_time() {
    // An impulse at input frame 147 k (44.1 kHz) is at time k x 3.333 ms, which is output frame 160 k at 48 kHz.
    // For 96 -> 48 kHz, input frame 2 k lands on output frame k.
    for (from, to, at_in, at_out) in
        [(44_100u32, 48_000u32, 147 * 20, 160 * 20), (96_000, 48_000, 4000, 2000), (48_000, 96_000, 777, 1554)]
    {
        let mut h = vec![0.0f32; 20_000];
        h[at_in] = 1.0;
        let out = resample(&Audio::new(vec![h], from), to).unwrap();
        let peak = out.channels[0]
            .iter()
            .enumerate()
            .fold((0, 0.0f32), |m, (i, &v)| if v.abs() > m.1 { (i, v.abs()) } else { m });
        assert_eq!(peak.0, at_out, "{from} -> {to}: impulse at {} instead of {at_out}", peak.0);
        // The impulse keeps its area: the sum of the taps (the DC gain) stays 1.
        let dc: f64 = out.channels[0].iter().map(|&v| f64::from(v)).sum();
        assert!((dc - 1.0).abs() < 1e-3, "{from} -> {to}: DC gain {dc}");
    }
}

#[test]
fn resampling_handles_channels_independently_and_edge_cases() {
    let h = room_ir(4410, 44_100, 1);
    let half: Vec<f32> = h.iter().map(|v| v * 0.5).collect();
    let out = resample(&Audio::new(vec![h.clone(), half], 44_100), 48_000).unwrap();
    for (a, b) in out.channels[0].iter().zip(&out.channels[1]) {
        assert!((a * 0.5 - b).abs() <= 1e-6 * a.abs().max(1e-3), "{a} {b}");
    }
    // Same rate: a copy.
    let same = resample(&Audio::new(vec![h.clone()], 44_100), 44_100).unwrap();
    assert_eq!(same.channels[0], h);
    // No frames: no frames. Very short: still ceil(len x to / from).
    assert_eq!(resample(&Audio::new(vec![vec![]], 44_100), 48_000).unwrap().frames(), 0);
    assert_eq!(resample(&Audio::new(vec![vec![1.0]], 44_100), 48_000).unwrap().frames(), 2);
    // A rate pair with gcd 1 (one FFT of 44,101 input frames).
    let odd = resample(&Audio::new(vec![h.clone()], 44_101), 48_000).unwrap();
    assert_eq!(odd.frames() as u64, resampled_frames(4410, 44_101, 48_000));
    // Faults. A 7 Hz file would need a 14-million-frame FFT to reach 48 kHz: refused, quickly.
    assert!(matches!(
        resample(&Audio::new(vec![h.clone()], 7), 48_000),
        Err(ConditionError::ResampleRates { from_hz: 7, to_hz: 48_000, .. })
    ));
    assert_eq!(
        resample(&Audio::new(vec![h.clone()], 0), 48_000).unwrap_err(),
        ConditionError::ResampleZeroRate { from_hz: 0, to_hz: 48_000 }
    );
    assert!(matches!(resample(&Audio::new(vec![h.clone()], 44_100), 0), Err(ConditionError::ResampleZeroRate { .. })));
    assert!(matches!(
        resample(&Audio::new(vec![h, vec![0.0; 3]], 44_100), 48_000),
        Err(ConditionError::UnequalChannels { channel: 1, frames: 3, .. })
    ));
}

#[test]
fn trim_tail_cuts_all_channels_after_the_last_loud_frame() {
    // Peak 1.0 (channel 0). At -30 dB the level is 0.0316: channel 0's last such frame is 2, channel 1's is 4
    // (a negative tap counts by magnitude).
    let mut ir = Audio::new(
        vec![vec![1.0, 0.5, 0.1, 0.01, 0.001, 0.0001, 0.0, 0.0], vec![0.2, 0.0, 0.0, 0.0, -0.05, 0.02, 0.001, 0.0]],
        48_000,
    );
    assert_eq!(trim_tail(&mut ir, -30.0).unwrap(), 3);
    assert_eq!(ir.frames(), 5);
    assert_eq!(ir.channels[1], vec![0.2, 0.0, 0.0, 0.0, -0.05]);
    // At 0 dB only the peak frame itself survives.
    assert_eq!(trim_tail(&mut ir, 0.0).unwrap(), 4);
    assert_eq!(ir.channels, vec![vec![1.0], vec![0.2]]);
    // Quieter thresholds keep more: -70 dB keeps everything down to 0.001 (-60 dB) in channel 0.
    let mut ir = Audio::new(vec![vec![1.0, 0.5, 0.1, 0.01, 0.001, 0.0001, 0.0, 0.0]], 48_000);
    assert_eq!(trim_tail(&mut ir, -70.0).unwrap(), 3);
    // An all-zero IR is left alone; a threshold above the peak or NaN is refused.
    let mut silent = Audio::new(vec![vec![0.0; 10]], 48_000);
    assert_eq!(trim_tail(&mut silent, -60.0).unwrap(), 0);
    assert_eq!(silent.frames(), 10);
    assert_eq!(trim_tail(&mut ir, 3.0).unwrap_err(), ConditionError::BadThreshold { threshold_db: 3.0 });
    assert!(trim_tail(&mut ir, f64::NAN).is_err());
}

#[test]
fn normalization_modes() {
    let base = Audio::new(vec![vec![0.5, -0.8, 0.1], vec![0.3, 0.3, 0.3]], 48_000);
    // None: untouched, gain 1.
    let mut ir = base.clone();
    assert_eq!(normalize(&mut ir, Normalize::None).unwrap(), 1.0);
    assert_eq!(ir, base);
    // Peak: the largest |tap| over all channels (-0.8) becomes 1; the balance between channels is kept.
    let mut ir = base.clone();
    let gain = normalize(&mut ir, Normalize::Peak).unwrap();
    assert!((gain - 1.25).abs() < 1e-6);
    assert!((ir.peak() - 1.0).abs() < 1e-6);
    assert!((ir.channels[1][0] - 0.375).abs() < 1e-6);
    // Energy: channel 0 has 0.25 + 0.64 + 0.01 = 0.90, channel 1 has 0.27; channel 0 gets unit energy.
    let mut ir = base.clone();
    let gain = normalize(&mut ir, Normalize::Energy).unwrap();
    assert!((gain - 1.0 / 0.9f64.sqrt()).abs() < 1e-6);
    let energy = |c: &[f32]| c.iter().map(|&v| f64::from(v) * f64::from(v)).sum::<f64>();
    assert!((energy(&ir.channels[0]) - 1.0).abs() < 1e-6);
    assert!((energy(&ir.channels[1]) - 0.27 / 0.9).abs() < 1e-6);
    // Silence cannot be normalized.
    let mut silent = Audio::new(vec![vec![0.0; 4]], 48_000);
    assert_eq!(normalize(&mut silent, Normalize::Peak).unwrap_err(), ConditionError::Silent);
    assert_eq!(normalize(&mut silent, Normalize::Energy).unwrap_err(), ConditionError::Silent);
}

#[test]
fn load_ir_by_default_uses_the_taps_exactly() {
    let taps: Vec<Vec<f32>> = (0..4).map(|c| room_ir(3000, 48_000, 10 + c)).collect();
    let path = tmp("true-stereo.wav");
    write_wav(&path, &taps, 48_000, SampleFormat::F32, Dither::OFF).unwrap();
    let p = load_ir(&path, &IrOptions::default()).unwrap();
    assert_eq!(p.routing, Routing::TrueStereo);
    assert_eq!(p.ir.as_planar(), &taps[..]);
    assert_eq!((p.gain, p.trimmed_frames, p.source.channels), (1.0, 0, 4));
}

#[test]
fn load_ir_applies_every_step() {
    let mut h = room_ir(8820, 44_100, 3);
    h.extend(std::iter::repeat_n(0.0, 4410));
    let path = tmp("mono-44k.wav");
    write_wav(&path, &[h.clone()], 44_100, SampleFormat::Pcm24, Dither::OFF).unwrap();
    let options = IrOptions {
        sample_rate_hz: Some(48_000),
        trim_tail_db: Some(-120.0),
        normalize: Normalize::Peak,
        routing: Some(Routing::Stereo),
    };
    let p = load_ir(&path, &options).unwrap();
    assert_eq!(p.routing, Routing::Stereo);
    // The 4410 zero frames (and the quietest end of the tail) are trimmed before resampling.
    assert!(p.trimmed_frames >= 4410, "{}", p.trimmed_frames);
    let kept = h.len() - p.trimmed_frames;
    assert_eq!(p.ir.frames() as u64, resampled_frames(kept as u64, 44_100, 48_000));
    assert_eq!(p.ir.sample_rate_hz(), 48_000);
    let peak = p.ir.channel(0).iter().fold(0.0f32, |m, v| m.max(v.abs()));
    assert!((peak - 1.0).abs() < 1e-6, "{peak}");
}

#[test]
fn load_ir_routing_override_and_mismatch() {
    let mut noise = Noise::new(4);
    let six: Vec<Vec<f32>> = (0..6).map(|_| noise.vec(100)).collect();
    let path = tmp("six.wav");
    write_wav(&path, &six, 48_000, SampleFormat::F32, Dither::OFF).unwrap();
    let err = load_ir(&path, &IrOptions::default()).unwrap_err();
    assert!(matches!(err, IoError::Condition { source: ConditionError::RoutingNeeded { channels: 6 }, .. }), "{err:?}");
    assert_names_file(&err, &path);
    let options = IrOptions { routing: Some("matrix:2x3".parse().unwrap()), ..IrOptions::default() };
    let p = load_ir(&path, &options).unwrap();
    assert_eq!(p.routing, Routing::Matrix { inputs: 2, outputs: 3 });
    let options = IrOptions { routing: Some(Routing::TrueStereo), ..IrOptions::default() };
    let err = load_ir(&path, &options).unwrap_err();
    assert!(
        matches!(err, IoError::Condition { source: ConditionError::RoutingMismatch { channels: 6, .. }, .. }),
        "{err:?}"
    );
    assert_names_file(&err, &path);
    assert!(err.to_string().contains("true-stereo"), "{err}");
    // A silent IR with normalization names the file too.
    let path = tmp("silent.wav");
    write_wav(&path, &[vec![0.0f32; 10]], 48_000, SampleFormat::F32, Dither::OFF).unwrap();
    let options = IrOptions { normalize: Normalize::Energy, ..IrOptions::default() };
    let err = load_ir(&path, &options).unwrap_err();
    assert!(matches!(err, IoError::Condition { source: ConditionError::Silent, .. }), "{err:?}");
    assert_names_file(&err, &path);
}

#[test]
fn to_impulse_response_maps_core_errors_with_the_file_name() {
    let path = std::path::Path::new("some/ir.wav");
    let ok = to_impulse_response(Audio::new(vec![vec![1.0, 0.5]], 48_000), path).unwrap();
    assert_eq!(ok.frames(), 2);
    let err = to_impulse_response(Audio::new(vec![vec![]], 48_000), path).unwrap_err();
    assert!(matches!(err, IoError::EmptyIr { .. }), "{err:?}");
    assert_names_file(&err, path);
    let err = to_impulse_response(Audio::new(vec![], 48_000), path).unwrap_err();
    assert!(matches!(err, IoError::EmptyIr { .. }), "{err:?}");
    let err = to_impulse_response(Audio::new(vec![vec![1.0], vec![1.0, 2.0]], 48_000), path).unwrap_err();
    assert!(matches!(err, IoError::Ir { source: partita_core::IrError::UnequalLengths { .. }, .. }), "{err:?}");
    assert_names_file(&err, path);
    let err = to_impulse_response(Audio::new(vec![vec![1.0, f32::NAN]], 48_000), path).unwrap_err();
    assert!(
        matches!(err, IoError::Ir { source: partita_core::IrError::NonFinite { channel: 0, frame: 1 }, .. }),
        "{err:?}"
    );
    let err = to_impulse_response(Audio::new(vec![vec![1.0]], 0), path).unwrap_err();
    assert!(matches!(err, IoError::Ir { source: partita_core::IrError::SampleRateZero, .. }), "{err:?}");
}
