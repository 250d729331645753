//! `partita render` against an outside reference: `numpy.convolve(x, h, mode='full')` in float64 (NumPy
//! reference documentation, `numpy.convolve`), computed by `tests/reference/render_convolve.py` from the very WAV
//! files the command reads, read there with soundfile (libsndfile). Mono, stereo, mono-to-stereo and true-stereo
//! IRs; the bound is DESIGN.md section 4: max error <= 2e-6 of the reference peak, relative RMS <= 1e-6.
//!
//! The Python interpreter comes from `PARTITA_PYTHON` (set by `scripts/check`, a venv at `target/py` with pinned
//! numpy and soundfile). Without it the test skips loudly; with `CI` set, it fails instead.

use std::path::{Path, PathBuf};
use std::process::Command;

use partita_core::synth::{decaying_noise, Noise};
use partita_io::{read_wav, write_wav, Dither, SampleFormat};
use partita_testkit::ErrorBound;

fn python() -> Option<PathBuf> {
    partita_testkit::reference_python("render vs numpy.convolve")
}

fn read_f64(path: &Path) -> Vec<f64> {
    std::fs::read(path).unwrap().chunks_exact(8).map(|c| f64::from_le_bytes(c.try_into().unwrap())).collect()
}

/// One case: input channels, IR channels (decaying noise), the routing paths written out by hand as
/// (input, output, IR channel), and extra arguments for `partita render`.
struct Case {
    name: &'static str,
    input_channels: usize,
    input_frames: usize,
    ir_channels: usize,
    ir_frames: usize,
    paths: Vec<[usize; 3]>,
    args: Vec<&'static str>,
}

fn run_case(py: &Path, case: &Case) -> ErrorBound {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("reference-render").join(case.name);
    if dir.exists() {
        std::fs::remove_dir_all(&dir).unwrap();
    }
    std::fs::create_dir_all(&dir).unwrap();
    let mut noise = Noise::new(case.input_frames as u64);
    let x: Vec<Vec<f32>> = (0..case.input_channels).map(|_| noise.vec(case.input_frames)).collect();
    let h: Vec<Vec<f32>> = (0..case.ir_channels)
        .map(|c| decaying_noise(case.ir_frames, case.ir_frames as f64 / 2.0, 70 + c as u64))
        .collect();
    let (input, ir, out) = (dir.join("in.wav"), dir.join("ir.wav"), dir.join("out.wav"));
    write_wav(&input, &x, 48_000, SampleFormat::F32, Dither::OFF).unwrap();
    write_wav(&ir, &h, 48_000, SampleFormat::F32, Dither::OFF).unwrap();

    let rendered = Command::new(env!("CARGO_BIN_EXE_partita"))
        .arg("render")
        .arg(&input)
        .arg("--ir")
        .arg(&ir)
        .arg("-o")
        .arg(&out)
        .args(&case.args)
        .output()
        .expect("run partita");
    assert!(rendered.status.success(), "{}: {}", case.name, String::from_utf8_lossy(&rendered.stderr));

    let outputs = case.paths.iter().map(|p| p[1]).max().unwrap() + 1;
    let ref_files: Vec<PathBuf> = (0..outputs).map(|o| dir.join(format!("ref{o}.f64"))).collect();
    let manifest = serde_json::json!({
        "input": input,
        "ir": ir,
        "paths": case.paths,
        "outputs": ref_files,
    });
    let manifest_path = dir.join("manifest.json");
    std::fs::write(&manifest_path, manifest.to_string()).unwrap();
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/render_convolve.py");
    let reference = Command::new(py).arg(&script).arg(&manifest_path).output().expect("run the reference interpreter");
    assert!(reference.status.success(), "reference script failed: {}", String::from_utf8_lossy(&reference.stderr));
    eprintln!("{}: {}", case.name, String::from_utf8_lossy(&reference.stdout).trim());

    let got = read_wav(&out).unwrap();
    assert_eq!(got.channel_count(), outputs, "{}: output channels", case.name);
    let mut worst = ErrorBound { max_over_peak: 0.0, relative_rms: 0.0 };
    for (o, file) in ref_files.iter().enumerate() {
        let want = read_f64(file);
        assert_eq!(got.channels[o].len(), want.len(), "{} output {o}: length M + L - 1", case.name);
        let e = ErrorBound::measure(&got.channels[o], &want);
        eprintln!(
            "{} output {o}: max error {:.2e} of peak, relative RMS {:.2e}",
            case.name, e.max_over_peak, e.relative_rms
        );
        e.assert_design_bound(&format!("{} output {o}: partita render against numpy.convolve (float64)", case.name));
        worst.max_over_peak = worst.max_over_peak.max(e.max_over_peak);
        worst.relative_rms = worst.relative_rms.max(e.relative_rms);
    }
    worst
}

#[test]
fn render_matches_numpy_convolve_for_mono_stereo_and_true_stereo_irs() {
    let Some(py) = python() else { return };
    let cases = [
        // Default offline plan, 40k frames: two time segments on a 2-core machine.
        Case {
            name: "mono",
            input_channels: 1,
            input_frames: 40_000,
            ir_channels: 1,
            ir_frames: 4800,
            paths: vec![[0, 0, 0]],
            args: vec![],
        },
        // L to L, R to R, at a small block: a many-level plan.
        Case {
            name: "stereo-block64",
            input_channels: 2,
            input_frames: 30_000,
            ir_channels: 2,
            ir_frames: 7001,
            paths: vec![[0, 0, 0], [1, 1, 1]],
            args: vec!["--block", "64"],
        },
        // A 2-channel IR on a mono input: mono to stereo.
        Case {
            name: "mono-to-stereo",
            input_channels: 1,
            input_frames: 20_000,
            ir_channels: 2,
            ir_frames: 3000,
            paths: vec![[0, 0, 0], [0, 1, 1]],
            args: vec![],
        },
        // True stereo, channels LL LR RL RR (first letter the input), one thread.
        Case {
            name: "true-stereo",
            input_channels: 2,
            input_frames: 25_000,
            ir_channels: 4,
            ir_frames: 20_000,
            paths: vec![[0, 0, 0], [0, 1, 1], [1, 0, 2], [1, 1, 3]],
            args: vec!["--threads", "1"],
        },
        // A 1 s IR: several partitions of the largest offline block.
        Case {
            name: "mono-1s",
            input_channels: 1,
            input_frames: 12_000,
            ir_channels: 1,
            ir_frames: 48_000,
            paths: vec![[0, 0, 0]],
            args: vec![],
        },
    ];
    let summary: Vec<String> = cases
        .iter()
        .map(|c| {
            let e = run_case(&py, c);
            format!("{}: {:.2e} / {:.2e}", c.name, e.max_over_peak, e.relative_rms)
        })
        .collect();
    eprintln!("partita render vs numpy.convolve (max over peak / relative RMS): {}", summary.join("; "));
}
