//! Room-acoustic analysis against published formulas, and the synthetic rooms and phrase measured by it.
//!
//! Sources: T60 = 3 ln(10) / delta = 6.9078 / delta for an amplitude envelope e^(-delta t) (REFERENCES.md);
//! Schroeder backward integration (JASA 37, 1965); ISO 3382-1:2009 evaluation ranges (EDT 0/-10, T20 -5/-25,
//! T30 -5/-35 dB); IEC 61260-1:2014 base-10 octave bands; Sabine and Eyring (REFERENCES.md); Allen & Berkley
//! (JASA 65, 1979) image positions.

use partita_core::synth::Noise;
use partita_room::analysis::{
    centre_time_s, clarity_db, definition, edt, fit_decay, reverberation_time, schroeder_decay_db, t20, t30,
    AnalysisError, DecayRange, FilterPhase, OctaveFilter,
};
use partita_room::phrase::{demo_phrase, DEMO_PHRASE_SECONDS};
use partita_room::room::{
    eyring_absorption, eyring_rt60_s, image_sources, render_room_ir, sabine_rt60_s, RoomSpec, DEMO_SEED, ROOM_BANDS,
    SABINE_CONSTANT_S_PER_M, SPEED_OF_SOUND_M_PER_S,
};

const FS: f64 = 48_000.0;

/// The REFERENCES.md constant, rounded as published.
const T60_TIMES_DELTA: f64 = 6.9078;

/// White noise under the amplitude envelope e^(-delta t), `seconds` long.
fn exponential_noise(delta: f64, seconds: f64, seed: u64) -> Vec<f32> {
    let mut noise = Noise::new(seed);
    (0..(seconds * FS) as usize).map(|n| noise.sample() * (-delta * n as f64 / FS).exp() as f32).collect()
}

fn rel(got: f64, want: f64) -> f64 {
    got / want - 1.0
}

// ---------------------------------------------------------------------------------------------------------
// Analysis against formulas
// ---------------------------------------------------------------------------------------------------------

#[test]
fn exponential_noise_gives_t60_of_6_9078_over_delta() {
    // Broadband T30 and T20 of exponentially decaying white noise, four decay rates, eight takes each: every take
    // within 2%. EDT's 0 to -10 dB range spans only about one energy time constant (T / 13.8) of noise, so one
    // take scatters more (up to 3% seen here): every take within 4%, the mean of the eight within 1%.
    for want in [0.3, 0.8, 1.5, 3.0] {
        let delta = T60_TIMES_DELTA / want;
        let mut edt_sum = 0.0;
        for seed in 1..=8 {
            let ir = exponential_noise(delta, 1.2 * want + 0.1, seed);
            for (name, got) in [("T30", t30(&ir, FS)), ("T20", t20(&ir, FS))] {
                let got = got.unwrap();
                assert!(rel(got, want).abs() < 0.02, "{name} {got:.4} s, want {want} s (seed {seed})");
            }
            let got = edt(&ir, FS).unwrap();
            assert!(rel(got, want).abs() < 0.04, "EDT {got:.4} s, want {want} s (seed {seed})");
            edt_sum += got;
        }
        assert!(rel(edt_sum / 8.0, want).abs() < 0.01, "mean EDT {} s, want {want} s", edt_sum / 8.0);
    }
}

#[test]
fn analytic_exponential_decay_curve_is_fitted_exactly() {
    // Energy e^(-2 delta t) integrates backward to (1 / 2 delta) e^(-2 delta t): its curve in dB re. the start
    // is -20 delta t / ln(10), a straight line. Fitted over T30's range it gives 3 ln(10) / delta.
    for want in [0.25, 1.0, 4.0] {
        let delta = T60_TIMES_DELTA / want;
        let edc: Vec<f64> =
            (0..(want * FS) as usize).map(|n| -20.0 * delta * (n as f64 / FS) / std::f64::consts::LN_10).collect();
        for (lo, hi) in [(-5.0, -35.0), (-5.0, -25.0), (0.0, -10.0)] {
            let fit = fit_decay(&edc, FS, lo, hi).unwrap();
            assert!(rel(fit.reverberation_time_s, want).abs() < 1e-5, "{fit:?}");
            assert!(fit.nonlinearity_permille.abs() < 1e-6);
        }
    }
    // A noise-free sampled exponential through the whole chain (Schroeder sum of a geometric series): 0.1%.
    let want = 1.3;
    let delta = T60_TIMES_DELTA / want;
    let ir: Vec<f64> = (0..(1.5 * want * FS) as usize).map(|n| (-delta * n as f64 / FS).exp()).collect();
    for range in [DecayRange::T30, DecayRange::T20, DecayRange::Edt] {
        let got = reverberation_time(&ir, FS, range).unwrap().reverberation_time_s;
        assert!(rel(got, want).abs() < 1e-3, "{range:?}: {got}");
    }
}

#[test]
fn decays_that_do_not_reach_the_range_are_refused() {
    // A curve that stops at -30 dB has a T20 but no T30.
    let edc: Vec<f64> = (0..=3000).map(|n| -30.0 * n as f64 / 3000.0).collect();
    assert!(fit_decay(&edc, FS, -5.0, -25.0).is_ok());
    assert_eq!(
        fit_decay(&edc, FS, -5.0, -35.0),
        Err(AnalysisError::DecayTooShallow { needed_db: -35.0, reached_db: -30.0 })
    );

    // A 1 s decay sinking into stationary noise 40 dB below its start, 3 s long: the Schroeder curve is bent
    // by the noise still to come, so T30 (and T20) must be refused, not reported long.
    let mut noise = Noise::new(11);
    let delta = T60_TIMES_DELTA / 1.0;
    let noisy: Vec<f32> =
        (0..(3.0 * FS) as usize).map(|n| noise.sample() * ((-delta * n as f64 / FS).exp() as f32 + 0.01)).collect();
    for range in [DecayRange::T30, DecayRange::T20] {
        let got = reverberation_time(&noisy, FS, range);
        assert!(matches!(got, Err(AnalysisError::NoiseFloorTooHigh { .. })), "{range:?}: {got:?}");
    }
    // The same decay with its floor 90 dB down is measured.
    let mut noise = Noise::new(11);
    let quiet: Vec<f32> =
        (0..(3.0 * FS) as usize).map(|n| noise.sample() * ((-delta * n as f64 / FS).exp() as f32 + 3e-5)).collect();
    assert!(rel(t30(&quiet, FS).unwrap(), 1.0).abs() < 0.02);

    // A response cut off after 0.5 T60 (30 dB of decay) has no T30: the end is too loud.
    let cut = exponential_noise(delta, 0.5, 4);
    assert!(matches!(t30(&cut, FS), Err(AnalysisError::NoiseFloorTooHigh { .. })), "{:?}", t30(&cut, FS));
    assert_eq!(t30(&[0.0f32; 100], FS), Err(AnalysisError::Silent));
}

#[test]
fn clarity_definition_and_centre_time_of_an_exponential_decay() {
    // For h^2 = e^(-2 delta t): D50 = 1 - e^(-0.1 delta), C80 = 10 log10(e^(0.16 delta) - 1), Ts = 1 / (2 delta)
    // (integrals of the ISO 3382-1 annex A definitions).
    let want_t = 1.1;
    let delta = T60_TIMES_DELTA / want_t;
    let ir: Vec<f64> = (0..(2.0 * FS) as usize).map(|n| (-delta * n as f64 / FS).exp()).collect();
    let d50 = 1.0 - (-0.1 * delta).exp();
    let c80 = 10.0 * ((0.16 * delta).exp() - 1.0).log10();
    assert!((definition(&ir, FS).unwrap() - d50).abs() < 1e-4);
    assert!((clarity_db(&ir, FS, 80.0).unwrap() - c80).abs() < 0.01);
    assert!(rel(centre_time_s(&ir, FS).unwrap(), 1.0 / (2.0 * delta)).abs() < 1e-3);
}

/// Steady-state gain in dB of `filter` for a sine at `hz`, from RMS over the middle of a 1.5 s tone.
fn measured_gain_db(filter: &OctaveFilter, hz: f64) -> f64 {
    let x: Vec<f64> =
        (0..(1.5 * FS) as usize).map(|n| (2.0 * std::f64::consts::PI * hz * n as f64 / FS).sin()).collect();
    let y = filter.process(&x);
    let (a, b) = ((0.5 * FS) as usize, FS as usize);
    let rms = |v: &[f64]| (v[a..b].iter().map(|s| s * s).sum::<f64>() / (b - a) as f64).sqrt();
    20.0 * (rms(&y) / rms(&x)).log10()
}

#[test]
fn octave_filters_pass_their_band_and_stop_the_others() {
    // Design values (Butterworth order 3, see OctaveFilter): 0 dB at the centre, -3.01 dB at the IEC 61260-1
    // band edges, -19.6 dB one octave off, -43 dB two octaves off (causal). Tolerances: centre within 0.1 dB,
    // edges within 0.2 dB, one octave off below -15 dB (causal) / -28 dB (zero phase; -31.8 dB by design, less
    // for the 8 kHz band, whose lower skirt the bilinear transform flattens), two octaves off below -40 dB /
    // -70 dB. Each is checked from the coefficients and by filtering a sine (within 0.3 dB of the design).
    for band in ROOM_BANDS {
        for phase in [FilterPhase::Causal, FilterPhase::ZeroPhase] {
            let f = OctaveFilter::new(band, FS, phase).unwrap();
            let (stop1, stop2) = if phase == FilterPhase::Causal { (-15.0, -40.0) } else { (-28.0, -70.0) };
            let fm = band.centre_hz();
            let checks = [(fm, 0.0, 0.1), (band.lower_edge_hz(), -3.01, 0.2), (band.upper_edge_hz(), -3.01, 0.2)];
            for (hz, bound) in [(fm / 2.0, stop1), (fm * 2.0, stop1), (fm / 4.0, stop2), (fm * 4.0, stop2)] {
                if hz < FS / 2.0 {
                    assert!(f.gain_db(hz) < bound, "{band} {phase:?} at {hz:.0} Hz: {:.1} dB", f.gain_db(hz));
                    assert!(measured_gain_db(&f, hz) < bound, "{band} {phase:?} measured at {hz:.0} Hz");
                }
            }
            for (hz, want, tol) in checks {
                let design = f.gain_db(hz);
                let measured = measured_gain_db(&f, hz);
                assert!((design - want).abs() < tol, "{band} {phase:?} at {hz:.1} Hz: design {design:.2} dB");
                assert!((measured - design).abs() < 0.3, "{band} {phase:?} at {hz:.1} Hz: measured {measured:.2}");
            }
        }
    }
}

// ---------------------------------------------------------------------------------------------------------
// Synthetic rooms
// ---------------------------------------------------------------------------------------------------------

/// T30 (causal octave filter) per band of [`ROOM_BANDS`] for one channel.
fn band_t30(ir: &[f32], fs: f64, phase: FilterPhase) -> Vec<f64> {
    ROOM_BANDS.iter().map(|&b| t30(&OctaveFilter::new(b, fs, phase).unwrap().process(ir), fs).unwrap()).collect()
}

#[test]
fn preset_irs_measure_their_intended_rt60_in_every_band() {
    // ISO 3382-1 T30 per octave band (Schroeder integration + least-squares fit) of each channel of each preset
    // IR, 125 Hz to 8 kHz, must lie within 5% of the preset's intended RT60; T20 too. Both filter phases.
    for spec in RoomSpec::presets() {
        let fs = f64::from(spec.sample_rate_hz);
        let ir = render_room_ir(&spec, DEMO_SEED);
        for (ch, taps) in ir.iter().enumerate() {
            for phase in [FilterPhase::Causal, FilterPhase::ZeroPhase] {
                let measured = band_t30(taps, fs, phase);
                let row: Vec<String> = measured.iter().map(|t| format!("{t:.3}")).collect();
                println!("{} ch {ch} {phase:?} T30: {}", spec.name, row.join(" "));
                for ((band, want), got) in ROOM_BANDS.iter().zip(spec.rt60_s).zip(&measured) {
                    assert!(
                        rel(*got, want).abs() < 0.05,
                        "{} ch {ch} {band}: T30 {got:.3} s, want {want} s",
                        spec.name
                    );
                }
            }
            for (&band, want) in ROOM_BANDS.iter().zip(spec.rt60_s) {
                let got = t20(&OctaveFilter::new(band, fs, FilterPhase::Causal).unwrap().process(taps), fs).unwrap();
                assert!(rel(got, want).abs() < 0.05, "{} ch {ch} {band}: T20 {got:.3} s, want {want} s", spec.name);
            }
        }
    }
}

#[test]
fn other_takes_measure_the_same_rooms() {
    // The shipped seed is not a lucky one: three other takes (left channel), T30 in every band within 5%.
    // (Over 20 takes x 2 channels the worst T30 seen was 2.7% off, at 125 Hz; 1.3% from 500 Hz to 2 kHz.)
    for spec in RoomSpec::presets() {
        for seed in 1..=3 {
            let ir = render_room_ir(&spec, seed);
            let measured = band_t30(&ir[0], FS, FilterPhase::Causal);
            for ((band, want), got) in ROOM_BANDS.iter().zip(spec.rt60_s).zip(&measured) {
                assert!(rel(*got, want).abs() < 0.05, "{} seed {seed} {band}: {got:.3} s, want {want} s", spec.name);
            }
        }
    }
}

#[test]
fn rooms_from_volume_rt60_and_hf_ratio_measure_what_they_were_given() {
    // RoomSpec::from_character (the plugin's built-in custom room): small, middle and large rooms, dull and
    // bright; the spec validates, has the volume asked for, and the rendered IR's T30 at 500 Hz is the given
    // RT60 and at 4 kHz the given ratio of it, within 5%.
    for (volume_m3, rt60_s, hf_ratio) in [(60.0, 0.7, 0.8), (1500.0, 2.2, 0.5), (12_000.0, 3.5, 1.0)] {
        let spec = RoomSpec::from_character("test", volume_m3, rt60_s, hf_ratio);
        spec.validate().unwrap_or_else(|e| panic!("V={volume_m3}: {e}"));
        assert!(rel(spec.volume_m3(), volume_m3).abs() < 1e-9);
        let ir = render_room_ir(&spec, DEMO_SEED);
        let measured = band_t30(&ir[0], FS, FilterPhase::Causal);
        let (t500, t4k) = (measured[2], measured[5]);
        println!("V={volume_m3} T={rt60_s} hf={hf_ratio}: T30 500 Hz {t500:.3} s, 4 kHz {t4k:.3} s");
        assert!(rel(t500, rt60_s).abs() < 0.05, "V={volume_m3}: T30(500) {t500:.3}, want {rt60_s}");
        assert!(
            rel(t4k, rt60_s * hf_ratio).abs() < 0.05,
            "V={volume_m3}: T30(4k) {t4k:.3}, want {}",
            rt60_s * hf_ratio
        );
    }
}

#[test]
fn the_rt60_check_notices_a_ten_percent_error() {
    // Render the stairwell with every RT60 10% longer: its 500 Hz..2 kHz T30s must fail the 5% check against the
    // original values, and pass against the new ones. The measurement is not an echo of the spec.
    let spec = RoomSpec::tiled_stairwell();
    let mut longer = spec.clone();
    longer.rt60_s = spec.rt60_s.map(|t| t * 1.1);
    let ir = render_room_ir(&longer, DEMO_SEED);
    let measured = band_t30(&ir[0], FS, FilterPhase::Causal);
    for i in 2..=4 {
        assert!(rel(measured[i], spec.rt60_s[i]) > 0.05, "{}: {}", ROOM_BANDS[i], measured[i]);
        assert!(rel(measured[i], longer.rt60_s[i]).abs() < 0.05, "{}: {}", ROOM_BANDS[i], measured[i]);
    }
}

#[test]
fn broadband_t30_lies_between_the_band_values() {
    // Broadband T30 has no single intended value (it weights the bands by their energy); it must lie within the
    // range of the band RT60s.
    for spec in RoomSpec::presets() {
        let ir = render_room_ir(&spec, DEMO_SEED);
        let (lo, hi) = spec.rt60_s.iter().fold((f64::MAX, 0.0f64), |(a, b), &t| (a.min(t), b.max(t)));
        for taps in &ir {
            let got = t30(taps, FS).unwrap();
            println!(
                "{} broadband T30 {got:.3} s, EDT {:.3} s, C80 {:.1} dB, D50 {:.2}, Ts {:.3} s",
                spec.name,
                edt(taps, FS).unwrap(),
                clarity_db(taps, FS, 80.0).unwrap(),
                definition(taps, FS).unwrap(),
                centre_time_s(taps, FS).unwrap()
            );
            assert!(got > lo && got < hi, "{}: {got}", spec.name);
        }
    }
}

#[test]
fn other_sample_rates_keep_the_decay() {
    let spec = RoomSpec::tiled_stairwell().with_sample_rate(44_100);
    let ir = render_room_ir(&spec, DEMO_SEED);
    assert_eq!(ir[0].len(), spec.frames());
    assert_eq!(spec.frames(), 70_560);
    let measured = band_t30(&ir[1], 44_100.0, FilterPhase::Causal);
    for ((band, want), got) in ROOM_BANDS.iter().zip(spec.rt60_s).zip(&measured) {
        assert!(rel(*got, want).abs() < 0.05, "{band}: {got} vs {want}");
    }
}

#[test]
fn direct_sound_arrives_at_r_over_c_with_amplitude_1_over_r() {
    // Allen & Berkley: the direct path is the order-0 image. Its energy (windowed-sinc pulse, 33 taps) must be
    // 1 / r^2 within 10% (a half-sample delay loses up to 6% near Nyquist), and nothing before it above -50 dB.
    for spec in RoomSpec::presets() {
        let ir = render_room_ir(&spec, DEMO_SEED);
        for (ch, taps) in ir.iter().enumerate() {
            let r = spec.direct_distance_m(ch);
            let at = (r / SPEED_OF_SOUND_M_PER_S * FS).round() as usize;
            let energy = |s: &[f32]| s.iter().map(|v| f64::from(*v).powi(2)).sum::<f64>();
            let direct = energy(&taps[at - 16..=at + 16]);
            assert!(
                (direct * r * r - 1.0).abs() < 0.1,
                "{} ch {ch}: direct energy x r^2 = {}",
                spec.name,
                direct * r * r
            );
            let before = energy(&taps[..at - 20]);
            assert!(10.0 * (before / direct).log10() < -50.0, "{} ch {ch}: energy before the direct sound", spec.name);
            let first_loud = taps.iter().position(|v| f64::from(v.abs()) > 0.5 / r).unwrap();
            assert!(first_loud.abs_diff(at) <= 1, "{} ch {ch}: first arrival at {first_loud}, want {at}", spec.name);
        }
    }
}

#[test]
fn image_sources_follow_allen_and_berkley() {
    let spec = RoomSpec {
        name: "test-box".into(),
        dimensions_m: [4.0, 5.0, 3.0],
        source_m: [1.0, 1.0, 1.0],
        receivers_m: [[2.0, 3.0, 1.5], [2.5, 3.0, 1.5]],
        rt60_s: [0.5; 7],
        mixing_time_s: 0.05,
        crossfade_s: 0.02,
        length_s: 0.5,
        sample_rate_hz: 48_000,
    };
    // Order 0 and the six first-order images, by hand: mirror the source in each wall.
    let images = image_sources(&spec, 0, 0.05);
    assert_eq!(images[0].reflections, 0);
    assert_eq!(images[0].position_m, [1.0, 1.0, 1.0]);
    assert!((images[0].distance_m - 5.25f64.sqrt()).abs() < 1e-12);
    let mut first: Vec<[f64; 3]> = images.iter().filter(|i| i.reflections == 1).map(|i| i.position_m).collect();
    first.sort_by(|a, b| a.partial_cmp(b).unwrap());
    let mut want =
        vec![[-1.0, 1.0, 1.0], [7.0, 1.0, 1.0], [1.0, -1.0, 1.0], [1.0, 9.0, 1.0], [1.0, 1.0, -1.0], [1.0, 1.0, 5.0]];
    want.sort_by(|a, b| a.partial_cmp(b).unwrap());
    assert_eq!(first, want);
    for im in &images {
        assert!((im.delay_s - im.distance_m / SPEED_OF_SOUND_M_PER_S).abs() < 1e-15);
    }
    // One image per room volume: within a sphere of radius R there are about (4/3) pi R^3 / V.
    let radius_s = 0.15;
    let count = image_sources(&spec, 0, radius_s).len() as f64;
    let radius = radius_s * SPEED_OF_SOUND_M_PER_S;
    let expect = 4.0 / 3.0 * std::f64::consts::PI * radius.powi(3) / spec.volume_m3();
    assert!(rel(count, expect).abs() < 0.03, "{count} images, expect {expect:.0}");
}

#[test]
fn sabine_and_eyring_formulas() {
    // Hand example: 10 m x 8 m x 3 m (V = 240 m^3, S = 268 m^2), mean absorption 0.2:
    // Sabine 0.161 x 240 / (268 x 0.2) = 0.7209 s; Eyring 0.161 x 240 / (268 x 0.22314) = 0.6461 s.
    // Our constant is 24 ln(10) / 343 = 0.16111 (published 0.161): within 0.2%.
    assert!(rel(SABINE_CONSTANT_S_PER_M, 0.161).abs() < 1e-3);
    let room = [10.0, 8.0, 3.0];
    assert!(rel(sabine_rt60_s(room, 0.2), 0.7209).abs() < 2e-3);
    assert!(rel(eyring_rt60_s(room, 0.2), 0.6461).abs() < 2e-3);
    assert!(rel(eyring_rt60_s(room, 0.01), sabine_rt60_s(room, 0.01)).abs() < 0.006);
    for spec in RoomSpec::presets() {
        for (alpha, want) in spec.absorption().iter().zip(spec.rt60_s) {
            assert!((0.0..1.0).contains(alpha));
            assert!(rel(eyring_rt60_s(spec.dimensions_m, *alpha), want).abs() < 1e-12);
            assert!((eyring_absorption(spec.dimensions_m, want) - alpha).abs() < 1e-15);
            assert!(sabine_rt60_s(spec.dimensions_m, *alpha) > want);
        }
    }
}

#[test]
fn same_seed_same_ir_other_seed_other_tail() {
    let spec = RoomSpec::tiled_stairwell();
    let a = render_room_ir(&spec, 7);
    let b = render_room_ir(&spec, 7);
    let c = render_room_ir(&spec, 8);
    assert_eq!(a, b);
    assert_eq!(a.len(), 2);
    assert!(a.iter().all(|ch| ch.len() == spec.frames() && ch.iter().all(|v| v.is_finite())));
    // The image-source part does not depend on the seed; the tail does (correlation below 0.05).
    let early = ((spec.mixing_time_s - spec.crossfade_s / 2.0) * FS) as usize - 20;
    assert_eq!(a[0][..early], c[0][..early]);
    let tail = (0.2 * FS) as usize;
    assert!(correlation(&a[0][tail..], &c[0][tail..]).abs() < 0.05);
}

fn correlation(x: &[f32], y: &[f32]) -> f64 {
    let dot = |p: &[f32], q: &[f32]| p.iter().zip(q).map(|(a, b)| f64::from(*a) * f64::from(*b)).sum::<f64>();
    dot(x, y) / (dot(x, x) * dot(y, y)).sqrt()
}

#[test]
fn stereo_tails_are_decorrelated() {
    // Normalized cross-correlation of left and right after 200 ms, lags within +-1 ms: below 0.1.
    for spec in RoomSpec::presets() {
        let ir = render_room_ir(&spec, DEMO_SEED);
        let from = (0.2 * FS) as usize;
        for lag in 0..=48 {
            let l = &ir[0][from + lag..];
            let r = &ir[1][from..ir[1].len() - lag];
            assert!(correlation(l, r).abs() < 0.1, "{} lag {lag}", spec.name);
            let l = &ir[0][from..ir[0].len() - lag];
            let r = &ir[1][from + lag..];
            assert!(correlation(l, r).abs() < 0.1, "{} lag -{lag}", spec.name);
        }
    }
}

#[test]
fn demo_files_fit_in_three_megabytes() {
    // Both IRs (stereo) and the phrase (mono) at 48 kHz as 24-bit PCM WAV (44-byte header) take under
    // 3,000,000 bytes together. As 32-bit float they would not (about 3.6 MB): write them as 24-bit.
    let frames: usize =
        RoomSpec::presets().iter().map(|s| 2 * s.frames()).sum::<usize>() + (DEMO_PHRASE_SECONDS * FS) as usize;
    let bytes_24 = 3 * 44 + 3 * frames;
    println!("demo data: {bytes_24} bytes as 24-bit PCM, {} bytes as float32", 3 * 44 + 4 * frames);
    assert!(bytes_24 < 3_000_000, "{bytes_24}");
    let spec_ok = RoomSpec::presets().iter().all(|s| s.validate().is_ok());
    assert!(spec_ok);
}

#[test]
fn schroeder_curve_of_a_preset_is_monotone_from_zero() {
    let ir = render_room_ir(&RoomSpec::timber_barn(), DEMO_SEED);
    let edc = schroeder_decay_db(&ir[0]).unwrap();
    assert_eq!(edc[0], 0.0);
    assert!(edc.windows(2).all(|w| w[1] <= w[0]));
    assert!(edc[edc.len() - 1] < -100.0); // the end fade takes the last samples towards zero
}

// ---------------------------------------------------------------------------------------------------------
// Dry phrase
// ---------------------------------------------------------------------------------------------------------

#[test]
fn demo_phrase_has_sound_silence_and_a_minus_3_dbfs_peak() {
    // Peak between -3.1 dBFS (0.700) and -3.0 dBFS (0.708); parts with sound above -30 dBFS RMS; gaps of exact
    // digital silence where the module docs say; the same samples on every call.
    for fs in [48_000u32, 44_100] {
        let x = demo_phrase(fs);
        let f = f64::from(fs);
        assert_eq!(x.len(), (DEMO_PHRASE_SECONDS * f).round() as usize);
        assert!(x.iter().all(|v| v.is_finite()));
        let peak = x.iter().fold(0.0f32, |m, v| m.max(v.abs()));
        assert!((0.700..=0.708).contains(&peak), "peak {peak}");
        let span = |a: f64, b: f64| &x[(a * f) as usize..(b * f) as usize];
        for (a, b) in [(0.1, 4.3), (5.2, 7.35), (7.9, 9.1)] {
            let s = span(a, b);
            let rms = (s.iter().map(|v| f64::from(*v).powi(2)).sum::<f64>() / s.len() as f64).sqrt();
            assert!(20.0 * rms.log10() > -30.0, "{fs} Hz: {a}..{b} s is too quiet");
        }
        for (a, b) in [(0.0, 0.099), (4.40, 5.19), (7.40, 7.89), (9.16, DEMO_PHRASE_SECONDS)] {
            assert!(span(a, b).iter().all(|&v| v == 0.0), "{fs} Hz: {a}..{b} s is not silent");
        }
        assert_eq!(x, demo_phrase(fs));
    }
}
