//! Takes recorded on a second clock ([`partita_room::align`]) against an outside reference: the recorder is
//! simulated by `scipy.signal.resample` (pinned in the venv, `tests/reference/skewed_playback.py`), which
//! stretches the played stream of N frames to M frames by the Fourier method, so the true skew is exactly
//! M / N - 1. Without `PARTITA_PYTHON` these tests skip loudly; with `CI` set they fail instead.

use std::f64::consts::PI;
use std::path::{Path, PathBuf};
use std::process::Command;

use partita_core::offline::{offline_plan, render};
use partita_core::synth::Noise;
use partita_core::{ImpulseResponse, Routing, Shape};
use partita_room::align::{aligned_takes, locate_takes, AlignError, TakeAlignment};
use partita_room::deconvolve::{raw_response, Method};
use partita_room::sweep::{SweepKind, SweepSpec};
use partita_testkit::spectrum;

const FS: u32 = 48_000;
/// Frames the recorder runs before the player starts.
const LEAD: usize = 3_001;
/// The known response's delay, frames.
const DELAY: usize = 120;

fn spec() -> SweepSpec {
    SweepSpec {
        start_hz: 20.0,
        end_hz: 20_000.0,
        duration_s: 2.0,
        silence_s: 1.0,
        ..SweepSpec::new(SweepKind::Exponential, FS)
    }
}

/// A known response: `DELAY` frames, a direct path of 0.5 and a 1 kHz two-pole resonance (r = 0.995).
fn known_response() -> Vec<f32> {
    let (r, w) = (0.995f64, 2.0 * PI * 1000.0 / f64::from(FS));
    let (a1, a2) = (-2.0 * r * w.cos(), r * r);
    let (mut y1, mut y2) = (0.0, 0.0);
    (0..4096)
        .map(|n| {
            let x = if n == DELAY { 1.0 } else { 0.0 };
            let y = 0.02 * x - a1 * y1 - a2 * y2;
            (y2, y1) = (y1, y);
            (y + 0.5 * x) as f32
        })
        .collect()
}

/// The played stream: `LEAD` frames of silence, `takes` takes back to back, half a second of silence.
fn played(takes: usize) -> (Vec<f32>, usize) {
    let take = spec().generate().unwrap();
    let mut x = vec![0.0f32; LEAD];
    for _ in 0..takes {
        x.extend_from_slice(&take);
    }
    x.extend(std::iter::repeat_n(0.0, FS as usize / 2));
    (x, take.len())
}

/// What a recorder whose clock runs `m / x.len()` times the player's captures of `x` (scipy's resample),
/// through the known response, with white noise 60 dB below the sweep's amplitude.
fn record(py: &Path, x: &[f32], m: usize, tag: &str) -> Vec<f32> {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("room-align");
    std::fs::create_dir_all(&dir).unwrap();
    let (inp, out) = (dir.join(format!("{tag}-in.f64")), dir.join(format!("{tag}-out.f64")));
    let bytes: Vec<u8> = x.iter().flat_map(|&v| f64::from(v).to_le_bytes()).collect();
    std::fs::write(&inp, bytes).unwrap();
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../tests/reference/skewed_playback.py");
    let run = Command::new(py).arg(script).arg(&inp).arg(m.to_string()).arg(&out).output().unwrap();
    assert!(run.status.success(), "{}", String::from_utf8_lossy(&run.stderr));
    eprintln!("{}", String::from_utf8_lossy(&run.stdout).trim());
    let y: Vec<f32> = std::fs::read(&out)
        .unwrap()
        .chunks_exact(8)
        .map(|c| f64::from_le_bytes(c.try_into().unwrap()) as f32)
        .collect();
    let h = known_response();
    let ir = ImpulseResponse::new(vec![h], FS).unwrap();
    let plan = offline_plan(ir.frames(), Shape::MONO).unwrap();
    let mut rec = render(&plan, &ir, Routing::Mono, &[&y], 1, None).unwrap().remove(0);
    rec.truncate(y.len());
    let mut noise = Noise::new(91);
    let level = 1e-3 * spec().amplitude() as f32;
    for v in &mut rec {
        *v += level * noise.sample();
    }
    rec
}

/// M for a skew of about `ppm` on `n` frames.
fn frames_for(n: usize, ppm: f64) -> usize {
    (n as f64 * (1.0 + ppm * 1e-6)).round() as usize
}

#[test]
fn the_skew_of_a_second_clock_is_measured_within_half_a_ppm() {
    // Reference: scipy.signal.resample (exact skew M / N - 1). Bound 0.5 ppm: 1/20 of the 10 ppm warning
    // threshold; each peak is placed to about 0.01 frame (a Blackman-windowed sinc interpolation of a
    // response band-limited below 0.9 of Nyquist), i.e. 0.1 ppm over one take of 144 000 frames.
    let Some(py) = partita_testkit::reference_python("scipy.signal.resample as a second clock") else { return };
    for (ppm, takes) in [(100.0, 3), (-37.0, 4), (8.0, 2), (0.0, 3)] {
        let (x, take_frames) = played(takes);
        let m = frames_for(x.len(), ppm);
        let truth = (m as f64 / x.len() as f64 - 1.0) * 1e6;
        let rec = record(&py, &x, m, &format!("skew{ppm}"));
        let a = locate_takes(&rec, &spec(), take_frames, takes, 1).unwrap();
        let got = a.skew_ppm.unwrap();
        eprintln!(
            "skew {truth:+.4} ppm, {takes} takes: measured {got:+.4} ppm (error {:+.4}), residual {:.4} frames, \
             arrivals {:?}",
            got - truth,
            a.residual_frames,
            a.arrivals
        );
        assert!((got - truth).abs() < 0.5, "{got} against {truth}");
        assert!(a.residual_frames < 0.1, "{}", a.residual_frames);
        // Every take found where the clocks put it: (LEAD + k take) M / N + the response's delay, within
        // skew x T (the sweep's duration) + 1 frame: the stretched sweep smears the recovered response over
        // skew x T (module docs of `align`), the same in every take, which moves its peak (9.2 frames at
        // 100 ppm, where skew x T is 9.6).
        let scale = m as f64 / x.len() as f64;
        let smear = truth.abs() * 1e-6 * spec().sweep_duration_s() * f64::from(FS) + 1.0;
        for (k, &arrival) in a.arrivals.iter().enumerate() {
            let want = (LEAD + k * take_frames) as f64 * scale + DELAY as f64;
            assert!((arrival - want).abs() < smear, "take {k}: {arrival} against {want} (bound {smear:.1})");
        }
    }
}

/// The largest in-band (2 f1 to f2 / 2) difference in dB between the responses recovered from `a` and `b`.
fn in_band_difference_db(a: &[f32], b: &[f32]) -> f64 {
    let s = spec();
    let zero = s.sweep_frames() - 1;
    let n = 1 << 16;
    let ra = raw_response(a, &s, Method::InverseFilter, 1).unwrap();
    let rb = raw_response(b, &s, Method::InverseFilter, 1).unwrap();
    let from = zero - 2048;
    let (sa, sb) = (spectrum(&ra[from..from + 16_384], n), spectrum(&rb[from..from + 16_384], n));
    let mut worst = 0.0f64;
    for k in 0..=n / 2 {
        let f = k as f64 * f64::from(FS) / n as f64;
        if f < 2.0 * s.start_hz || f > 0.5 * s.end_hz {
            continue;
        }
        worst = worst.max((20.0 * (sa[k].norm() / sb[k].norm()).log10()).abs());
    }
    worst
}

#[test]
fn aligned_takes_average_without_losing_high_frequencies() {
    // At 100 ppm four takes drift 14.4 frames apart each. Cut at their arrivals with the fractional shift,
    // their average recovers the same response as the first take alone within 0.05 dB in band (what is
    // left is the noise, 60 dB down, averaged); cut at the nominal spacing, the average is off by more than
    // 3 dB (a comb), which is what the alignment is for.
    let Some(py) = partita_testkit::reference_python("scipy.signal.resample as a second clock") else { return };
    let takes = 4;
    let (x, take_frames) = played(takes);
    let rec = record(&py, &x, frames_for(x.len(), 100.0), "average");
    let a = locate_takes(&rec, &spec(), take_frames, takes, 1).unwrap();
    let cut = aligned_takes(&rec, &a, LEAD);
    let mean = |takes: &[Vec<f32>]| -> Vec<f32> {
        (0..take_frames).map(|i| takes.iter().map(|t| t[i]).sum::<f32>() / takes.len() as f32).collect()
    };
    let aligned = mean(&cut);
    let nominal: Vec<Vec<f32>> = (0..takes)
        .map(|k| {
            let s = LEAD + k * take_frames;
            rec[s..s + take_frames].to_vec()
        })
        .collect();
    let nominal = mean(&nominal);
    let (good, bad) = (in_band_difference_db(&aligned, &cut[0]), in_band_difference_db(&nominal, &cut[0]));
    eprintln!("in-band difference from take 1 alone: aligned average {good:.4} dB, nominal spacing {bad:.2} dB");
    assert!(good < 0.05, "{good}");
    assert!(bad > 3.0, "{bad}");
}

#[test]
fn a_dropped_block_shows_in_the_residual_and_every_take_is_still_found() {
    // One clock, but 512 frames lost in the silence after take 2's sweep (an overrun on a split device):
    // the line through the arrivals misses by about a third of that, and each take is still cut at its own
    // arrival, so the recovered responses peak at the same frame.
    let Some(py) = partita_testkit::reference_python("scipy.signal.resample as a second clock") else { return };
    let takes = 3;
    let (x, take_frames) = played(takes);
    let mut rec = record(&py, &x, x.len(), "dropped");
    let at = LEAD + take_frames + spec().sweep_frames() + 20_000;
    rec.drain(at..at + 512);
    let a = locate_takes(&rec, &spec(), take_frames, takes, 1).unwrap();
    eprintln!("arrivals {:?}, residual {:.1} frames, skew {:?} ppm", a.arrivals, a.residual_frames, a.skew_ppm);
    assert!(a.residual_frames > 100.0, "{}", a.residual_frames);
    let s = spec();
    let zero = s.sweep_frames() - 1;
    let peaks: Vec<usize> = aligned_takes(&rec, &a, LEAD)
        .iter()
        .map(|t| {
            let r = raw_response(t, &s, Method::InverseFilter, 1).unwrap();
            zero + r[zero..]
                .iter()
                .enumerate()
                .fold((0, 0.0f32), |m, (i, v)| if v.abs() > m.1 { (i, v.abs()) } else { m })
                .0
        })
        .collect();
    assert!(peaks.iter().all(|&p| p == peaks[0]), "{peaks:?}");
}

#[test]
fn silence_and_a_short_recording_are_refused_with_reasons() {
    let (x, take_frames) = played(2);
    let silent = vec![0.0f32; x.len()];
    assert_eq!(locate_takes(&silent, &spec(), take_frames, 2, 1), Err(AlignError::Silent));
    // The second take is missing: the recording stops right after the first.
    let cut: Vec<f32> = x[..LEAD + take_frames].to_vec();
    let got = locate_takes(&cut, &spec(), take_frames, 2, 1);
    assert_eq!(got, Err(AlignError::TakeMissing { take: 1 }));
    assert_eq!(got.unwrap_err().to_string(), "the recording ends before take 2 of the sweep arrived");
    // One take: no skew.
    let one: TakeAlignment = locate_takes(&x, &spec(), take_frames, 1, 1).unwrap();
    assert_eq!(one.skew_ppm, None);
    assert!((one.arrivals[0] - LEAD as f64).abs() < 0.05, "{:?}", one.arrivals);
}
