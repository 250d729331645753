//! Sweep, deconvolution and the noise-aware analysis against outside references. Each check names its source.
//!
//! The Python references (scipy's chirp, pyrato on pyfar) come from `PARTITA_PYTHON` (set by `scripts/check`,
//! a venv at `target/py` with the pinned versions of docs/REFERENCES.md). Without it those tests skip loudly;
//! with `CI` set, they fail instead.

use std::f64::consts::{LN_10, PI};
use std::path::{Path, PathBuf};
use std::process::Command;

use partita_core::offline::{offline_plan, render};
use partita_core::synth::Noise;
use partita_core::{ImpulseResponse, Routing, Shape};
use partita_room::analysis::{
    analyze, fit_decay, AnalysisOptions, FilterPhase, Flag, OctaveBand, OctaveFilter, Parameter, OCTAVE_RATIO,
};
use partita_room::deconvolve::{deconvolve, raw_response, DeconvolveOptions, Method};
use partita_room::room::{render_room_ir, RoomSpec, DEMO_SEED};
use partita_room::sweep::{SweepKind, SweepSpec};
use partita_testkit::spectrum;

fn python(what: &str) -> Option<PathBuf> {
    partita_testkit::reference_python(what)
}

fn script(name: &str) -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("../../tests/reference").join(name)
}

fn scratch(name: &str) -> PathBuf {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join(format!("room-measure-{name}"));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

fn run(cmd: &mut Command) {
    let out = cmd.output().expect("run the reference interpreter");
    assert!(out.status.success(), "reference script failed: {}", String::from_utf8_lossy(&out.stderr));
    eprintln!("{}", String::from_utf8_lossy(&out.stdout).trim());
}

fn read_f64(path: &Path) -> Vec<f64> {
    std::fs::read(path).unwrap().chunks_exact(8).map(|c| f64::from_le_bytes(c.try_into().unwrap())).collect()
}

/// scipy.signal.chirp(t, f0, t1, f1, method='logarithmic', phi=-90) at `frames` samples.
fn scipy_chirp(py: &Path, fs: u32, f0: f64, f1: f64, t1: f64, frames: usize, tag: &str) -> Vec<f64> {
    let out = scratch("chirp").join(format!("{tag}.f64"));
    let args = [fs.to_string(), format!("{f0:e}"), format!("{f1:e}"), format!("{t1:.17e}"), frames.to_string()];
    run(Command::new(py).arg(script("sweep_chirp.py")).args(args).arg(&out));
    read_f64(&out)
}

fn max_abs_diff(a: &[f64], b: &[f64]) -> f64 {
    assert_eq!(a.len(), b.len());
    a.iter().zip(b).fold(0.0, |m, (x, y)| m.max((x - y).abs()))
}

// ---------------------------------------------------------------------------------------------------------
// Sweeps
// ---------------------------------------------------------------------------------------------------------

#[test]
fn farina_sweep_equals_scipy_chirp() {
    // Source: scipy.signal.chirp, method='logarithmic', phi=-90 (SciPy reference documentation): the unfaded
    // unit-amplitude sweep must equal it to 1e-6 (issue 16).
    let Some(py) = python("scipy.signal.chirp check of the exponential sweep") else { return };
    for (fs, f1, f2, t) in [(48_000, 20.0, 20_000.0, 3.0), (44_100, 50.0, 16_000.0, 1.7)] {
        let spec = SweepSpec { start_hz: f1, end_hz: f2, duration_s: t, ..SweepSpec::new(SweepKind::Exponential, fs) };
        let ours = spec.unit_sweep();
        let reference = scipy_chirp(&py, fs, f1, f2, t, ours.len(), &format!("farina-{fs}"));
        let err = max_abs_diff(&ours, &reference);
        eprintln!("Farina sweep {fs} Hz {f1}-{f2} Hz {t} s: max |ours - scipy| = {err:.2e}");
        assert!(err < 1e-6, "{err}");
    }
}

#[test]
fn synchronized_sweep_has_whole_f1_l_starts_at_zero_and_equals_chirp() {
    // Source: Novak, Lotton & Simon, J. AES 63(10), 2015: f1 L is a whole number, x(0) = 0, and the signal is
    // the logarithmic chirp of duration L ln(f2/f1) (scipy.signal.chirp, phi=-90), checked to 1e-6.
    let spec = SweepSpec {
        start_hz: 20.0,
        end_hz: 20_000.0,
        duration_s: 5.0,
        ..SweepSpec::new(SweepKind::Synchronized, 48_000)
    };
    let l = spec.rate_constant_s();
    let cycles = spec.start_hz * l;
    assert!((cycles - cycles.round()).abs() < 1e-9, "f1 L = {cycles}");
    assert!((spec.sweep_duration_s() - l * (spec.end_hz / spec.start_hz).ln()).abs() < 1e-12);
    let x = spec.unit_sweep();
    assert!(x[0].abs() < 1e-12, "x(0) = {}", x[0]);
    // The property the synchronization buys: sin(n phi(t)) = x(t + L ln n) (Novak et al. 2015, eq. for the
    // harmonic shift), here for n = 2 and 3 at sample times, with phi(t) = 2 pi f1 L e^(t/L).
    for n in [2.0f64, 3.0] {
        for t in [0.1, 0.77, 1.5] {
            let lhs = (n * 2.0 * PI * cycles * (t / l).exp()).sin();
            let rhs = (2.0 * PI * cycles * ((t + l * n.ln()) / l).exp_m1()).sin();
            assert!((lhs - rhs).abs() < 1e-6, "n {n} t {t}: {lhs} vs {rhs}");
        }
    }
    let Some(py) = python("scipy.signal.chirp check of the synchronized sweep") else { return };
    let reference = scipy_chirp(&py, 48_000, 20.0, 20_000.0, spec.sweep_duration_s(), x.len(), "synchronized");
    let err = max_abs_diff(&x, &reference);
    eprintln!("synchronized sweep (L = {l:.6} s, f1 L = {cycles}): max |ours - scipy| = {err:.2e}");
    assert!(err < 1e-6, "{err}");
}

#[test]
fn generated_sweep_has_its_level_fades_and_silence() {
    // Our own definitions (sweep module docs): peak = 10^(level/20), raised-cosine fades, silence appended.
    let spec = SweepSpec { duration_s: 1.0, silence_s: 0.25, ..SweepSpec::new(SweepKind::Exponential, 48_000) };
    let s = spec.generate().unwrap();
    assert_eq!(s.len(), 48_000 + 12_000);
    assert!(s[48_000..].iter().all(|&v| v == 0.0));
    let peak = s.iter().fold(0.0f32, |m, v| m.max(v.abs())) as f64;
    assert!(peak <= spec.amplitude() * (1.0 + 1e-7) && peak > 0.999 * spec.amplitude(), "{peak}");
    // The first 10 ms of the 100 ms fade-in stay below sin^2(pi/20) of the level.
    let early = s[..480].iter().fold(0.0f32, |m, v| m.max(v.abs())) as f64;
    assert!(early <= spec.amplitude() * (PI / 20.0).sin().powi(2) + 1e-9, "{early}");
}

// ---------------------------------------------------------------------------------------------------------
// Closed forms for an ideal exponential decay
// ---------------------------------------------------------------------------------------------------------

#[test]
fn ideal_exponential_decay_gives_the_closed_forms() {
    // Source: the ISO 3382-1:2009 annex A definitions integrated for h^2(t) = exp(-13.8155 t / T), 13.8155 =
    // 6 ln 10 (our arithmetic, issue 16): EDT = T20 = T30 = T; C_te = 10 lg(10^(6 te / T) - 1) (T = 1 s:
    // C50 = -0.0206 dB, C80 = 3.0534 dB); D50 = 1 - 10^(-0.3 / T); centre time T / (6 ln 10). Sampled at 48 kHz,
    // 1.6 T long (96 dB of decay, no noise).
    let fs = 48_000.0;
    for t60 in [0.5, 1.0, 2.0] {
        let k = 6.0 * LN_10 / t60;
        let h: Vec<f64> = (0..(1.6 * t60 * fs) as usize).map(|n| (-0.5 * k * n as f64 / fs).exp()).collect();
        let a = analyze(&h, fs, &AnalysisOptions { bands: vec![], ..AnalysisOptions::default() }).unwrap();
        let b = &a.broadband;
        let value = |p: Parameter| b.get(p).value.unwrap();
        for p in [Parameter::Edt, Parameter::T20, Parameter::T30] {
            let rel = value(p) / t60 - 1.0;
            eprintln!("T = {t60} s: {p} {:.6} s (relative error {rel:.1e})", value(p));
            assert!(rel.abs() < 1e-3, "{p}: {}", value(p));
            assert!(b.get(p).flags.is_empty(), "{:?}", b.get(p).flags);
        }
        for (p, te) in [(Parameter::C50, 0.05), (Parameter::C80, 0.08)] {
            let want = 10.0 * (10f64.powf(6.0 * te / t60) - 1.0).log10();
            eprintln!("T = {t60} s: {p} {:.5} dB, closed form {want:.5} dB", value(p));
            assert!((value(p) - want).abs() < 1e-3, "{p}: {} vs {want}", value(p));
        }
        let d50 = 1.0 - 10f64.powf(-0.3 / t60);
        assert!((value(Parameter::D50) - d50).abs() < 1e-5, "D50 {} vs {d50}", value(Parameter::D50));
        let ts = t60 / (6.0 * LN_10);
        eprintln!("T = {t60} s: Ts {:.7} s, closed form {ts:.7} s", value(Parameter::Ts));
        assert!((value(Parameter::Ts) - ts).abs() < 1.0 / fs, "Ts {} vs {ts}", value(Parameter::Ts));
    }
    // The quoted values at T = 1 s follow from the formula.
    assert!((10.0 * (10f64.powf(0.3) - 1.0).log10() + 0.0206).abs() < 5e-5);
    assert!((10.0 * (10f64.powf(0.48) - 1.0).log10() - 3.0534).abs() < 5e-5);
}

// ---------------------------------------------------------------------------------------------------------
// Lundeby against the truncation-plus-compensation model
// ---------------------------------------------------------------------------------------------------------

/// T30 of the model Schroeder curve of h^2 = A e^(-k t) + N truncated at t1 (where A e^(-k t1) = N) with the
/// decay's tail after t1 added back: E(t) = (A / k) e^(-k t) + N (t1 - t) for t < t1 (Lundeby et al.,
/// Acustica 81, 1995: truncation at the crossing point plus compensation; our arithmetic).
fn model_t30(t60: f64, decay_to_noise_db: f64, fs: f64) -> f64 {
    let k = 6.0 * LN_10 / t60;
    let noise = 10f64.powf(-decay_to_noise_db / 10.0);
    let t1 = (1.0 / noise).ln() / k;
    let edc: Vec<f64> = (0..(t1 * fs) as usize)
        .map(|n| {
            let t = n as f64 / fs;
            (-k * t).exp() / k + noise * (t1 - t)
        })
        .collect();
    let db: Vec<f64> = edc.iter().map(|e| 10.0 * (e / edc[0]).log10()).collect();
    fit_decay(&db, fs, -5.0, -35.0).unwrap().reverberation_time_s
}

#[test]
fn lundeby_t30_follows_the_truncation_and_compensation_model() {
    // Source: Lundeby, Vigran, Bietz & Vorlaender, Acustica 81, 1995 (truncation at the crossing point with
    // tail compensation). The model (model_t30) keeps the noise between t and t1 in the curve, so T30 comes
    // out longer than T; the measured T30 must be within +-0.5% of the model, not of T. Deterministic decay:
    // h = sqrt(A e^(-k t) + N), 1 s T60, 48 kHz, 3 s long.
    let fs = 48_000.0;
    let t60 = 1.0;
    let k = 6.0 * LN_10 / t60;
    for dnr in [45.0, 50.0, 60.0] {
        let noise = 10f64.powf(-dnr / 10.0);
        let h: Vec<f64> = (0..(3.0 * fs) as usize).map(|n| ((-k * n as f64 / fs).exp() + noise).sqrt()).collect();
        let a = analyze(&h, fs, &AnalysisOptions { bands: vec![], ..AnalysisOptions::default() }).unwrap();
        let got = a.broadband.get(Parameter::T30).value.unwrap();
        let want = model_t30(t60, dnr, fs);
        let floor = a.broadband.noise.unwrap();
        eprintln!(
            "decay-to-noise {dnr} dB: T30 {got:.4} s, model {want:.4} s ({:+.2}% of T; measured {:+.2}% of the \
             model); noise {:.2} dB, crossing {:.3} s (true {:.3} s), dynamic range {:.1} dB",
            100.0 * (want / t60 - 1.0),
            100.0 * (got / want - 1.0),
            floor.level_db,
            floor.crossing_frames as f64 / fs,
            dnr / 10.0 * LN_10 / k,
            a.broadband.dynamic_range_db
        );
        assert!((got / want - 1.0).abs() < 0.005, "{dnr} dB: T30 {got} vs model {want}");
    }
    // The same with noise: exponentially decaying white noise plus a stationary white floor 50 dB down, the
    // mean of eight takes within 1% of the model (one take scatters by about 1%, see room_acoustics.rs).
    let want = model_t30(t60, 50.0, fs);
    let mut sum = 0.0;
    for seed in 1..=8 {
        let (mut a, mut b) = (Noise::new(seed), Noise::new(100 + seed));
        let g = 10f64.powf(-50.0 / 20.0);
        let h: Vec<f64> = (0..(3.0 * fs) as usize)
            .map(|n| {
                let env = (-0.5 * k * n as f64 / fs).exp();
                (a.sample() as f64 * env + b.sample() as f64 * g) * 3f64.sqrt()
            })
            .collect();
        let r = analyze(&h, fs, &AnalysisOptions { bands: vec![], ..AnalysisOptions::default() }).unwrap();
        sum += r.broadband.get(Parameter::T30).value.unwrap();
    }
    eprintln!("noisy takes, 50 dB: mean T30 {:.4} s, model {want:.4} s", sum / 8.0);
    assert!((sum / 8.0 / want - 1.0).abs() < 0.01);
}

#[test]
fn values_are_flagged_when_the_range_or_the_filter_is_not_enough() {
    // Our flag rules (analysis::report): a parameter needs its range's depth plus 10 dB (ISO 3382-1's headroom,
    // from memory): with 40 dB of decay above the noise T30 (45 dB) is flagged, T20 (35 dB) is not. A 63 Hz band
    // (bandwidth 44.5 Hz) with T = 0.1 s: the causal filter's ringing lengthens T20 (to about 0.15 s, B x T
    // about 6.6 < 16: flagged); time-reversed filtering measures about 0.1 s, B x T about 4.5 >= 4: not flagged.
    let fs = 48_000.0;
    let k = 6.0 * LN_10 / 1.0;
    let noise = 10f64.powf(-4.0);
    let h: Vec<f64> = (0..(3.0 * fs) as usize).map(|n| ((-k * n as f64 / fs).exp() + noise).sqrt()).collect();
    let a = analyze(&h, fs, &AnalysisOptions { bands: vec![], ..AnalysisOptions::default() }).unwrap();
    let b = &a.broadband;
    assert!(matches!(b.get(Parameter::T30).flags[..], [Flag::DynamicRange { needed_db, .. }] if needed_db == 45.0));
    assert!(b.get(Parameter::T20).flags.is_empty(), "{:?}", b.get(Parameter::T20).flags);

    let mut noise = Noise::new(3);
    let k = 6.0 * LN_10 / 0.1;
    let h: Vec<f64> =
        (0..(0.5 * fs) as usize).map(|n| noise.sample() as f64 * (-0.5 * k * n as f64 / fs).exp()).collect();
    let band = OctaveBand::new(-4);
    for (phase, flagged) in [(FilterPhase::Causal, true), (FilterPhase::TimeReversed, false)] {
        let a = analyze(&h, fs, &AnalysisOptions { phase, bands: vec![band] }).unwrap();
        let t20 = a.bands[0].get(Parameter::T20);
        let ringing = t20.flags.iter().any(|f| matches!(f, Flag::FilterRinging { .. }));
        eprintln!("63 Hz, T 0.1 s, {phase:?}: T20 {:?} flags {:?}", t20.value, t20.flags);
        assert_eq!(ringing, flagged, "{phase:?}");
    }
}

// ---------------------------------------------------------------------------------------------------------
// Octave filters against the IEC 61260-1 class 1 mask
// ---------------------------------------------------------------------------------------------------------

#[test]
fn octave_filters_meet_the_iec_61260_class_1_mask() {
    // Source: IEC 61260-1:2014, table 1, class 1 acceptance limits on the relative attenuation of an octave
    // filter (from memory; check against the standard before relying on them): at normalized frequency
    // G^x, x = 0: -0.4..+0.4 dB; 1/8: -0.4..+0.6; 1/4: -0.4..+0.8; 3/8: -0.4..+1.6; 1/2: +1.2..+5.3; 1: >= 16.6;
    // 2: >= 40.5; 3: >= 60; 4: >= 70; the same on both sides. Frequencies at or above fs / 2 are not checked.
    let mask: [(f64, f64, f64); 9] = [
        (0.0, -0.4, 0.4),
        (0.125, -0.4, 0.6),
        (0.25, -0.4, 0.8),
        (0.375, -0.4, 1.6),
        (0.5, 1.2, 5.3),
        (1.0, 16.6, f64::INFINITY),
        (2.0, 40.5, f64::INFINITY),
        (3.0, 60.0, f64::INFINITY),
        (4.0, 70.0, f64::INFINITY),
    ];
    // One known miss: at 44.1 kHz the bilinear transform flattens the 8 kHz band's lower skirt, and the
    // single-pass (causal and time-reversed) filter attenuates 59.93 dB at G^-3 (1 kHz) instead of 60. Listed
    // here so the test fails if it grows beyond 0.1 dB, or if it disappears and the list goes stale.
    let known_misses = [(44_100.0, 3, FilterPhase::Causal, -3.0), (44_100.0, 3, FilterPhase::TimeReversed, -3.0)];
    let mut misses = Vec::new();
    let mut worst = f64::INFINITY;
    for fs in [44_100.0, 48_000.0, 96_000.0] {
        for band in (-4..=3).map(OctaveBand::new) {
            for phase in [FilterPhase::Causal, FilterPhase::ZeroPhase, FilterPhase::TimeReversed] {
                let f = OctaveFilter::new(band, fs, phase).unwrap();
                for &(x, lo, hi) in &mask {
                    for side in [1.0, -1.0] {
                        let hz = band.centre_hz() * OCTAVE_RATIO.powf(side * x);
                        if hz >= 0.5 * fs {
                            continue;
                        }
                        let attenuation = -f.gain_db(hz);
                        let margin = (attenuation - lo).min(hi - attenuation);
                        if margin < 0.0 {
                            eprintln!(
                                "{fs} Hz, {band} {phase:?}: {attenuation:.2} dB at G^{} outside {lo}..{hi}",
                                side * x
                            );
                            assert!(margin > -0.1, "{fs} Hz {band} {phase:?} G^{}: {attenuation} dB", side * x);
                            misses.push((fs, band.index(), phase, side * x));
                        } else {
                            worst = worst.min(margin);
                        }
                    }
                }
            }
        }
    }
    assert_eq!(misses, known_misses);
    eprintln!("IEC 61260-1 class 1: smallest margin to the mask elsewhere {worst:.2} dB");
}

// ---------------------------------------------------------------------------------------------------------
// pyrato
// ---------------------------------------------------------------------------------------------------------

#[test]
fn per_band_parameters_agree_with_pyrato() {
    // Source: pyrato 1.1.0 on pyfar 0.8.1 (pinned in target/py): energy_decay_curve_lundeby with
    // channel_independent=True, then reverberation_time_linear_regression (T20, T30), clarity (C50, C80),
    // definition (D50), center_time. pyrato gets our own band-filtered signals from our band onset on, with its
    // own time shift off, so the filter design and the onset convention stay out of the comparison (ours starts
    // a band at or after the broadband onset; pyrato's own search would start in the ringing a time-reversed
    // filter spreads before the direct sound, which moved C50 by up to 1.2 dB); EDT is not compared (pyrato's EDT range is -0.1 to -10.1 dB, ours ISO's 0 to -10).
    // Signal: the first synthetic room preset's left channel, 1 s longer, plus a white floor 80 dB below its
    // peak (about 60 dB of decay above the noise in every band).
    let Some(py) = python("pyrato cross-check of the band decay parameters") else { return };
    let spec = RoomSpec::presets().remove(0);
    let fs = f64::from(spec.sample_rate_hz);
    let mut ir: Vec<f64> = render_room_ir(&spec, DEMO_SEED).remove(0).iter().map(|&v| v as f64).collect();
    let peak = ir.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let mut noise = Noise::new(77);
    let extra = fs as usize;
    ir.resize(ir.len() + extra, 0.0);
    for v in &mut ir {
        *v += noise.sample() as f64 * 3f64.sqrt() * peak * 1e-4;
    }
    let options = AnalysisOptions { phase: FilterPhase::TimeReversed, bands: OctaveBand::ROOM.to_vec() };
    let ours = analyze(&ir, fs, &options).unwrap();
    let dir = scratch("pyrato");
    let mut paths = Vec::new();
    for b in &ours.bands {
        let band = b.band.unwrap();
        let y = OctaveFilter::new(band, fs, options.phase).unwrap().process(&ir);
        let path = dir.join(format!("band{}.f64", band.index()));
        std::fs::write(&path, y[b.onset_frames..].iter().flat_map(|v| v.to_le_bytes()).collect::<Vec<u8>>()).unwrap();
        paths.push(path);
    }
    let out = dir.join("pyrato.json");
    run(Command::new(&py).arg(script("room_pyrato.py")).arg(fs.to_string()).arg(&out).args(&paths));
    let reference: Vec<serde_json::Value> = serde_json::from_str(&std::fs::read_to_string(&out).unwrap()).unwrap();
    let mut worst = [0.0f64; 6];
    for (b, r) in ours.bands.iter().zip(&reference) {
        let row: Vec<(Parameter, f64, f64)> =
            [Parameter::T20, Parameter::T30, Parameter::C50, Parameter::C80, Parameter::D50, Parameter::Ts]
                .iter()
                .map(|&p| (p, b.get(p).value.unwrap(), r[p.name()].as_f64().unwrap()))
                .collect();
        eprintln!(
            "{} (range {:.1} dB, crossing {:?}, flags T30 {:?}, intended {:?}): {}",
            b.band.unwrap(),
            b.dynamic_range_db,
            b.noise.map(|n| n.crossing_frames as f64 / fs),
            b.get(Parameter::T30).flags,
            spec.intended_rt60_s(b.band.unwrap()),
            row.iter().map(|(p, o, r)| format!("{p} {o:.4}/{r:.4}")).collect::<Vec<_>>().join("  ")
        );
        for (i, (p, o, r)) in row.iter().enumerate() {
            let err = match p {
                Parameter::T20 | Parameter::T30 | Parameter::Ts => o / r - 1.0,
                _ => o - r,
            };
            worst[i] = worst[i].max(err.abs());
        }
    }
    eprintln!(
        "worst vs pyrato: T20 {:.3}%, T30 {:.3}%, C50 {:.4} dB, C80 {:.4} dB, D50 {:.5}, Ts {:.3}%",
        100.0 * worst[0],
        100.0 * worst[1],
        worst[2],
        worst[3],
        worst[4],
        100.0 * worst[5]
    );
    // Bounds: T20, T30 and Ts within 0.1%, C50 and C80 within 0.005 dB, D50 within 1e-4 (measured: T20 0.00%,
    // T30 0.02%, Ts 0.02%, C50, C80 below 0.0005 dB, D50 below 5e-5). The two Lundeby implementations choose
    // their intervals within the paper's spans differently; with 60 dB of range that moves T30 by hundredths of
    // a percent. (With the floor 40 dB down, where our T30 carries a dynamic-range flag, they differed by up to
    // 3.3%.) Every value here must be unflagged.
    for b in &ours.bands {
        for p in Parameter::ALL {
            assert!(b.get(p).flags.is_empty(), "{:?} {p}: {:?}", b.band, b.get(p).flags);
        }
    }
    assert!(worst[0] < 0.001 && worst[1] < 0.001 && worst[5] < 0.001, "{worst:?}");
    assert!(worst[2] < 0.005 && worst[3] < 0.005 && worst[4] < 1e-4, "{worst:?}");
}

// ---------------------------------------------------------------------------------------------------------
// Deconvolution
// ---------------------------------------------------------------------------------------------------------

/// `x` convolved with `h` by the engine's offline render (the full convolution).
fn convolve(x: &[f32], h: &[f32], fs: u32) -> Vec<f32> {
    let ir = ImpulseResponse::new(vec![h.to_vec()], fs).unwrap();
    let plan = offline_plan(ir.frames(), Shape::MONO).unwrap();
    render(&plan, &ir, Routing::Mono, &[x], 1, None).unwrap().remove(0)
}

/// A known response with a smooth spectrum and no notches: 120 frames of delay, then a resonance at 1 kHz
/// (two-pole, r = 0.995) mixed with a direct path; 8192 frames.
fn known_response() -> Vec<f32> {
    let (r, w) = (0.995f64, 2.0 * PI * 1000.0 / 48_000.0);
    let (a1, a2) = (-2.0 * r * w.cos(), r * r);
    let mut h = vec![0.0f64; 8192];
    let (mut y1, mut y2) = (0.0, 0.0);
    for (n, slot) in h.iter_mut().enumerate().skip(120) {
        let x = if n == 120 { 1.0 } else { 0.0 };
        let y = 0.02 * x - a1 * y1 - a2 * y2;
        (y2, y1) = (y1, y);
        *slot = y + 0.5 * x;
    }
    h.iter().map(|&v| v as f32).collect()
}

#[test]
fn a_known_response_is_recovered_within_the_stated_bound() {
    // Source of the method: Farina, AES 108th Convention, 2000 (inverse filter), and our regularized division.
    // Bound: over 2 f1 .. f2 / 2 the recovered spectrum is within 0.15 dB and 0.5 degrees of the known one for
    // the inverse filter (the stationary-phase amplitude it is scaled by holds only away from the band edges,
    // where the finite sweep's ripple and the fade-in act: 0.089 dB and 0.15 degrees measured, the worst just
    // above 2 f1 = 40 Hz), and within 0.01 dB and 0.1 degrees for the division
    // (set by the in-band regularization, 1e-6 of the peak against a sweep spectrum falling 30 dB over the
    // band: 1e-3 relative, 0.009 dB, at most; measured 0.0076 dB, 0.054 degrees).
    let fs = 48_000u32;
    let spec = SweepSpec {
        start_hz: 20.0,
        end_hz: 20_000.0,
        duration_s: 3.0,
        silence_s: 1.0,
        ..SweepSpec::new(SweepKind::Synchronized, fs)
    };
    let sweep = spec.generate().unwrap();
    let h = known_response();
    let mut rec = convolve(&sweep, &h, fs);
    rec.truncate(sweep.len());
    // The recovered response is band-limited: its low band edge rings for a while before and after time
    // zero, so it is compared over a window reaching 0.5 s either side, against the known response moved
    // by as much.
    let zero = spec.sweep_frames() - 1;
    let pad = 24_000;
    let n = 1 << 17;
    let mut padded = vec![0.0f32; pad];
    padded.extend_from_slice(&h);
    let want = spectrum(&padded, n);
    for (method, db_bound, deg_bound) in [(Method::InverseFilter, 0.15, 0.5), (Method::Division, 0.01, 0.1)] {
        let raw = raw_response(&rec, &spec, method, 1).unwrap();
        let got = spectrum(&raw[zero - pad..zero + h.len() + pad], n);
        let (mut worst_db, mut worst_deg) = (0.0f64, 0.0f64);
        for k in 0..=n / 2 {
            let f = k as f64 * fs as f64 / n as f64;
            if f < 2.0 * spec.start_hz || f > 0.5 * spec.end_hz {
                continue;
            }
            let ratio = got[k] / want[k];
            worst_db = worst_db.max((20.0 * ratio.norm().log10()).abs());
            worst_deg = worst_deg.max(ratio.arg().to_degrees().abs());
        }
        eprintln!("{method:?}: in-band error at most {worst_db:.4} dB, {worst_deg:.3} degrees");
        assert!(worst_db < db_bound && worst_deg < deg_bound, "{method:?}: {worst_db} dB {worst_deg} deg");
    }

    // The written response: 1 ms (48 frames) of margin before the onset; the onset (first sample within 20 dB
    // of the peak, ISO 3382-1) at most 3 frames before the known 120-frame delay, since the recovered impulse
    // is band-limited to f2 and its neighbours near the main lobe lie within 20 dB (a sinc's first sidelobe is
    // -13 dB); the peak exactly at the known delay.
    let d = deconvolve(&[rec], &spec, &DeconvolveOptions::default()).unwrap();
    assert_eq!(d.onset_frames, 48);
    assert!((117..=120).contains(&d.delay_frames), "{}", d.delay_frames);
    let peak_at =
        d.channels[0].iter().enumerate().fold((0, 0.0f32), |m, (i, v)| if v.abs() > m.1 { (i, v.abs()) } else { m }).0;
    assert_eq!(peak_at, d.onset_frames + 120 - d.delay_frames);
    eprintln!("peak-to-noise of the recovered response: {:.1} dB", d.peak_to_noise_db[0]);
}

/// The magnitude of the analytic signal of `x` (its Hilbert envelope): FFT, negative frequencies removed,
/// positive ones doubled, inverse FFT (textbook; Oppenheim & Schafer). An even harmonic's response is the
/// quadrature (Hilbert) version of a band-limited impulse, whose largest sample lies a few frames off its
/// centre while its envelope peaks on it.
fn envelope(x: &[f32]) -> Vec<f64> {
    use rustfft::num_complex::Complex64;
    let n = x.len();
    let mut planner = rustfft::FftPlanner::<f64>::new();
    let mut buf: Vec<Complex64> = x.iter().map(|&v| Complex64::new(v as f64, 0.0)).collect();
    planner.plan_fft_forward(n).process(&mut buf);
    for (k, c) in buf.iter_mut().enumerate() {
        if k > 0 && 2 * k < n {
            *c *= 2.0;
        } else if 2 * k > n {
            *c = Complex64::new(0.0, 0.0);
        }
    }
    planner.plan_fft_inverse(n).process(&mut buf);
    buf.iter().map(|c| c.norm() / n as f64).collect()
}

fn argmax(v: &[f64]) -> (usize, f64) {
    v.iter().enumerate().fold((0, 0.0), |m, (i, &x)| if x > m.1 { (i, x) } else { m })
}

#[test]
fn harmonics_of_a_polynomial_land_l_ln_n_before_the_linear_response() {
    // Source: Farina 2000 (the n-th harmonic's response lies L ln(n) before the linear one; L = T / ln(f2/f1)),
    // Novak et al. 2015 (and with its phase intact for the synchronized sweep). y = x + 0.5 x^2 + 0.5 x^3 on a
    // 50 Hz .. 6 kHz sweep (3 f2 below fs / 2: no aliasing); the largest sample of each harmonic's window lies
    // within +-1 frame of time zero minus L ln(n) fs, found as the peak of
    // the Hilbert envelope (an even harmonic is a quadrature impulse).
    let fs = 48_000u32;
    for kind in [SweepKind::Synchronized, SweepKind::Exponential] {
        let spec = SweepSpec {
            start_hz: 50.0,
            end_hz: 6000.0,
            duration_s: 2.0,
            silence_s: 0.3,
            level_dbfs: -3.0,
            ..SweepSpec::new(kind, fs)
        };
        let rec: Vec<f32> = spec.generate().unwrap().iter().map(|&x| x + 0.5 * x * x + 0.5 * x * x * x).collect();
        let raw = raw_response(&rec, &spec, Method::InverseFilter, 1).unwrap();
        let zero = (spec.sweep_frames() - 1) as f64;
        let l = spec.rate_constant_s() * fs as f64;
        for order in 2..=3 {
            let at = zero - l * (order as f64).ln();
            let half = (0.25 * l * (order as f64 / (order as f64 - 1.0)).ln()) as usize;
            let c = at.round() as usize;
            let (i, v) = argmax(&envelope(&raw[c - half..c + half]));
            let found = (c - half + i) as f64;
            eprintln!("{kind:?} harmonic {order}: peak {v:.4} at {found}, L ln(n) predicts {at:.2}");
            assert!((found - at).abs() <= 1.0, "{kind:?} order {order}: {found} vs {at}");
        }
        let d =
            deconvolve(&[rec], &spec, &DeconvolveOptions { max_harmonic: 3, ..DeconvolveOptions::default() }).unwrap();
        assert_eq!(d.harmonics.len(), 2);
        let (linear_peak, _) = argmax(&envelope(&d.channels[0][..d.channels[0].len().min(4096)]));
        for hm in &d.harmonics {
            let (i, _) = argmax(&envelope(&hm.channels[0]));
            // Cut like the linear response: its envelope peaks where the linear one does, within the rounding
            // of L ln(n) and the +-1 frame above.
            assert!((i as f64 - linear_peak as f64).abs() <= 2.0, "order {}: {i} vs {linear_peak}", hm.order);
        }
    }
}

#[test]
fn a_measured_synthetic_room_analyses_like_the_room_itself() {
    // End to end without devices: the tiled-stairwell preset's left channel applied to a 4 s synchronized sweep
    // by the engine's offline render, white noise 80 dB below the sweep's peak added, deconvolved, analysed;
    // against the analysis of the preset itself (the same code on the known response, so this checks the
    // measurement chain, not the analysis). Bounds, per octave band 63 Hz to 8 kHz: EDT, T20, T30 within 1%,
    // C50 and C80 within 0.1 dB (the recovered response is band-limited to 20 Hz..20 kHz, starts 1 ms before
    // its onset and carries the added noise, which Lundeby's compensation handles); measured values printed.
    let fs = 48_000u32;
    let spec = SweepSpec { duration_s: 4.0, silence_s: 2.0, ..SweepSpec::new(SweepKind::Synchronized, fs) };
    let sweep = spec.generate().unwrap();
    let room = RoomSpec::tiled_stairwell();
    let h = render_room_ir(&room, DEMO_SEED).remove(0);
    let mut noise = Noise::new(21);
    let floor = spec.amplitude() as f32 * 1e-4 * 3f32.sqrt();
    let mut rec = convolve(&sweep, &h, fs);
    rec.truncate(sweep.len());
    rec.iter_mut().for_each(|v| *v += floor * noise.sample());
    let d = deconvolve(&[rec], &spec, &DeconvolveOptions::default()).unwrap();
    let options = AnalysisOptions::default();
    let got = analyze(&d.channels[0], fs as f64, &options).unwrap();
    let want = analyze(&h, fs as f64, &options).unwrap();
    let mut worst = [0.0f64; 2];
    for (g, w) in got.bands.iter().zip(&want.bands) {
        let mut row = String::new();
        for p in [Parameter::Edt, Parameter::T20, Parameter::T30, Parameter::C50, Parameter::C80] {
            let (a, b) = (g.get(p).value.unwrap(), w.get(p).value.unwrap());
            let (err, i) = if p.unit() == "s" { (a / b - 1.0, 0) } else { (a - b, 1) };
            worst[i] = worst[i].max(err.abs());
            row += &format!("  {p} {a:.3}/{b:.3}");
        }
        eprintln!("{} (range {:.0} dB):{row}", g.band.unwrap(), g.dynamic_range_db);
    }
    eprintln!("measured room vs known room: times within {:.2}%, clarity within {:.3} dB", 100.0 * worst[0], worst[1]);
    eprintln!("peak-to-noise {:.1} dB, delay {} frames", d.peak_to_noise_db[0], d.delay_frames);
    assert!(worst[0] < 0.01 && worst[1] < 0.1, "{worst:?}");
}

#[test]
fn a_loud_harmonic_after_time_zero_does_not_move_the_onset() {
    // ISO 3382-1's onset (the first sample within 20 dB of the peak) searched only after the 2nd harmonic's
    // window (issue 16): with a loop delay longer than L ln 2 the 2nd harmonic's response lands after time zero
    // but before the linear one, 9 dB below the peak (y = x + x^2 at 0.7 peak: a quadrature impulse of
    // 0.7 / 2). A search from time zero would start there; ours must find the linear response's onset, within
    // the 3 frames a band-limited impulse's main lobe reaches before its peak.
    let fs = 48_000u32;
    let spec = SweepSpec {
        duration_s: 3.0,
        silence_s: 0.6,
        level_dbfs: 20.0 * 0.7f64.log10(),
        ..SweepSpec::new(SweepKind::Synchronized, fs)
    };
    let delay = (0.4 * fs as f64) as usize;
    let l_ln2 = spec.rate_constant_s() * 2f64.ln() * fs as f64;
    assert!(delay as f64 > l_ln2, "the test needs the harmonic after time zero");
    let sweep = spec.generate().unwrap();
    let mut rec = vec![0.0f32; delay];
    rec.extend(sweep.iter().map(|&x| x + x * x));
    rec.truncate(sweep.len());
    let raw = raw_response(&rec, &spec, Method::InverseFilter, 1).unwrap();
    let zero = spec.sweep_frames() - 1;
    let harmonic = envelope(&raw[zero..zero + delay - 2000]);
    let linear_peak = raw[zero..].iter().fold(0.0f32, |m, v| m.max(v.abs())) as f64;
    let (at, h2) = argmax(&harmonic);
    eprintln!("2nd harmonic {:.1} dB re. the peak at {at} frames after time zero", 20.0 * (h2 / linear_peak).log10());
    assert!(h2 > 0.1 * linear_peak, "the harmonic must lie within 20 dB of the peak for this test");
    let d = deconvolve(&[rec], &spec, &DeconvolveOptions::default()).unwrap();
    assert!((delay - 3..=delay).contains(&d.delay_frames), "onset {} frames after time zero", d.delay_frames);
}
