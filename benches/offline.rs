//! Offline rendering throughput: `partita_core::offline::render` against scipy and numpy on the same
//! float32 data, in one run, side by side (DESIGN.md section 5, T10).
//!
//! Full run (`cargo bench --bench offline`): 60 s of stereo noise through stereo decaying-noise IRs of
//! 0.5, 2 and 10 s at 48 kHz (L->L, R->R). Partita renders single-threaded and with every core;
//! references are `scipy.signal.oaconvolve` and `scipy.signal.fftconvolve` on float32 data, and for the
//! 0.5 s IR only the direct forms `numpy.convolve` (float32) and our oracle (`partita_core::naive`,
//! f64 accumulation). The max error of every result is measured against `scipy.signal.fftconvolve` on
//! float64 copies of the same data, over that reference's peak. A second table sweeps Partita's engine
//! block (single thread) to show why `offline::offline_plan` picks its block.
//!
//! Quick mode (no `--bench` argument, as under `cargo test --benches`, or `PARTITA_BENCH_QUICK=1`): 2 s of
//! input, the 0.5 s IR, oaconvolve as the only timed reference. Same outputs, seconds.
//!
//! Python comes from `PARTITA_PYTHON`, else the test venv at `target/py`; without it only Partita's own
//! numbers are reported (loudly). Data goes through raw f32 files in `target/partita-bench/offline/`;
//! the script `benches/reference/offline.py` times only the convolution calls.

mod common;

use std::path::{Path, PathBuf};
use std::process::Command;
use std::time::Instant;

use common::{load_average, machine_line, median, out_dir, quick_mode, stereo_ir, Csv, Table, RATE_HZ};
use partita_core::offline::{self, offline_planner};
use partita_core::synth::Noise;
use partita_core::{naive, ImpulseResponse, Plan, Routing, Shape};

const STEREO: Shape = Shape { inputs: 2, outputs: 2, paths: 2 };

struct Case {
    name: String,
    ir: ImpulseResponse,
}

/// One timed result: seconds (median over repetitions) and max error over the f64 reference's peak.
#[derive(Clone, Debug)]
struct Timed {
    seconds: f64,
    max_err: Option<f64>,
}

fn find_python() -> Option<PathBuf> {
    let candidate = std::env::var_os("PARTITA_PYTHON")
        .map(PathBuf::from)
        .or_else(|| Some(PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target/py/bin/python")))
        .filter(|p| p.exists());
    let works = candidate.as_ref().is_some_and(|p| {
        Command::new(p).args(["-c", "import numpy, scipy.signal"]).output().is_ok_and(|o| o.status.success())
    });
    if works {
        candidate
    } else {
        eprintln!();
        eprintln!("!!! NOTE: no Python with numpy and scipy (set PARTITA_PYTHON or run scripts/check to make");
        eprintln!("!!! target/py). Reporting Partita's own numbers only: no references, no error figures.");
        eprintln!();
        None
    }
}

fn write_f32(path: &Path, v: &[f32]) {
    let bytes: Vec<u8> = v.iter().flat_map(|x| x.to_le_bytes()).collect();
    std::fs::write(path, bytes).unwrap_or_else(|e| panic!("cannot write {}: {e}", path.display()));
}

fn read_f32(path: &Path) -> Vec<f32> {
    let bytes = std::fs::read(path).unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()));
    bytes.chunks_exact(4).map(|c| f32::from_le_bytes([c[0], c[1], c[2], c[3]])).collect()
}

fn read_f64(path: &Path) -> Vec<f64> {
    let bytes = std::fs::read(path).unwrap_or_else(|e| panic!("cannot read {}: {e}", path.display()));
    bytes.chunks_exact(8).map(|c| f64::from_le_bytes(c.try_into().expect("8 bytes"))).collect()
}

/// max |ours - reference| over every channel, divided by the reference's peak over every channel.
fn max_err_over_peak(ours: &[Vec<f64>], reference: &[Vec<f64>]) -> f64 {
    let peak = reference.iter().flatten().fold(0.0f64, |m, v| m.max(v.abs()));
    let mut err = 0.0f64;
    for (a, b) in ours.iter().zip(reference) {
        assert_eq!(a.len(), b.len(), "output length differs from the reference");
        err = a.iter().zip(b).fold(err, |m, (x, y)| m.max((x - y).abs()));
    }
    err / peak
}

fn widen(v: &[Vec<f32>]) -> Vec<Vec<f64>> {
    v.iter().map(|c| c.iter().map(|&s| f64::from(s)).collect()).collect()
}

/// Times `offline::render` `reps` times (engine build included: the references transform the IR too).
fn time_partita(
    plan: &Plan,
    ir: &ImpulseResponse,
    x: &[Vec<f32>],
    threads: usize,
    reps: usize,
) -> (f64, Vec<Vec<f32>>) {
    let mut times = Vec::with_capacity(reps);
    let mut last = Vec::new();
    for _ in 0..reps {
        let t0 = Instant::now();
        let y = offline::render(plan, ir, Routing::Stereo, x, threads, None).expect("render");
        times.push(t0.elapsed().as_secs_f64());
        last = y;
    }
    (median(&times), last)
}

fn plan_summary(plan: &Plan) -> String {
    let levels: Vec<String> = plan.levels.iter().map(|l| format!("{}x{}", l.block_frames, l.partitions)).collect();
    format!("B {} [{}]", plan.block_frames, levels.join(" "))
}

fn main() {
    let quick = quick_mode();
    let input_seconds = if quick { 2.0 } else { 60.0 };
    let ir_seconds: &[f64] = if quick { &[0.5] } else { &[0.5, 2.0, 10.0] };
    let reps = 3;
    let all_cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    let machine = machine_line();
    let load_start = load_average();
    println!(
        "# Offline rendering{}: {input_seconds} s stereo input, 48 kHz\n\n{machine}\n",
        if quick { " (quick mode)" } else { "" }
    );

    let dir = out_dir().join("offline");
    std::fs::create_dir_all(&dir).expect("create the data directory");
    let frames = (input_seconds * f64::from(RATE_HZ)) as usize;
    let mut noise = Noise::new(0x00FF_11AE);
    let x: Vec<Vec<f32>> = (0..2).map(|_| noise.vec(frames)).collect();
    let cases: Vec<Case> = ir_seconds
        .iter()
        .enumerate()
        .map(|(i, &s)| Case { name: format!("{s}s"), ir: stereo_ir(s, 100 + 10 * i as u64) })
        .collect();

    // ---- references (Python), run first and alone: the machine has few cores.
    let python = find_python();
    let file = |tag: &str, c: usize| dir.join(format!("{tag}-{c}.bin"));
    let mut refs: Vec<(String, String, f64, Vec<Vec<f64>>)> = Vec::new(); // (case, method, s, output)
    let mut exact: Vec<Option<Vec<Vec<f64>>>> = vec![None; cases.len()];
    let mut versions = String::new();
    if let Some(py) = &python {
        for (c, xc) in x.iter().enumerate() {
            write_f32(&file("input", c), xc);
        }
        let mut manifest_cases = Vec::new();
        for (ci, case) in cases.iter().enumerate() {
            for c in 0..2 {
                write_f32(&file(&format!("ir-{}", case.name), c), case.ir.channel(c));
            }
            let mut methods = vec![("fftconvolve-f64", 1), ("oaconvolve-f32", reps)];
            if !quick {
                methods.push(("fftconvolve-f32", reps));
                if ci == 0 {
                    methods.push(("numpy-convolve-f32", 1));
                }
            }
            let methods: Vec<serde_json::Value> = methods
                .into_iter()
                .map(|(m, r)| {
                    let outs: Vec<String> =
                        (0..2).map(|c| file(&format!("out-{}-{m}", case.name), c).display().to_string()).collect();
                    serde_json::json!({ "name": m, "reps": r, "outputs": outs })
                })
                .collect();
            let irs: Vec<String> =
                (0..2).map(|c| file(&format!("ir-{}", case.name), c).display().to_string()).collect();
            manifest_cases.push(serde_json::json!({ "name": case.name, "ir": irs, "methods": methods }));
        }
        let inputs: Vec<String> = (0..2).map(|c| file("input", c).display().to_string()).collect();
        let manifest = serde_json::json!({ "inputs": inputs, "cases": manifest_cases });
        let manifest_path = dir.join("manifest.json");
        let results_path = dir.join("results.json");
        std::fs::write(&manifest_path, manifest.to_string()).expect("write the manifest");
        let script = Path::new(env!("CARGO_MANIFEST_DIR")).join("benches/reference/offline.py");
        eprintln!("running the references ({})", py.display());
        let status = Command::new(py)
            .arg(&script)
            .arg(&manifest_path)
            .arg(&results_path)
            .env("OPENBLAS_NUM_THREADS", "1")
            .env("OMP_NUM_THREADS", "1")
            .status()
            .expect("start the reference interpreter");
        assert!(status.success(), "the reference script failed ({status})");
        let results: serde_json::Value =
            serde_json::from_str(&std::fs::read_to_string(&results_path).expect("read results")).expect("json");
        versions = format!(
            "numpy {}, scipy {}",
            results["numpy"].as_str().unwrap_or("?"),
            results["scipy"].as_str().unwrap_or("?")
        );
        for r in results["results"].as_array().expect("results list") {
            let case = r["case"].as_str().expect("case").to_string();
            let method = r["method"].as_str().expect("method").to_string();
            let seconds = r["seconds"].as_f64().expect("seconds");
            let ci = cases.iter().position(|c| c.name == case).expect("known case");
            if method == "fftconvolve-f64" {
                exact[ci] = Some((0..2).map(|c| read_f64(&file(&format!("out-{case}-{method}"), c))).collect());
            } else {
                let out = (0..2).map(|c| read_f32(&file(&format!("out-{case}-{method}"), c))).collect::<Vec<_>>();
                refs.push((case, method, seconds, widen(&out)));
            }
        }
    }

    // ---- Partita, then (full mode, short IR) the oracle.
    let mut partita: Vec<Vec<(usize, Timed)>> = Vec::new();
    let mut plans = Vec::new();
    for (ci, case) in cases.iter().enumerate() {
        let plan = offline::offline_plan(case.ir.frames(), STEREO).expect("offline plan");
        let mut rows = Vec::new();
        let mut thread_counts = vec![1];
        if all_cores > 1 {
            thread_counts.push(all_cores);
        }
        for &threads in &thread_counts {
            let (seconds, y) = time_partita(&plan, &case.ir, &x, threads, reps);
            let max_err = exact[ci].as_ref().map(|e| max_err_over_peak(&widen(&y), e));
            eprintln!("  {:>8} partita {threads} thread(s) {seconds:9.4} s", case.name);
            rows.push((threads, Timed { seconds, max_err }));
        }
        partita.push(rows);
        plans.push(plan);
    }
    if !quick {
        let case = &cases[0];
        eprintln!("running the direct-form oracle on the {} IR (slow by design)", case.name);
        let t0 = Instant::now();
        let y: Vec<Vec<f64>> = (0..2).map(|c| naive::convolve(&x[c], case.ir.channel(c))).collect();
        let seconds = t0.elapsed().as_secs_f64();
        refs.push((case.name.clone(), "partita-oracle-f64".to_string(), seconds, y));
    }

    // ---- tables and CSV.
    let mut csv = Csv::new(
        out_dir().join("offline.csv"),
        &["case", "threads", "partita_s", "reference", "reference_s", "speedup", "max_err"],
    );
    let fmt_err = |e: Option<f64>| e.map_or("n/a".to_string(), |e| format!("{e:.2e}"));
    let csv_err = |e: Option<f64>| e.map_or(String::new(), |e| format!("{e:.3e}"));
    let mut ptable = Table::new(&["case", "plan", "threads", "seconds", "real-time factor", "max err / peak"]);
    for ((case, rows), plan) in cases.iter().zip(&partita).zip(&plans) {
        for (threads, t) in rows {
            ptable.row(vec![
                format!("{} IR", case.name),
                plan_summary(plan),
                threads.to_string(),
                format!("{:.3}", t.seconds),
                format!("{:.0}x", input_seconds / t.seconds),
                fmt_err(t.max_err),
            ]);
            // Partita's own error: a row whose reference is Partita itself (speedup 1).
            csv.row(&[
                case.name.clone(),
                threads.to_string(),
                format!("{:.6}", t.seconds),
                "partita".to_string(),
                format!("{:.6}", t.seconds),
                "1.000".to_string(),
                csv_err(t.max_err),
            ]);
        }
    }
    println!("## Partita (`offline::render`, plan from `offline::offline_plan`, engine build included)\n");
    println!("{}", ptable.render());

    let mut header = vec!["case", "reference", "seconds", "max err / peak", "speedup (1 thread)"];
    let multi = format!("speedup ({all_cores} threads)");
    if all_cores > 1 {
        header.push(&multi);
    }
    let mut rtable = Table::new(&header);
    let mut t10: Option<f64> = None;
    for (case, method, seconds, out) in &refs {
        let ci = cases.iter().position(|c| &c.name == case).expect("known case");
        let max_err = exact[ci].as_ref().map(|e| max_err_over_peak(out, e));
        let mut cells = vec![format!("{case} IR"), method.clone(), format!("{seconds:.3}"), fmt_err(max_err)];
        for (threads, t) in &partita[ci] {
            let speedup = seconds / t.seconds;
            cells.push(format!("{speedup:.2}"));
            csv.row(&[
                case.clone(),
                threads.to_string(),
                format!("{:.6}", t.seconds),
                method.clone(),
                format!("{seconds:.6}"),
                format!("{speedup:.3}"),
                csv_err(max_err),
            ]);
            if *threads == 1 && method == "oaconvolve-f32" && case == "10s" {
                t10 = Some(speedup);
            }
        }
        rtable.row(cells);
    }
    if refs.is_empty() {
        println!("(no Python references: see the note above)\n");
    } else {
        println!("## References ({versions}; float64 reference: scipy.signal.fftconvolve on float64 copies)\n");
        println!("speedup = reference seconds / Partita seconds (above 1: Partita is faster)\n");
        println!("{}", rtable.render());
    }
    match t10 {
        Some(s) => {
            let verdict = if s >= 2.0 { "met" } else { "NOT met" };
            println!(
                "T10: single-thread speedup over oaconvolve (float32), 10 s IR: {s:.2} (target >= 2: {verdict})\n"
            );
        }
        None => println!("T10 (10 s IR, single thread vs oaconvolve) is not evaluated in this run\n"),
    }
    println!(
        "System 1-minute load average: {load_start:.1} at the start, {:.1} after the timed runs (this bench adds \
         about 1; more means other work shared the machine).\n",
        load_average()
    );
    let path = csv.write();
    println!("wrote {}", path.display());

    if !quick || std::env::var_os("PARTITA_OFFLINE_BLOCK_SWEEP").is_some() {
        block_sweep(&cases, &x, input_seconds);
    }
}

/// Single-thread render time against the engine block (`offline::offline_planner` at each block: optimal
/// plans, flop model, levels up to `OFFLINE_MAX_LEVEL_FRAMES`): the evidence behind
/// `offline::offline_block_frames`.
fn block_sweep(cases: &[Case], x: &[Vec<f32>], input_seconds: f64) {
    let blocks: Vec<usize> = (12..=18).map(|k| 1usize << k).collect();
    let mut header = vec!["IR".to_string()];
    header.extend(blocks.iter().map(|b| format!("B {b}")));
    header.push("offline_plan".to_string());
    let header_refs: Vec<&str> = header.iter().map(String::as_str).collect();
    let mut table = Table::new(&header_refs);
    let mut csv = Csv::new(out_dir().join("offline-blocks.csv"), &["case", "block_frames", "partita_s", "chosen"]);
    for case in cases {
        let chosen = offline::offline_block_frames(case.ir.frames());
        let mut cells = vec![format!("{} IR", case.name)];
        for &b in &blocks {
            if b > case.ir.frames().next_power_of_two() {
                cells.push("-".to_string()); // a block beyond the IR only adds latency to discard
                continue;
            }
            let plan = offline_planner(case.ir.frames()).block_frames(b).shape(STEREO).plan(case.ir.frames());
            let plan = plan.expect("plan");
            let (s, _) = time_partita(&plan, &case.ir, x, 1, 1);
            let mark = if b == chosen { " *" } else { "" };
            cells.push(format!("{s:.3}{mark}"));
            csv.row(&[case.name.clone(), b.to_string(), format!("{s:.6}"), (b == chosen).to_string()]);
        }
        cells.push(format!("B {chosen}"));
        table.row(cells);
    }
    println!(
        "\n## Engine block sweep: single-thread seconds for {input_seconds} s stereo (one run each; * = offline_plan's \
         block)\n"
    );
    println!("{}", table.render());
    println!("wrote {}", csv.write().display());
}
