//! The real-time promise, measured (docs/DESIGN.md section 5, R1-R4): the automatic schedule against the
//! single-schedule plans, long host calls, and the worst-call model against paced runs.
//!
//! Every run is paced on the real deadline grid (`partita::measure`, sleeping between calls as a sound card
//! wakes the audio thread), with the engine's default options (default lateness policy), plans from the
//! calibrated cost model of this machine (`partita::calibration::machine_costs`). The figures:
//! - **mean load**: audio-thread CPU inside `process()` plus the workers' job CPU, % of one core;
//! - **heaviest phase**: the callbacks are grouped by their position in the largest level's period, each
//!   position's median is taken, and the largest of those is reported in % of the call's deadline: the
//!   callback the plan makes heavy every period, without the machine's one-off spikes;
//! - **predicted**: `CostModel::heaviest_call_pct` for the same plan, host period and sample rate.
//!
//! Part 1, auto against single schedules: S1 (10 s stereo IR at block 64), the same at blocks 32 and 256,
//! and a 20 s true-stereo IR (4 paths) at block 128, with a 20 s plain stereo IR at block 128 beside it for
//! T5 (true stereo load / stereo load, per schedule choice, <= 1.8x); all-sync, all-sliced, all-workers
//! and `auto`, 20 s of audio each, interleaved. The verdict per cell: `auto` has 0 late results, a heaviest phase within the
//! default headroom (8%), and a mean load at most 1.25x the lowest mean load of the single-schedule plans
//! whose heaviest phase is within the headroom; its ratio to all-sync is printed beside it.
//!
//! Part 2, long host calls: calls of 1024 frames at block 64 (a 10 s stereo IR), `workers` and `auto`
//! planned for that host period, paced, output compared with the same plan run with every level `sync`
//! (timing-free): 0 late results and max |difference| <= 1e-6 of the reference peak.
//!
//! Part 3, the model against the machine: blocks 32, 64 and 256; stereo IRs of 0.5, 2 and 10 s; `sync`,
//! `sliced`, `workers` and `auto`; three interleaved rounds per cell, the median of the rounds' heaviest
//! phases against the prediction: the verdict asks 1 <= predicted / measured <= 3 in every cell.
//!
//! Full run (`cargo bench --bench deadline`): about 20 minutes on a 2-core machine. Quick mode (`cargo
//! test --benches`, or `PARTITA_BENCH_QUICK=1`): one cell per part for 0.3 s, no verdicts.
//! `PARTITA_DEADLINE_PARTS=1,3` runs a subset of the parts.
//!
//! Outputs: Markdown tables and verdicts on stdout, `target/partita-bench/deadline.csv`.

mod common;

use std::time::Instant;

use common::{load_average, machine_line, median, out_dir, quick_mode, stereo_ir, Csv, Table, RATE_HZ};
use partita::measure::{drive, run, Pacing, RunStats};
use partita_core::synth::decaying_noise;
use partita_core::{
    CostModel, Engine, EngineOptions, ImpulseResponse, Kernel, Plan, Planner, Routing, Schedule, Shape,
    DEFAULT_HEADROOM_PCT,
};

/// The schedule choices compared: one schedule for every level above the block, or the planner's.
#[derive(Debug, Clone, Copy, PartialEq)]
enum Choice {
    Fixed(Schedule),
    Auto,
}

impl Choice {
    const ALL: [Choice; 4] = [
        Choice::Fixed(Schedule::Sync),
        Choice::Fixed(Schedule::Sliced),
        Choice::Fixed(Schedule::Workers),
        Choice::Auto,
    ];

    fn name(self) -> &'static str {
        match self {
            Choice::Fixed(s) => s.as_str(),
            Choice::Auto => "auto",
        }
    }
}

/// What a case is: an IR, a routing, a block and a host period.
struct Case {
    label: String,
    ir: ImpulseResponse,
    routing: Routing,
    block: usize,
    host: usize,
}

impl Case {
    fn shape(&self) -> Shape {
        Shape::of(&self.routing.resolve(self.ir.channels()).expect("the case's routing fits its IR"))
    }

    /// The plan for `choice`: the default planner (automatic, default headroom) with the machine's costs,
    /// the case's shape, host period and rate, or the same with one schedule fixed.
    fn plan(&self, choice: Choice, model: &CostModel) -> Plan {
        let planner = Planner::new()
            .block_frames(self.block)
            .cost_model(model.clone())
            .shape(self.shape())
            .sample_rate_hz(RATE_HZ)
            .host_period_frames(self.host);
        let planner = match choice {
            Choice::Fixed(s) => planner.schedule(s),
            Choice::Auto => planner,
        };
        planner.plan(self.ir.frames()).expect("the planner accepts every bench case")
    }

    fn engine(&self, plan: &Plan) -> Engine {
        let options = EngineOptions { host_period_frames: Some(self.host), ..EngineOptions::new(self.host) };
        Engine::with_options(plan, &self.ir, self.routing, options).expect("engine for a valid plan")
    }

    fn predicted(&self, plan: &Plan, model: &CostModel) -> f64 {
        let shape = self.shape();
        model.heaviest_call_pct(plan, shape, shape.groups(), f64::from(RATE_HZ), self.host)
    }
}

/// A true-stereo (LL LR RL RR) decaying-noise IR of `seconds`.
fn true_stereo_ir(seconds: f64, seed: u64) -> ImpulseResponse {
    let frames = (seconds * f64::from(RATE_HZ)).round() as usize;
    let channels = (0..4).map(|c| decaying_noise(frames, 0.8 * frames as f64, seed + c)).collect();
    ImpulseResponse::new(channels, RATE_HZ).expect("synthetic taps are finite and non-empty")
}

/// Seconds of audio for a model-grid run: at least 3 s and ten periods of the plan's largest level, so every
/// position's median is over ten callbacks or more (with fewer, the largest of hundreds of position
/// medians reads high on a noisy machine).
fn grid_seconds(quick: bool, plan: &Plan) -> f64 {
    if quick {
        0.3
    } else {
        (10.0 * plan.max_level_frames() as f64 / f64::from(RATE_HZ)).max(3.0)
    }
}

/// A short unpaced run first warms the engine up (first touches, the workers' first jobs), as a stream's
/// first second would.
fn paced(engine: &mut Engine, seconds: f64, host: usize) -> RunStats {
    run(engine, RATE_HZ, 0.1, host, Pacing::None);
    run(engine, RATE_HZ, seconds, host, Pacing::Sleep)
}

fn parts_env() -> Vec<u32> {
    match std::env::var("PARTITA_DEADLINE_PARTS") {
        Ok(v) if !v.trim().is_empty() => v
            .split(',')
            .map(|x| x.trim().parse().unwrap_or_else(|_| panic!("PARTITA_DEADLINE_PARTS: cannot parse `{x}`")))
            .collect(),
        _ => vec![1, 2, 3],
    }
}

fn main() {
    let quick = quick_mode();
    let parts = parts_env();
    let model = CostModel::Measured(partita::calibration::machine_costs(Kernel::detect(), false));
    println!(
        "# Deadline bench{}: paced, default options, calibrated model\n\n{}\n",
        if quick { " (quick mode, no verdicts)" } else { "" },
        machine_line()
    );
    let mut csv = Csv::new(
        out_dir().join("deadline.csv"),
        &[
            "part",
            "case",
            "schedule",
            "round",
            "levels",
            "seconds",
            "mean_load_pct",
            "heaviest_phase_pct",
            "predicted_heaviest_pct",
            "late",
            "max_error_over_peak",
            "sys_load",
        ],
    );
    let started = Instant::now();
    let mut failed = Vec::new();
    if parts.contains(&1) {
        failed.extend(part1(quick, &model, &mut csv));
    }
    if parts.contains(&2) {
        failed.extend(part2(quick, &model, &mut csv));
    }
    if parts.contains(&3) {
        failed.extend(part3(quick, &model, &mut csv));
    }
    println!("wrote {}", csv.write().display());
    eprintln!("deadline bench: {:.0} s", started.elapsed().as_secs_f64());
    if !quick {
        if failed.is_empty() {
            println!("\nEvery verdict passed.");
        } else {
            println!("\n{} verdict(s) failed:", failed.len());
            for f in &failed {
                println!("- {f}");
            }
        }
    }
}

fn levels_text(plan: &Plan) -> String {
    plan.levels
        .iter()
        .map(|l| format!("{}x{}{}", l.block_frames, l.partitions, &l.schedule.as_str()[..2]))
        .collect::<Vec<_>>()
        .join(" ")
}

/// Part 1: auto against the single-schedule plans.
fn part1(quick: bool, model: &CostModel, csv: &mut Csv) -> Vec<String> {
    let seconds = if quick { 0.3 } else { 20.0 };
    let stereo = |s: f64, block: usize| Case {
        label: format!("{s} s stereo B {block}"),
        ir: stereo_ir(s, 11),
        routing: Routing::Stereo,
        block,
        host: block,
    };
    let mut cases = vec![stereo(10.0, 64)];
    if !quick {
        cases.push(stereo(10.0, 32));
        cases.push(stereo(10.0, 256));
        cases.push(Case {
            label: "20 s true stereo B 128".into(),
            ir: true_stereo_ir(20.0, 21),
            routing: Routing::TrueStereo,
            block: 128,
            host: 128,
        });
        // Plain stereo of the same length and block, for T5 (true stereo load / stereo load).
        cases.push(stereo(20.0, 128));
    }
    println!("## Part 1: auto against single schedules ({seconds} s of audio per run)\n");
    let mut table =
        Table::new(&["case", "schedule", "levels", "mean load %", "heaviest phase %", "predicted %", "late"]);
    let mut failed = Vec::new();
    let mut verdicts = Vec::new();
    let mut loads: Vec<(String, Choice, f64)> = Vec::new();
    for case in &cases {
        let mut rows: Vec<(Choice, RunStats)> = Vec::new();
        for choice in Choice::ALL {
            let plan = case.plan(choice, model);
            let mut engine = case.engine(&plan);
            let m = paced(&mut engine, seconds, case.host);
            let predicted = case.predicted(&plan, model);
            eprintln!(
                "  {:<24} {:<8} load {:6.2}%  heaviest phase {:6.1}% (predicted {:6.1}%)  late {}",
                case.label,
                choice.name(),
                m.mean_load_pct,
                m.worst_phase_median_pct,
                predicted,
                m.late
            );
            table.row(vec![
                case.label.clone(),
                choice.name().into(),
                levels_text(&plan),
                format!("{:.2}", m.mean_load_pct),
                format!("{:.1}", m.worst_phase_median_pct),
                format!("{predicted:.1}"),
                m.late.to_string(),
            ]);
            csv.row(&[
                "1".into(),
                case.label.clone(),
                choice.name().into(),
                "1".into(),
                levels_text(&plan),
                format!("{seconds}"),
                format!("{:.4}", m.mean_load_pct),
                format!("{:.3}", m.worst_phase_median_pct),
                format!("{predicted:.3}"),
                m.late.to_string(),
                String::new(),
                format!("{:.2}", load_average()),
            ]);
            loads.push((case.label.clone(), choice, m.mean_load_pct));
            rows.push((choice, m));
        }
        let auto = &rows.iter().find(|(c, _)| *c == Choice::Auto).expect("auto was run").1;
        let sync = &rows[0].1;
        let best_fitting = rows
            .iter()
            .filter(|(c, m)| *c != Choice::Auto && m.worst_phase_median_pct <= DEFAULT_HEADROOM_PCT)
            .map(|(c, m)| (c.name(), m.mean_load_pct))
            .min_by(|a, b| a.1.total_cmp(&b.1));
        let ratio = best_fitting.map(|(_, l)| auto.mean_load_pct / l);
        verdicts.push(format!(
            "- {}: auto {} late, heaviest phase {:.1}% (<= {DEFAULT_HEADROOM_PCT}%), mean load {:.2}%: {} the \
             lightest single plan within the headroom{}; {:.2}x all-sync's {:.2}%",
            case.label,
            auto.late,
            auto.worst_phase_median_pct,
            auto.mean_load_pct,
            ratio.map_or("no single plan fits, so nothing to compare with".into(), |r| format!("{r:.2}x")),
            best_fitting.map_or(String::new(), |(n, l)| format!(" ({n}, {l:.2}%)")),
            auto.mean_load_pct / sync.mean_load_pct,
            sync.mean_load_pct
        ));
        if !quick {
            if auto.late != 0 {
                failed.push(format!("part 1, {}: auto had {} late results", case.label, auto.late));
            }
            if auto.worst_phase_median_pct > DEFAULT_HEADROOM_PCT {
                failed.push(format!(
                    "part 1, {}: auto's heaviest phase {:.1}% is over the {DEFAULT_HEADROOM_PCT}% headroom",
                    case.label, auto.worst_phase_median_pct
                ));
            }
            if ratio.is_some_and(|r| r > 1.25) {
                failed.push(format!(
                    "part 1, {}: auto's mean load is {:.2}x the lightest fitting single plan's (limit 1.25x)",
                    case.label,
                    ratio.unwrap_or_default()
                ));
            }
        }
    }
    println!("{}", table.render());
    for v in verdicts {
        println!("{v}");
    }
    // T5: true stereo (4 paths) against plain stereo (2 paths), same length, block and schedule choice.
    let load = |label: &str, choice: Choice| loads.iter().find(|(l, c, _)| l == label && *c == choice).map(|x| x.2);
    for choice in Choice::ALL {
        if let (Some(ts), Some(st)) = (load("20 s true stereo B 128", choice), load("20 s stereo B 128", choice)) {
            println!(
                "- T5, {}: true stereo {ts:.2}% / stereo {st:.2}% = {:.2}x (target <= 1.8x)",
                choice.name(),
                ts / st
            );
            if !quick && ts / st > 1.8 {
                failed.push(format!("T5, {}: true stereo / stereo load {:.2}x", choice.name(), ts / st));
            }
        }
    }
    println!();
    failed
}

/// Part 2: host calls of 1024 frames at block 64.
fn part2(quick: bool, model: &CostModel, csv: &mut Csv) -> Vec<String> {
    let seconds = if quick { 0.3 } else { 10.0 };
    let case = Case {
        label: "10 s stereo B 64 calls of 1024".into(),
        ir: stereo_ir(10.0, 31),
        routing: Routing::Stereo,
        block: 64,
        host: 1024,
    };
    println!("## Part 2: host calls of {} frames at block {} ({seconds} s of audio per run)\n", case.host, case.block);
    let mut table = Table::new(&["schedule", "levels", "late", "max error / peak"]);
    let mut failed = Vec::new();
    for choice in [Choice::Fixed(Schedule::Workers), Choice::Auto] {
        let plan = case.plan(choice, model);
        let calls = ((seconds * f64::from(RATE_HZ)) / case.host as f64).ceil() as usize;
        let record = |engine: &mut Engine, pacing: Pacing| {
            let mut out: Vec<Vec<f32>> = vec![Vec::with_capacity(calls * case.host); engine.outputs()];
            drive(engine, RATE_HZ, calls, case.host, pacing, |_, _, y| {
                for (o, c) in out.iter_mut().zip(y) {
                    o.extend_from_slice(c);
                }
                true
            });
            out
        };
        let mut engine = case.engine(&plan);
        let monitor = engine.monitor();
        let got = record(&mut engine, Pacing::Sleep);
        let late = monitor.late_results();
        let mut sync_plan = plan.clone();
        for l in &mut sync_plan.levels {
            l.schedule = Schedule::Sync;
        }
        let want = record(&mut case.engine(&sync_plan), Pacing::None);
        let peak = want.iter().flatten().fold(0.0f32, |m, v| m.max(v.abs()));
        let err = got.iter().flatten().zip(want.iter().flatten()).fold(0.0f32, |m, (a, b)| m.max((a - b).abs()));
        let rel = f64::from(err) / f64::from(peak);
        eprintln!("  {:<8} late {late}  max error / peak {rel:.2e}", choice.name());
        table.row(vec![choice.name().into(), levels_text(&plan), late.to_string(), format!("{rel:.1e}")]);
        csv.row(&[
            "2".into(),
            case.label.clone(),
            choice.name().into(),
            "1".into(),
            levels_text(&plan),
            format!("{seconds}"),
            String::new(),
            String::new(),
            String::new(),
            late.to_string(),
            format!("{rel:.3e}"),
            format!("{:.2}", load_average()),
        ]);
        if !quick && (late != 0 || rel > 1e-6) {
            failed.push(format!("part 2, {}: {late} late results, max error {rel:.2e} of the peak", choice.name()));
        }
    }
    println!("{}\n", table.render());
    failed
}

/// Part 3: predicted heaviest call against the measured heaviest phase.
fn part3(quick: bool, model: &CostModel, csv: &mut Csv) -> Vec<String> {
    let (blocks, irs, rounds): (&[usize], &[f64], usize) =
        if quick { (&[64], &[0.5], 1) } else { (&[32, 64, 256], &[0.5, 2.0, 10.0], 3) };
    println!("## Part 3: predicted heaviest call against the measured heaviest phase ({rounds} rounds, median)\n");
    let mut table = Table::new(&[
        "block",
        "IR",
        "schedule",
        "levels",
        "predicted %",
        "measured % (rounds)",
        "predicted / measured",
    ]);
    let mut failed = Vec::new();
    let mut ratios = Vec::new();
    for &ir_seconds in irs {
        let ir = stereo_ir(ir_seconds, 41);
        for &block in blocks {
            let case = Case {
                label: format!("{ir_seconds} s B {block}"),
                ir: ir.clone(),
                routing: Routing::Stereo,
                block,
                host: block,
            };
            let plans: Vec<(Choice, Plan)> = Choice::ALL.iter().map(|&c| (c, case.plan(c, model))).collect();
            let mut measured: Vec<Vec<f64>> = vec![Vec::new(); plans.len()];
            for round in 0..rounds {
                for (k, (choice, plan)) in plans.iter().enumerate() {
                    let mut engine = case.engine(plan);
                    let m = paced(&mut engine, grid_seconds(quick, plan), block);
                    measured[k].push(m.worst_phase_median_pct);
                    csv.row(&[
                        "3".into(),
                        case.label.clone(),
                        choice.name().into(),
                        (round + 1).to_string(),
                        levels_text(plan),
                        format!("{:.2}", m.audio_seconds),
                        format!("{:.4}", m.mean_load_pct),
                        format!("{:.3}", m.worst_phase_median_pct),
                        format!("{:.3}", case.predicted(plan, model)),
                        m.late.to_string(),
                        String::new(),
                        format!("{:.2}", load_average()),
                    ]);
                }
            }
            for (k, (choice, plan)) in plans.iter().enumerate() {
                let predicted = case.predicted(plan, model);
                let m = median(&measured[k]);
                let ratio = predicted / m;
                ratios.push(ratio);
                eprintln!(
                    "  {:<14} {:<8} predicted {predicted:6.2}%  measured {m:6.2}%  ratio {ratio:.2}",
                    case.label,
                    choice.name()
                );
                table.row(vec![
                    block.to_string(),
                    format!("{ir_seconds} s"),
                    choice.name().into(),
                    levels_text(plan),
                    format!("{predicted:.2}"),
                    format!(
                        "{m:.2} ({})",
                        measured[k].iter().map(|v| format!("{v:.2}")).collect::<Vec<_>>().join(", ")
                    ),
                    format!("{ratio:.2}"),
                ]);
                if !quick && !(1.0..=3.0).contains(&ratio) {
                    failed.push(format!("part 3, {} {}: predicted / measured = {ratio:.2}", case.label, choice.name()));
                }
            }
        }
    }
    println!("{}", table.render());
    let lo = ratios.iter().copied().fold(f64::INFINITY, f64::min);
    let hi = ratios.iter().copied().fold(0.0, f64::max);
    println!("predicted / measured over the grid: {lo:.2} to {hi:.2}\n");
    failed
}
