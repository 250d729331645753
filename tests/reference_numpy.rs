//! Cross-check of the engine against an outside reference: `numpy.convolve(x, h, mode='full')` in float64
//! (NumPy reference documentation, `numpy.convolve`). The bound is DESIGN.md section 4: max error
//! <= 2e-6 of the reference peak, relative RMS <= 1e-6.
//!
//! The Python interpreter comes from `PARTITA_PYTHON` (set by `scripts/check`, a venv at `target/py`
//! with pinned numpy). Without it the test skips loudly; with `CI` set, it fails instead.

use std::path::{Path, PathBuf};
use std::process::Command;

use partita_core::synth::{decaying_noise, Noise};
use partita_core::{Engine, ImpulseResponse, Plan, Routing};
use partita_testkit::ErrorBound;

fn python() -> Option<PathBuf> {
    partita_testkit::reference_python("numpy.convolve cross-check of the engine")
}

fn write_f32(path: &Path, v: &[f32]) {
    let bytes: Vec<u8> = v.iter().flat_map(|x| x.to_le_bytes()).collect();
    std::fs::write(path, bytes).unwrap();
}

fn read_f64(path: &Path) -> Vec<f64> {
    std::fs::read(path).unwrap().chunks_exact(8).map(|c| f64::from_le_bytes(c.try_into().unwrap())).collect()
}

/// Runs the reference script on `inputs` through `ir` with `routing`; returns one f64 output per output.
fn numpy_reference(
    py: &Path,
    name: &str,
    inputs: &[Vec<f32>],
    ir: &ImpulseResponse,
    routing: Routing,
) -> Vec<Vec<f64>> {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join(format!("numpy-{name}"));
    std::fs::create_dir_all(&dir).unwrap();
    let map = routing.resolve(ir.channels()).unwrap();
    let file = |kind: &str, i: usize| dir.join(format!("{kind}{i}.bin"));
    for (i, x) in inputs.iter().enumerate() {
        write_f32(&file("in", i), x);
    }
    for c in 0..ir.channels() {
        write_f32(&file("ir", c), ir.channel(c));
    }
    let list = |kind: &str, n: usize| -> Vec<String> { (0..n).map(|i| file(kind, i).display().to_string()).collect() };
    let manifest = serde_json::json!({
        "inputs": list("in", inputs.len()),
        "ir": list("ir", ir.channels()),
        "paths": map.paths.iter().map(|p| [p.input, p.output, p.ir_channel]).collect::<Vec<_>>(),
        "outputs": list("out", map.outputs),
    });
    let manifest_path = dir.join("manifest.json");
    std::fs::write(&manifest_path, manifest.to_string()).unwrap();
    let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("tests/reference/convolve.py");
    let out = Command::new(py).arg(&script).arg(&manifest_path).output().expect("run the reference interpreter");
    assert!(out.status.success(), "reference script failed: {}", String::from_utf8_lossy(&out.stderr));
    eprintln!("{name}: {}", String::from_utf8_lossy(&out.stdout).trim());
    (0..map.outputs).map(|o| read_f64(&file("out", o))).collect()
}

fn check(py: &Path, name: &str, plan: &Plan, ir: &ImpulseResponse, routing: Routing, frames: usize) -> ErrorBound {
    let mut noise = Noise::new(frames as u64);
    let inputs: Vec<Vec<f32>> = (0..routing.inputs()).map(|_| noise.vec(frames)).collect();
    let want = numpy_reference(py, name, &inputs, ir, routing);
    let mut engine = Engine::new(plan, ir, routing, 512).unwrap();
    let lat = engine.latency_frames();
    let total = want[0].len() + lat;
    let mut out = vec![vec![0.0f32; total]; routing.outputs()];
    let padded: Vec<Vec<f32>> = inputs
        .iter()
        .map(|x| {
            let mut v = x.clone();
            v.resize(total, 0.0);
            v
        })
        .collect();
    let mut at = 0;
    while at < total {
        let n = noise.range(1, 512).min(total - at);
        let ins: Vec<&[f32]> = padded.iter().map(|x| &x[at..at + n]).collect();
        let mut outs: Vec<&mut [f32]> = out.iter_mut().map(|y| &mut y[at..at + n]).collect();
        engine.process(&ins, &mut outs).unwrap();
        at += n;
    }
    let mut worst = ErrorBound { max_over_peak: 0.0, relative_rms: 0.0 };
    for (o, (y, w)) in out.iter().zip(&want).enumerate() {
        // Align by the engine's reported latency, then compare against numpy.convolve (float64).
        let e = ErrorBound::measure(&y[lat..], w);
        eprintln!("{name} output {o}: max error {:.2e} of peak, relative RMS {:.2e}", e.max_over_peak, e.relative_rms);
        e.assert_design_bound(&format!("{name} output {o} against numpy.convolve"));
        worst.max_over_peak = worst.max_over_peak.max(e.max_over_peak);
        worst.relative_rms = worst.relative_rms.max(e.relative_rms);
    }
    worst
}

fn ir_of(channels: usize, frames: usize, rt60_frames: f64) -> ImpulseResponse {
    ImpulseResponse::new((0..channels).map(|c| decaying_noise(frames, rt60_frames, 40 + c as u64)).collect(), 48_000)
        .unwrap()
}

#[test]
fn engine_matches_numpy_convolve() {
    let Some(py) = python() else { return };
    let cases: Vec<(&str, Plan, ImpulseResponse, Routing, usize)> = vec![
        ("mono-b64", Plan::uniform(64, 4800).unwrap(), ir_of(1, 4800, 3000.0), Routing::Mono, 9000),
        ("stereo-b48", Plan::uniform(48, 7001).unwrap(), ir_of(2, 7001, 5000.0), Routing::Stereo, 5000),
        ("true-stereo-b256", Plan::uniform(256, 20_000).unwrap(), ir_of(4, 20_000, 9000.0), Routing::TrueStereo, 6000),
        ("mono-3s-b1024", Plan::uniform(1024, 144_000).unwrap(), ir_of(1, 144_000, 60_000.0), Routing::Mono, 3000),
    ];
    let mut summary = Vec::new();
    for (name, plan, ir, routing, frames) in &cases {
        let e = check(&py, name, plan, ir, *routing, *frames);
        summary.push(format!("{name}: {:.2e} / {:.2e}", e.max_over_peak, e.relative_rms));
    }
    eprintln!("numpy cross-check (max over peak / relative RMS): {}", summary.join("; "));
}
