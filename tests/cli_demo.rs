//! The committed demo data and `partita demo`: size budget, readability, reproducibility from the generator,
//! the demo's mix and -1 dBFS peak, its report, and `plan --ir` on a demo IR.

use std::path::{Path, PathBuf};
use std::process::{Command, Output};

use partita_io::{read_wav, read_wav_info, Audio};

const FILES: [&str; 3] = ["dry-phrase.wav", "tiled-stairwell.wav", "timber-barn.wav"];

fn demo_data() -> PathBuf {
    Path::new(env!("CARGO_MANIFEST_DIR")).join("demo-data")
}

/// A fresh, empty scratch folder for one test.
fn scratch(name: &str) -> PathBuf {
    partita_testkit::scratch_dir(env!("CARGO_TARGET_TMPDIR"), "cli-demo", name)
}

fn partita(args: &[&str]) -> Output {
    let out = Command::new(env!("CARGO_BIN_EXE_partita")).args(args).output().expect("run partita");
    assert!(
        out.status.success(),
        "partita {args:?} failed: {}{}",
        String::from_utf8_lossy(&out.stdout),
        String::from_utf8_lossy(&out.stderr)
    );
    out
}

fn s(p: &Path) -> &str {
    p.to_str().unwrap()
}

fn peak(a: &Audio) -> f64 {
    f64::from(a.peak())
}

#[test]
fn committed_demo_files_are_small_readable_and_as_described() {
    let dir = demo_data();
    let total: u64 = FILES.iter().map(|f| std::fs::metadata(dir.join(f)).unwrap().len()).sum();
    assert!(total < 3_000_000, "demo-data WAVs take {total} bytes; the budget is under 3 MB");
    let readme = std::fs::read_to_string(dir.join("README.md")).expect("demo-data/README.md");
    for f in FILES {
        assert!(readme.contains(f), "README describes {f}");
    }
    assert!(readme.contains("make-demo-data"), "README gives the command that regenerates the files");
    for (file, channels, seconds) in [(FILES[0], 1, 9.5), (FILES[1], 2, 1.6), (FILES[2], 2, 3.0)] {
        let info = read_wav_info(&dir.join(file)).unwrap();
        assert_eq!((info.channels, info.sample_rate_hz, info.bits_per_sample), (channels, 48_000, 24), "{file}");
        let audio = read_wav(&dir.join(file)).unwrap();
        assert!((audio.duration_s() - seconds).abs() < 1e-9, "{file}: {} s", audio.duration_s());
    }
    // Peaks as documented: the phrase at -3 dBFS, each IR at -12 dBFS (within one 24-bit step).
    let db = |f: &str| 20.0 * peak(&read_wav(&dir.join(f)).unwrap()).log10();
    assert!((db(FILES[0]) + 3.0).abs() < 1e-3);
    assert!((db(FILES[1]) + 12.0).abs() < 1e-3 && (db(FILES[2]) + 12.0).abs() < 1e-3);
}

#[test]
fn regenerating_gives_the_committed_files() {
    // Tolerance: one 24-bit step per sample. On one machine the files come out bit for bit (the count of
    // differing samples is printed, 0 here), but the rooms are rendered through f64 FFTs whose rounding
    // depends on the SIMD path rustfft picks at run time (AVX, SSE, NEON, scalar); a last-bit difference can
    // move a sample across a rounding boundary of the 24-bit grid. One step is 2^-23, -138 dBFS.
    let out = scratch("regenerate");
    partita(&["make-demo-data", "--out-dir", s(&out)]);
    for f in FILES {
        let (ours, committed) = (read_wav(&out.join(f)).unwrap(), read_wav(&demo_data().join(f)).unwrap());
        assert_eq!(read_wav_info(&out.join(f)).unwrap(), read_wav_info(&demo_data().join(f)).unwrap(), "{f}: header");
        assert_eq!(ours.channel_count(), committed.channel_count());
        let step = 1.0 / 8_388_608.0;
        let mut differing = 0usize;
        for (a, b) in ours.channels.iter().zip(&committed.channels) {
            assert_eq!(a.len(), b.len(), "{f}: length");
            for (x, y) in a.iter().zip(b) {
                let d = f64::from((x - y).abs());
                assert!(d <= step * 1.0001, "{f}: a sample differs by {} steps", d / step);
                differing += usize::from(d > 0.0);
            }
        }
        eprintln!("{f}: {differing} samples differ from the committed file (one 24-bit step allowed)");
    }
}

#[test]
fn demo_writes_each_space_at_minus_one_dbfs_and_reports_plan_latency_and_cost() {
    let out = scratch("demo");
    let run = partita(&["demo", "--out-dir", s(&out)]);
    let stdout = String::from_utf8_lossy(&run.stdout);
    for needle in [
        "wet 0.35 + dry 0.65",
        "level",
        "partitions",
        "latency      64 frames (1.333 ms)",
        "schedule auto (headroom 8%)",
        "real time",
        "% of one core",
        "worst callback",
        "Files are in",
        "low volume",
    ] {
        assert!(stdout.contains(needle), "`{needle}` missing from:\n{stdout}");
    }
    assert!(stdout.contains(s(&out.canonicalize().unwrap())), "names the folder:\n{stdout}");

    // The dry file is the committed one, byte for byte.
    assert_eq!(std::fs::read(out.join(FILES[0])).unwrap(), std::fs::read(demo_data().join(FILES[0])).unwrap());
    let dry = read_wav(&demo_data().join(FILES[0])).unwrap();
    for (f, ir_frames) in [(FILES[1], 76_800), (FILES[2], 144_000)] {
        let y = read_wav(&out.join(f)).unwrap();
        assert_eq!(read_wav_info(&out.join(f)).unwrap().bits_per_sample, 32, "{f}: f32");
        assert_eq!((y.channel_count(), y.frames()), (2, dry.frames() + ir_frames - 1), "{f}: full tail");
        let db = 20.0 * peak(&y).log10();
        assert!((db + 1.0).abs() < 1e-4, "{f}: peak {db} dBFS, want -1");

        // The stated mix: the same as `partita render --normalize energy --wet 0.35 --dry 0.65`, scaled.
        let check = out.join(format!("check-{f}"));
        let ir = demo_data().join(f);
        let dry_path = demo_data().join(FILES[0]);
        partita(&[
            "render",
            s(&dry_path),
            "--ir",
            s(&ir),
            "-o",
            s(&check),
            "--normalize",
            "energy",
            "--wet",
            "0.35",
            "--dry",
            "0.65",
        ]);
        let r = read_wav(&check).unwrap();
        let scale = peak(&y) / peak(&r);
        for (a, b) in y.channels.iter().zip(&r.channels) {
            let worst = a.iter().zip(b).map(|(&p, &q)| (f64::from(p) - scale * f64::from(q)).abs()).fold(0.0, f64::max);
            assert!(worst < 1e-6, "{f}: demo and render differ by {worst}");
        }
    }
}

#[test]
fn demo_generates_its_files_when_the_folder_is_missing() {
    let out = scratch("demo-generated");
    let missing = out.join("no-demo-data-here");
    let run = partita(&["demo", "--out-dir", s(&out), "--data-dir", s(&missing), "--wet", "0.5", "--dry", "0.5"]);
    let stdout = String::from_utf8_lossy(&run.stdout);
    assert!(stdout.contains("generated in memory"), "{stdout}");
    assert!(stdout.contains("wet 0.5 + dry 0.5"), "{stdout}");
    for f in FILES {
        let y = read_wav(&out.join(f)).unwrap();
        assert!(y.frames() > 0, "{f}");
    }
    // The generated dry phrase equals the committed one within a 24-bit step.
    let (a, b) = (read_wav(&out.join(FILES[0])).unwrap(), read_wav(&demo_data().join(FILES[0])).unwrap());
    assert!(a.channels[0].iter().zip(&b.channels[0]).all(|(x, y)| (x - y).abs() <= 1.0001 / 8_388_608.0));

    // The demo never writes over its own data.
    let copy = scratch("demo-self");
    for f in FILES {
        std::fs::copy(demo_data().join(f), copy.join(f)).unwrap();
    }
    let refused = Command::new(env!("CARGO_BIN_EXE_partita"))
        .args(["demo", "--out-dir", s(&copy), "--data-dir", s(&copy)])
        .output()
        .unwrap();
    assert_eq!(refused.status.code(), Some(1));
    let err = String::from_utf8_lossy(&refused.stderr);
    assert!(err.starts_with("partita: error: ") && err.lines().count() == 1 && err.contains("demo files"), "{err}");
}

#[test]
fn plan_reads_the_ir_file_header() {
    let barn = demo_data().join(FILES[2]);
    let out = partita(&["plan", "--ir", s(&barn), "--block", "64", "--json", "--model", "flops"]);
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["ir_frames"], 144_000);
    assert_eq!(v["sample_rate_hz"], 48_000);
    assert_eq!(v["routing"], "Stereo");
    assert_eq!(v["latency_frames"], 64);
    // At another rate the IR keeps its duration: ceil(144000 x 44100 / 48000) = 132300 frames.
    let out = partita(&["plan", "--ir", s(&barn), "--rate", "44100", "--json", "--model", "flops"]);
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    assert_eq!(v["ir_frames"], 132_300);
    // The table form works too.
    let out = partita(&["plan", "--ir", s(&barn), "--block", "64", "--model", "flops"]);
    assert!(String::from_utf8_lossy(&out.stdout).contains("144000 frames"));

    // A bad file: one line naming it.
    let dir = scratch("plan-bad");
    let bad = dir.join("bad.wav");
    std::fs::write(&bad, b"RIFF\x04\x00\x00\x00WAVE").unwrap();
    let failed = Command::new(env!("CARGO_BIN_EXE_partita")).args(["plan", "--ir", s(&bad)]).output().unwrap();
    assert_eq!(failed.status.code(), Some(1));
    let err = String::from_utf8_lossy(&failed.stderr);
    assert!(err.starts_with("partita: error: ") && err.contains(s(&bad)) && err.lines().count() == 1, "{err}");
    let wrong_routing = Command::new(env!("CARGO_BIN_EXE_partita"))
        .args(["plan", "--ir", s(&barn), "--routing", "true-stereo"])
        .output()
        .unwrap();
    let err = String::from_utf8_lossy(&wrong_routing.stderr);
    assert!(!wrong_routing.status.success() && err.contains(s(&barn)), "{err}");
}

/// `demo --routing`: a routing the rooms' channels do not fit is one clear error naming the routing, and
/// nothing is rendered; the routing the channels imply works when asked for by name (any case).
#[test]
fn demo_takes_a_routing_and_refuses_one_that_does_not_fit() {
    let out = scratch("demo-routing");
    let run = Command::new(env!("CARGO_BIN_EXE_partita"))
        .args(["demo", "--out-dir", s(&out), "--routing", "true-stereo"])
        .output()
        .expect("run partita");
    let err = String::from_utf8_lossy(&run.stderr);
    assert_eq!(run.status.code(), Some(1), "{err}");
    assert_eq!(err.lines().count(), 1, "one error line: {err}");
    assert!(err.starts_with("partita: error: ") && err.contains("true-stereo"), "{err}");
    assert!(!out.join(FILES[1]).exists(), "nothing rendered");
    partita(&["demo", "--out-dir", s(&out), "--routing", "Mono-To-Stereo"]);
    assert_eq!(read_wav(&out.join(FILES[1])).unwrap().channel_count(), 2);
}
