//! A synthetic dry phrase for demos: plucked strings (Karplus-Strong) and percussive hits, with gaps of silence
//! so a reverb's tail can be heard on its own.
//!
//! [`demo_phrase`] lays out, at 96 beats per minute (our own tune, [`DEMO_PHRASE_SECONDS`] long):
//!
//! | from (s) | what |
//! |---|---|
//! | 0.10 | a plucked melody in A minor: E4 G4 A4 C5 B4 G4 A4 |
//! | 4.4 to 5.2 | silence |
//! | 5.2 | kick, woodblock, woodblock, clap, kick, woodblock, clap on eighth notes |
//! | 7.45 to 7.9 | silence |
//! | 7.9 | a kick and an arpeggiated A minor chord (A2 E3 A3 C4) |
//! | 9.15 to the end | silence |
//!
//! Every event ends in exact zeros (strings are damped, hits fade out), so the gaps are digital silence.
//! The mix is peak-normalized to [`DEMO_PEAK_DBFS`].

use std::f64::consts::PI;

use partita_core::synth::Noise;

/// Length of [`demo_phrase`], seconds.
pub const DEMO_PHRASE_SECONDS: f64 = 9.5;

/// Peak level of [`demo_phrase`], dB re. full scale (1.0).
pub const DEMO_PEAK_DBFS: f64 = -3.0;

/// Damping time at the end of a [`pluck`], seconds: the string is muted with a raised-cosine fade.
pub const PLUCK_DAMP_S: f64 = 0.04;

/// Seed of every random excitation in [`demo_phrase`].
const DEMO_SEED: u64 = 0x5EED_0F0A_11CE;

/// A plucked string by the Karplus-Strong algorithm (K. Karplus & A. Strong, "Digital synthesis of plucked-string
/// and drum timbres", Computer Music Journal 7(2), 1983), with the tuning extensions of D. A. Jaffe & J. O.
/// Smith ("Extensions of the Karplus-Strong plucked-string algorithm", same issue): a delay line of N samples,
/// the two-point average (y[n-N] + y[n-N-1]) / 2 (half a sample of delay), a first-order allpass
/// C = (1 - d) / (1 + d) for the remaining fractional delay d in [0.1, 1.1), and a loss factor chosen so the
/// fundamental decays 60 dB in `ring_s` seconds. The excitation is N samples of seeded noise, smoothed by a
/// one-pole low-pass (a softer pluck) and made zero-mean. The last [`PLUCK_DAMP_S`] fade to zero.
///
/// Returns `duration_s x sample_rate_hz` samples with peak magnitude 1. Allocates.
///
/// # Panics
/// If `frequency_hz` is not in (20 Hz, sample_rate_hz / 4), or the duration is shorter than the damping time.
pub fn pluck(frequency_hz: f64, duration_s: f64, ring_s: f64, sample_rate_hz: u32, seed: u64) -> Vec<f32> {
    let fs = f64::from(sample_rate_hz);
    assert!(frequency_hz > 20.0 && frequency_hz < fs / 4.0, "pluck: {frequency_hz} Hz is out of range");
    assert!(duration_s > PLUCK_DAMP_S, "pluck: duration {duration_s} s is shorter than the damping");
    let period = fs / frequency_hz;
    // Loop delay = N + 1/2 (average) + d (allpass).
    let mut n = (period - 0.5).floor() as usize;
    let mut d = period - 0.5 - n as f64;
    if d < 0.1 {
        n -= 1;
        d += 1.0;
    }
    let c = (1.0 - d) / (1.0 + d);
    // The average's gain at f0 is cos(pi f0 / fs); the loss makes up the rest of the wanted decay.
    let per_period = 10f64.powf(-3.0 / (ring_s * frequency_hz));
    let loss = (per_period / (PI * frequency_hz / fs).cos()).min(0.99999);

    let mut noise = Noise::new(seed);
    let mut excitation: Vec<f64> = Vec::with_capacity(n);
    let mut lp = 0.0;
    for _ in 0..n {
        lp += 0.5 * (f64::from(noise.sample()) - lp);
        excitation.push(lp);
    }
    let mean = excitation.iter().sum::<f64>() / n as f64;
    excitation.iter_mut().for_each(|v| *v -= mean);

    let frames = (duration_s * fs).round() as usize;
    let mut y = vec![0.0f64; frames];
    let (mut ap_x1, mut ap_y1) = (0.0, 0.0);
    for i in 0..frames {
        let a = if i >= n { y[i - n] } else { 0.0 };
        let b = if i > n { y[i - n - 1] } else { 0.0 };
        let avg = 0.5 * (a + b);
        let ap = c * avg + ap_x1 - c * ap_y1;
        ap_x1 = avg;
        ap_y1 = ap;
        y[i] = excitation.get(i).copied().unwrap_or(0.0) + loss * ap;
    }
    damp_and_normalize(y, PLUCK_DAMP_S, fs)
}

/// A woodblock-like knock: a 2 ms noise burst ringing two damped modes (about 820 Hz and 2.3 kHz, 50 ms and
/// 20 ms decay; our own choice), 0.25 s long, peak magnitude 1, ending in zeros. Allocates.
pub fn woodblock(sample_rate_hz: u32, seed: u64) -> Vec<f32> {
    let fs = f64::from(sample_rate_hz);
    let frames = (0.25 * fs).round() as usize;
    let mut noise = Noise::new(seed);
    let burst: Vec<f64> =
        (0..frames).map(|i| f64::from(noise.sample()) * (-(i as f64) / (0.0005 * fs)).exp()).collect();
    let mut y = vec![0.0; frames];
    for (freq, decay_s, gain) in [(820.0, 0.05, 1.0), (2300.0, 0.02, 0.5)] {
        let mode = resonate(&burst, freq, decay_s, fs);
        y.iter_mut().zip(&mode).for_each(|(a, m)| *a += gain * m);
    }
    damp_and_normalize(y, 0.03, fs)
}

/// A hand-clap-like hit: four noise bursts 8 to 10 ms apart and a 40 ms decaying tail, band-passed around
/// 1.2 kHz (RBJ band-pass biquad, constant 0 dB peak: R. Bristow-Johnson, "Cookbook formulae for audio EQ
/// biquad filter coefficients"; from memory), 0.3 s long, peak magnitude 1, ending in zeros. Allocates.
pub fn clap(sample_rate_hz: u32, seed: u64) -> Vec<f32> {
    let fs = f64::from(sample_rate_hz);
    let frames = (0.3 * fs).round() as usize;
    let mut noise = Noise::new(seed);
    let onsets_s = [0.0, 0.009, 0.017, 0.027];
    let y: Vec<f64> = (0..frames)
        .map(|i| {
            let t = i as f64 / fs;
            let bursts: f64 = onsets_s.iter().filter(|&&o| t >= o).map(|&o| (-(t - o) / 0.0025).exp()).sum::<f64>();
            let tail = if t >= 0.027 { 0.6 * (-(t - 0.027) / 0.04).exp() } else { 0.0 };
            f64::from(noise.sample()) * (bursts + tail)
        })
        .collect();
    let y = bandpass(&y, 1200.0, 1.1, fs);
    damp_and_normalize(y, 0.05, fs)
}

/// A kick-drum-like thump: a sine whose frequency falls exponentially from 160 Hz to 48 Hz (time constant
/// 35 ms) under a 120 ms amplitude decay, with a 1 ms attack, 0.45 s long, peak magnitude 1, ending in zeros.
/// Allocates.
pub fn kick(sample_rate_hz: u32) -> Vec<f32> {
    let fs = f64::from(sample_rate_hz);
    let frames = (0.45 * fs).round() as usize;
    let (f_start, f_end, tau_f, tau_a) = (160.0, 48.0, 0.035, 0.12);
    let y: Vec<f64> = (0..frames)
        .map(|i| {
            let t = i as f64 / fs;
            // Phase is the integral of f(t) = f_end + (f_start - f_end) e^(-t / tau_f).
            let phase = 2.0 * PI * (f_end * t + (f_start - f_end) * tau_f * (1.0 - (-t / tau_f).exp()));
            let attack = (t / 0.001).min(1.0);
            attack * (-t / tau_a).exp() * phase.sin()
        })
        .collect();
    damp_and_normalize(y, 0.05, fs)
}

/// Renders (allocating) the demo phrase at `sample_rate_hz`: mono, [`DEMO_PHRASE_SECONDS`] long, peak
/// [`DEMO_PEAK_DBFS`], the same samples on every call (fixed seeds). See the module docs for the layout.
///
/// # Panics
/// If `sample_rate_hz` is below 8000.
pub fn demo_phrase(sample_rate_hz: u32) -> Vec<f32> {
    assert!(sample_rate_hz >= 8000, "demo_phrase: sample rate {sample_rate_hz} Hz is below 8000 Hz");
    let fs = f64::from(sample_rate_hz);
    let beat = 60.0 / 96.0;
    let mut mix = vec![0.0f64; (DEMO_PHRASE_SECONDS * fs).round() as usize];
    let mut seed = DEMO_SEED;
    let mut next_seed = || {
        seed = seed.wrapping_add(1);
        seed
    };
    let add = |mix: &mut [f64], at_s: f64, gain: f64, sound: &[f32]| {
        let start = (at_s * fs).round() as usize;
        for (m, s) in mix[start..].iter_mut().zip(sound) {
            *m += gain * f64::from(*s);
        }
    };
    let midi_hz = |note: i32| 440.0 * 2f64.powf(f64::from(note - 69) / 12.0);

    // Part A: the melody, (beat, MIDI note, beats held). Each note rings a little into the next.
    let melody = [(0.0, 64, 0.5), (0.5, 67, 0.5), (1.0, 69, 1.0), (2.0, 72, 0.5), (2.5, 71, 0.5), (3.0, 67, 0.75)];
    for (at, note, held) in melody {
        let s = pluck(midi_hz(note), held * beat + 0.15, 1.4, sample_rate_hz, next_seed());
        add(&mut mix, 0.1 + at * beat, 0.6, &s);
    }
    let last = pluck(midi_hz(69), 1.95, 1.6, sample_rate_hz, next_seed());
    add(&mut mix, 0.1 + 3.75 * beat, 0.6, &last); // ends at 4.39 s

    // Part B: percussion on eighth notes from 5.2 s; ends by 7.42 s.
    let eighth = beat / 2.0;
    let hits = [0, 1, 1, 2, 0, 1, 2];
    for (i, hit) in hits.iter().enumerate() {
        let at = 5.2 + i as f64 * eighth;
        match hit {
            0 => add(&mut mix, at, 0.9, &kick(sample_rate_hz)),
            1 => add(&mut mix, at, 0.45, &woodblock(sample_rate_hz, next_seed())),
            _ => add(&mut mix, at, 0.55, &clap(sample_rate_hz, next_seed())),
        }
    }

    // Part C: a kick under an arpeggiated chord; ends by 9.15 s.
    add(&mut mix, 7.9, 0.8, &kick(sample_rate_hz));
    for (i, note) in [45, 52, 57, 60].into_iter().enumerate() {
        let s = pluck(midi_hz(note), 1.25 - 0.06 * i as f64, 2.0, sample_rate_hz, next_seed());
        add(&mut mix, 7.9 + 0.06 * i as f64, 0.45, &s);
    }

    let peak = mix.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let gain = 10f64.powf(DEMO_PEAK_DBFS / 20.0) / peak;
    mix.iter().map(|v| (v * gain) as f32).collect()
}

/// Fades the last `fade_s` to zero with a raised cosine and scales to peak magnitude 1.
fn damp_and_normalize(mut y: Vec<f64>, fade_s: f64, fs: f64) -> Vec<f32> {
    let fade = ((fade_s * fs).round() as usize).min(y.len());
    let start = y.len() - fade;
    for (j, v) in y[start..].iter_mut().enumerate() {
        *v *= 0.5 + 0.5 * (PI * (j as f64 + 1.0) / fade as f64).cos();
    }
    let peak = y.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let scale = if peak > 0.0 { 1.0 / peak } else { 0.0 };
    y.iter().map(|v| (v * scale) as f32).collect()
}

/// A damped mode: the input through a two-pole resonator at `freq` whose envelope decays as e^(-t / decay_s)
/// (pole radius e^(-1 / (decay_s fs)); common practice).
fn resonate(x: &[f64], freq: f64, decay_s: f64, fs: f64) -> Vec<f64> {
    let r = (-1.0 / (decay_s * fs)).exp();
    let (a1, a2) = (2.0 * r * (2.0 * PI * freq / fs).cos(), -r * r);
    let (mut y1, mut y2) = (0.0, 0.0);
    x.iter()
        .map(|&v| {
            let y = v + a1 * y1 + a2 * y2;
            y2 = y1;
            y1 = y;
            y
        })
        .collect()
}

/// RBJ cookbook band-pass (constant 0 dB peak gain): b = [alpha, 0, -alpha], a = [1 + alpha, -2 cos w0,
/// 1 - alpha], alpha = sin(w0) / (2Q).
fn bandpass(x: &[f64], freq: f64, q: f64, fs: f64) -> Vec<f64> {
    let w0 = 2.0 * PI * freq / fs;
    let alpha = w0.sin() / (2.0 * q);
    let a0 = 1.0 + alpha;
    let (b0, b2) = (alpha / a0, -alpha / a0);
    let (a1, a2) = (-2.0 * w0.cos() / a0, (1.0 - alpha) / a0);
    let (mut x1, mut x2, mut y1, mut y2) = (0.0, 0.0, 0.0, 0.0);
    x.iter()
        .map(|&v| {
            let y = b0 * v + b2 * x2 - a1 * y1 - a2 * y2;
            x2 = x1;
            x1 = v;
            y2 = y1;
            y1 = y;
            y
        })
        .collect()
}

#[cfg(test)]
mod tests {
    use super::*;

    /// Fundamental by autocorrelation with parabolic interpolation of the peak near the expected period.
    fn measured_hz(x: &[f32], expect_hz: f64, fs: f64) -> f64 {
        let x: Vec<f64> = x.iter().map(|&v| f64::from(v)).collect();
        let p = fs / expect_hz;
        let ac = |lag: usize| x[..x.len() - lag].iter().zip(&x[lag..]).map(|(a, b)| a * b).sum::<f64>();
        let lo = (p * 0.8) as usize;
        let hi = (p * 1.2) as usize;
        let best = (lo..=hi).max_by(|&a, &b| ac(a).total_cmp(&ac(b))).unwrap();
        let (ym, y0, yp) = (ac(best - 1), ac(best), ac(best + 1));
        let shift = 0.5 * (ym - yp) / (ym - 2.0 * y0 + yp);
        fs / (best as f64 + shift)
    }

    #[test]
    fn pluck_is_in_tune() {
        // Fractional tuning by the allpass: within 1 cent. Rounding the loop to the nearest half sample instead
        // would be off by 4.7 cents at 440 Hz / 44.1 kHz and 3.4 cents at 988 Hz / 48 kHz.
        for (hz, fs) in [(110.0, 48_000), (261.63, 48_000), (440.0, 44_100), (987.77, 48_000), (659.26, 96_000)] {
            let s = pluck(hz, 0.6, 1.5, fs, 5);
            let got = measured_hz(&s[..(0.5 * fs as f64) as usize], hz, f64::from(fs));
            let cents = 1200.0 * (got / hz).log2();
            assert!(cents.abs() < 1.0, "{hz} Hz at {fs}: measured {got:.3} Hz ({cents:.2} cents)");
        }
    }

    #[test]
    fn pluck_decays_about_as_asked() {
        // RMS over 0.1 s windows 1 s apart falls by about 60 dB / ring_s (higher partials fall faster).
        let fs = 48_000;
        let s = pluck(220.0, 2.5, 2.0, fs, 1);
        let rms = |from_s: f64| {
            let a = (from_s * 48_000.0) as usize;
            (s[a..a + 4800].iter().map(|v| f64::from(*v).powi(2)).sum::<f64>() / 4800.0).sqrt()
        };
        let drop_db = 20.0 * (rms(0.3) / rms(1.3)).log10();
        assert!((27.0..37.0).contains(&drop_db), "fell {drop_db:.1} dB in 1 s; want about 30");
    }

    #[test]
    fn hits_end_in_silence_with_unit_peak() {
        for s in [woodblock(48_000, 1), clap(48_000, 2), kick(48_000), pluck(300.0, 0.3, 1.0, 48_000, 3)] {
            let peak = s.iter().fold(0.0f32, |m, v| m.max(v.abs()));
            assert!((peak - 1.0).abs() < 1e-6);
            assert_eq!(*s.last().unwrap(), 0.0);
            assert!(s.iter().all(|v| v.is_finite()));
        }
    }
}
