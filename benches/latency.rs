//! Latency against CPU: a paced sweep over block sizes, IR lengths and schedules (DESIGN.md section 5).
//!
//! For block sizes 16 to 1024, stereo decaying-noise IRs of 0.5, 2 and 10 s at 48 kHz (L->L, R->R) and
//! every bench mode of DESIGN.md section 4 (`uniform`, `optimal-sync`, `optimal-workers`, `optimal-sliced`,
//! `zero-workers`, `zero-sliced`), an engine runs a paced simulation: host calls of one block issued on
//! the real deadline grid (`partita::measure::run`, sleeping between calls as a sound card would wake the
//! audio thread, so caches go cold as they do live). Per cell it records the algorithmic latency, the mean
//! load over every thread the engine uses (`RunStats::mean_load_pct`: the audio thread's CPU inside
//! `process()` plus the worker threads' job CPU, thread clocks), callback thread-CPU time p50 / p99 / p99.9
//! / max in % of the deadline (wall-clock maximum beside it), late worker results, and the calibrated cost
//! model's prediction. The CSV also carries the whole process's CPU over the run (`process_load_pct`, an
//! upper bound that includes the bench's own pacing).
//!
//! Plans are made by the optimal planner with the calibrated cost model of this machine
//! (`partita::calibration::machine_costs`), for the stereo shape. Cells that cannot run in real time on one
//! core are skipped with the reason in the table: a predicted load above 100% of one core, or above 100%
//! measured in a short unpaced probe (which also warms the engine up before the paced run).
//!
//! Full run (`cargo bench --bench latency`): the S1 cells (10 s IR, block 64) run 60 s of audio each,
//! every other cell at least 2 s and at least 400 callbacks. About 13 minutes on a 2-core machine.
//! Quick mode (no `--bench` argument, as under `cargo test --benches`, or `PARTITA_BENCH_QUICK=1`): a few
//! cells of 0.3 s, same outputs, seconds.
//!
//! `PARTITA_LATENCY_IRS` and `PARTITA_LATENCY_BLOCKS` (comma-separated seconds and frames) restrict the
//! sweep, e.g. to re-measure the S1 cells alone on a quiet machine. `PARTITA_LATENCY_PACING=spin` waits
//! for each call's slot by spinning instead of sleeping (`partita::measure::Pacing::Spin`): a diagnostic
//! of what the sleeps cost on this machine, not the live figure; the default is `sleep`.
//!
//! Outputs: a Markdown table on stdout, `target/partita-bench/latency.csv` and `latency.svg`.

mod common;

use std::time::Instant;

use common::{load_average, machine_line, out_dir, quick_mode, stereo_ir, Csv, Table, RATE_HZ};
use partita::measure::{run, Pacing, RunStats};
use partita_core::{CostModel, Engine, ImpulseResponse, Kernel, Plan, PlanMode, Planner, Routing, Schedule, Shape};
use plotters::prelude::*;

const MODES: [&str; 6] =
    ["uniform", "optimal-sync", "optimal-workers", "optimal-sliced", "zero-workers", "zero-sliced"];

/// A cell that cannot keep up with real time on one core is not run paced (it would only fall behind).
const HOPELESS_LOAD_PCT: f64 = 100.0;

fn planner(mode: &str, block_frames: usize) -> Planner {
    let base = Planner::new().block_frames(block_frames);
    match mode {
        "uniform" => base.mode(PlanMode::Uniform),
        "optimal-sync" => base.mode(PlanMode::Optimal).schedule(Schedule::Sync),
        "optimal-workers" => base.mode(PlanMode::Optimal).schedule(Schedule::Workers),
        "optimal-sliced" => base.mode(PlanMode::Optimal).schedule(Schedule::Sliced),
        "zero-workers" => base.mode(PlanMode::Optimal).zero_latency(true).schedule(Schedule::Workers),
        "zero-sliced" => base.mode(PlanMode::Optimal).zero_latency(true).schedule(Schedule::Sliced),
        other => unreachable!("unknown mode {other}"),
    }
}

struct Cell {
    ir_seconds: f64,
    ir_frames: usize,
    block_frames: usize,
    mode: &'static str,
    latency_frames: usize,
    predicted_pct: f64,
    plan: Plan,
    result: Result<RunStats, String>,
    /// System load average when the cell finished (other processes on the machine).
    sys_load: f64,
}

/// Paced run. Its `mean_load_pct` is the load of every thread the engine uses (the callbacks' thread CPU
/// plus the workers' job CPU); do not add "process CPU minus this thread's" on top, which would count the
/// workers twice.
fn measure(engine: &mut Engine, seconds: f64, block: usize, pacing: Pacing) -> RunStats {
    run(engine, RATE_HZ, seconds, block, pacing)
}

/// `PARTITA_LATENCY_PACING`: `sleep` (the default) or `spin`.
fn pacing_env() -> Pacing {
    match std::env::var("PARTITA_LATENCY_PACING").as_deref().map(str::trim) {
        Err(_) | Ok("") | Ok("sleep") => Pacing::Sleep,
        Ok("spin") => Pacing::Spin,
        Ok(other) => panic!("PARTITA_LATENCY_PACING: `{other}` is not sleep or spin"),
    }
}

/// Unpaced run of `seconds` of audio: back-to-back load of the whole process (an upper bound on the
/// engine's), % of one core. Warms the engine up.
fn probe_load_pct(engine: &mut Engine, seconds: f64, block: usize) -> f64 {
    run(engine, RATE_HZ, seconds, block, Pacing::None).process_load_pct
}

/// A comma-separated list from the environment (e.g. `PARTITA_LATENCY_IRS=10 PARTITA_LATENCY_BLOCKS=64` runs
/// the S1 cells only), else `default`.
fn list_env<T: std::str::FromStr + Copy>(name: &str, default: &[T]) -> Vec<T> {
    match std::env::var(name) {
        Ok(v) if !v.trim().is_empty() => {
            v.split(',').map(|x| x.trim().parse().unwrap_or_else(|_| panic!("{name}: cannot parse `{x}`"))).collect()
        }
        _ => default.to_vec(),
    }
}

fn cell_seconds(quick: bool, ir_seconds: f64, block: usize) -> f64 {
    if quick {
        0.3
    } else if ir_seconds == 10.0 && block == 64 {
        60.0 // S1 (DESIGN.md T1: >= 60 s of audio)
    } else {
        (400.0 * block as f64 / f64::from(RATE_HZ)).max(2.0)
    }
}

fn main() {
    let quick = quick_mode();
    let blocks =
        list_env("PARTITA_LATENCY_BLOCKS", if quick { &[64, 256] } else { &[16, 32, 64, 128, 256, 512, 1024] });
    let ir_lengths = list_env("PARTITA_LATENCY_IRS", if quick { &[0.5] } else { &[0.5, 2.0, 10.0] });
    let (blocks, ir_lengths) = (&blocks[..], &ir_lengths[..]);
    let pacing = pacing_env();
    let kernel = Kernel::detect();
    let costs = partita::calibration::machine_costs(kernel, false);
    let model = CostModel::Measured(costs);
    let routing = Routing::Stereo;
    let shape = Shape::of(&routing.resolve(2).expect("stereo routing takes a 2-channel IR"));
    let planned: f64 = ir_lengths
        .iter()
        .flat_map(|&s| blocks.iter().map(move |&b| cell_seconds(quick, s, b) * MODES.len() as f64))
        .sum();
    println!(
        "# Latency sweep{}: stereo IRs, 48 kHz, paced ({})\n\n{}\n",
        if quick { " (quick mode)" } else { "" },
        if pacing == Pacing::Spin {
            "spinning between calls: a diagnostic, not the live figure"
        } else {
            "sleeping between calls"
        },
        machine_line()
    );
    eprintln!("latency sweep: up to {planned:.0} s of paced audio (hopeless cells are skipped)");
    let started = Instant::now();

    let mut cells = Vec::new();
    for (li, &ir_seconds) in ir_lengths.iter().enumerate() {
        let ir: ImpulseResponse = stereo_ir(ir_seconds, 1 + li as u64);
        for &block in blocks {
            for mode in MODES {
                let plan = planner(mode, block)
                    .cost_model(model.clone())
                    .shape(shape)
                    .plan(ir.frames())
                    .expect("the planner accepts every bench cell");
                let predicted_pct = model.load_pct(&plan, shape, f64::from(RATE_HZ));
                let latency_frames = plan.latency_frames();
                let result = if predicted_pct > HOPELESS_LOAD_PCT {
                    Err(format!("skipped: predicted load {predicted_pct:.0}% of one core (calibrated model)"))
                } else {
                    let mut engine = Engine::new(&plan, &ir, routing, block).expect("engine for a valid plan");
                    let probe = probe_load_pct(&mut engine, if quick { 0.05 } else { 0.2 }, block);
                    if probe > HOPELESS_LOAD_PCT {
                        Err(format!("skipped: {probe:.0}% of one core in an unpaced probe"))
                    } else {
                        Ok(measure(&mut engine, cell_seconds(quick, ir_seconds, block), block, pacing))
                    }
                };
                match &result {
                    Ok(m) => eprintln!(
                        "  {ir_seconds:>4} s  B {block:>4}  {mode:<16} load {:6.2}%  max {:6.1}%  late {}",
                        m.mean_load_pct, m.max_pct, m.late
                    ),
                    Err(why) => eprintln!("  {ir_seconds:>4} s  B {block:>4}  {mode:<16} {why}"),
                }
                cells.push(Cell {
                    ir_seconds,
                    ir_frames: ir.frames(),
                    block_frames: block,
                    mode,
                    latency_frames,
                    predicted_pct,
                    plan,
                    result,
                    sys_load: load_average(),
                });
            }
        }
    }
    eprintln!("latency sweep: {:.0} s", started.elapsed().as_secs_f64());

    print_table(&cells);
    print_s1(&cells);
    let csv = write_csv(&cells);
    println!("wrote {}", csv.display());
    match plot(&cells, blocks, ir_lengths) {
        Ok(path) => println!("wrote {}", path.display()),
        Err(e) => panic!("cannot draw latency.svg: {e}"),
    }
}

fn print_table(cells: &[Cell]) {
    let mut t = Table::new(&[
        "IR",
        "block",
        "mode",
        "latency (frames / ms)",
        "load % (all threads)",
        "p50 %",
        "p99 %",
        "p99.9 %",
        "max %",
        "max wall %",
        "late",
        "model %",
        "model ratio",
        "sys load",
    ]);
    for c in cells {
        let ms = 1000.0 * c.latency_frames as f64 / f64::from(RATE_HZ);
        let mut row = vec![
            format!("{} s", c.ir_seconds),
            c.block_frames.to_string(),
            format!("`{}`", c.mode),
            format!("{} / {ms:.2}", c.latency_frames),
        ];
        match &c.result {
            Ok(m) => {
                row.extend([
                    format!("{:.2}", m.mean_load_pct),
                    format!("{:.2}", m.p50_pct),
                    format!("{:.2}", m.p99_pct),
                    format!("{:.2}", m.p999_pct),
                    format!("{:.1}", m.max_pct),
                    format!("{:.1}", m.max_wall_pct),
                    m.late.to_string(),
                    format!("{:.2}", c.predicted_pct),
                    format!("{:.2}", m.mean_load_pct / c.predicted_pct),
                    format!("{:.1}", c.sys_load),
                ]);
            }
            Err(why) => {
                row.push(why.clone());
                row.extend((0..6).map(|_| "-".to_string()));
                row.push(format!("{:.0}", c.predicted_pct));
                row.push("-".to_string());
                row.push(format!("{:.1}", c.sys_load));
            }
        }
        t.row(row);
    }
    println!("Callback times are thread-CPU time of one `process()` call in % of the deadline (block / 48 kHz);");
    println!("\"max wall\" is the worst wall-clock time. \"model %\" is the calibrated cost model's predicted load.");
    let loads: Vec<f64> = cells.iter().map(|c| c.sys_load).filter(|v| v.is_finite()).collect();
    let (lo, hi) = loads.iter().fold((f64::INFINITY, 0.0f64), |(a, b), &v| (a.min(v), b.max(v)));
    println!(
        "\"sys load\" is the 1-minute load average of the machine at the end of the cell (this bench alone adds \
         about 1); it ranged {lo:.1} to {hi:.1} during this run.\n"
    );
    println!("{}", t.render());
}

/// `head 64; 64x15 512x14 ...`: the plan in one cell.
fn plan_summary(plan: &Plan) -> String {
    let levels: Vec<String> = plan.levels.iter().map(|l| format!("{}x{}", l.block_frames, l.partitions)).collect();
    format!("head {}; {}", plan.head_frames, levels.join(" "))
}

/// The S1 rows (10 s stereo IR, block 64) against DESIGN.md targets T1 to T4.
fn print_s1(cells: &[Cell]) {
    let s1: Vec<&Cell> = cells.iter().filter(|c| c.ir_seconds == 10.0 && c.block_frames == 64).collect();
    if s1.is_empty() {
        println!("S1 (10 s IR, block 64) is not part of this run.\n");
        return;
    }
    let mut t = Table::new(&[
        "mode",
        "plan (head; N x P per level)",
        "audio s",
        "load %",
        "p99.9 %",
        "max %",
        "max wall %",
        "heaviest phase median %",
        "late",
        "targets",
    ]);
    for c in s1 {
        let Ok(m) = &c.result else {
            let mut row = vec![format!("`{}`", c.mode), plan_summary(&c.plan)];
            row.extend((0..7).map(|_| "-".to_string()));
            row.push("skipped".into());
            t.row(row);
            continue;
        };
        let verdict = |ok: bool| if ok { "ok" } else { "MISSED" };
        // DESIGN.md section 5: T1-T3 are the targets of the worker schedule, T4 of the single-thread
        // (sliced) schedule; uniform and all-sync plans are the baselines they improve on.
        let targets = match c.mode {
            "optimal-workers" | "zero-workers" => format!(
                "T1 load <= 1%: {}, T2 p99.9 <= 3%: {}, max <= 15%: {}, T3 late = 0: {}",
                verdict(m.mean_load_pct <= 1.0),
                verdict(m.p999_pct <= 3.0),
                verdict(m.max_pct <= 15.0),
                verdict(m.late == 0)
            ),
            "optimal-sliced" | "zero-sliced" => {
                format!(
                    "T4 load <= 1.5%: {}, max <= 10%: {}",
                    verdict(m.mean_load_pct <= 1.5),
                    verdict(m.max_pct <= 10.0)
                )
            }
            _ => "baseline (no target)".to_string(),
        };
        t.row(vec![
            format!("`{}`", c.mode),
            plan_summary(&c.plan),
            format!("{:.1}", m.audio_seconds),
            format!("{:.2}", m.mean_load_pct),
            format!("{:.2}", m.p999_pct),
            format!("{:.1}", m.max_pct),
            format!("{:.1}", m.max_wall_pct),
            format!("{:.1}", m.worst_phase_median_pct),
            m.late.to_string(),
            targets,
        ]);
    }
    println!("## S1: 10 s stereo IR, block 64 (deadline 1.333 ms)\n");
    println!(
        "\"heaviest phase median\": callbacks at the same position in the largest level's period do the \
         same level work; the worst of their median times shows how evenly the schedule spreads it (the \
         machine's rare noise drops out of a median).\n"
    );
    println!("{}", t.render());
}

fn write_csv(cells: &[Cell]) -> std::path::PathBuf {
    let mut csv = Csv::new(
        out_dir().join("latency.csv"),
        &[
            "ir_frames",
            "block_frames",
            "mode",
            "latency_frames",
            "mean_load_pct",
            "p50_pct",
            "p99_pct",
            "p999_pct",
            "max_pct",
            "late",
            "model_ratio",
            "process_load_pct",
            "worst_phase_median_pct",
        ],
    );
    // Skipped cells have no measurement and are left out (the Markdown table lists them with the reason).
    for c in cells {
        if let Ok(m) = &c.result {
            csv.row(&[
                c.ir_frames.to_string(),
                c.block_frames.to_string(),
                c.mode.to_string(),
                c.latency_frames.to_string(),
                format!("{:.4}", m.mean_load_pct),
                format!("{:.4}", m.p50_pct),
                format!("{:.4}", m.p99_pct),
                format!("{:.4}", m.p999_pct),
                format!("{:.4}", m.max_pct),
                m.late.to_string(),
                format!("{:.4}", m.mean_load_pct / c.predicted_pct),
                format!("{:.4}", m.process_load_pct),
                format!("{:.4}", m.worst_phase_median_pct),
            ]);
        }
    }
    csv.write()
}

/// Two rows of panels, one column per IR length: mean load (top) and worst callback (bottom, with the
/// deadline) against block size, one line per mode.
fn plot(
    cells: &[Cell],
    blocks: &[usize],
    ir_lengths: &[f64],
) -> Result<std::path::PathBuf, Box<dyn std::error::Error>> {
    let path = out_dir().join("latency.svg");
    let colors = [RED, BLUE, GREEN, MAGENTA, CYAN, RGBColor(230, 140, 0)];
    let deadline_color = RGBColor(90, 90, 90);
    let width = (560 * ir_lengths.len() as u32).max(1100);
    let root = SVGBackend::new(path.as_path(), (width, 900)).into_drawing_area();
    root.fill(&WHITE)?;
    let root =
        root.titled("Partita: paced load and worst callback against block size (stereo, 48 kHz)", ("sans-serif", 22))?;
    let panels = root.split_evenly((2, ir_lengths.len()));
    // x is log2(block): evenly spaced powers of two, labelled with the block itself.
    let log2 = |b: usize| (b as f64).log2();
    let x_lo = log2(*blocks.first().unwrap_or(&16)) - 0.3;
    let x_hi = log2(*blocks.last().unwrap_or(&1024)) + 0.3;
    for (i, panel) in panels.iter().enumerate() {
        let (row, col) = (i / ir_lengths.len(), i % ir_lengths.len());
        let ir_seconds = ir_lengths[col];
        let (caption, y_desc) = if row == 0 {
            (format!("{ir_seconds} s IR: mean load, all threads"), "% of one core")
        } else {
            (format!("{ir_seconds} s IR: worst callback (thread CPU)"), "% of the deadline")
        };
        let mut chart = ChartBuilder::on(panel)
            .caption(caption, ("sans-serif", 16))
            .margin(12)
            .x_label_area_size(36)
            .y_label_area_size(56)
            .build_cartesian_2d(x_lo..x_hi, (0.01f64..1000.0).log_scale())?;
        chart
            .configure_mesh()
            .x_desc("block (frames)")
            .y_desc(y_desc)
            .x_labels(blocks.len() + 2)
            .x_label_formatter(&|v| {
                if (v - v.round()).abs() < 1e-6 {
                    format!("{}", 2f64.powf(v.round()) as usize)
                } else {
                    String::new()
                }
            })
            .y_label_formatter(&|v| format!("{v}"))
            .draw()?;
        for (mode, color) in MODES.iter().zip(colors) {
            let points: Vec<(f64, f64)> = cells
                .iter()
                .filter(|c| c.ir_seconds == ir_seconds && c.mode == *mode)
                .filter_map(|c| c.result.as_ref().ok().map(|m| (c, m)))
                .map(|(c, m)| {
                    let v = if row == 0 { m.mean_load_pct } else { m.max_pct };
                    (log2(c.block_frames), v.clamp(0.011, 999.0))
                })
                .collect();
            chart
                .draw_series(LineSeries::new(points.clone(), color.stroke_width(2)))?
                .label(*mode)
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], color.stroke_width(2)));
            chart.draw_series(points.into_iter().map(|p| Circle::new(p, 3, color.filled())))?;
        }
        if row == 1 {
            chart
                .draw_series(DashedLineSeries::new(
                    vec![(x_lo, 100.0), (x_hi, 100.0)],
                    8,
                    5,
                    deadline_color.stroke_width(2),
                ))?
                .label("deadline (100%)")
                .legend(move |(x, y)| PathElement::new(vec![(x, y), (x + 20, y)], deadline_color.stroke_width(2)));
        }
        chart
            .configure_series_labels()
            .position(SeriesLabelPosition::UpperRight)
            .background_style(WHITE.mix(0.85))
            .border_style(BLACK)
            .draw()?;
    }
    root.present()?;
    Ok(path.clone())
}
