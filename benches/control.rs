//! The control side under load: IR preparation time (DESIGN.md T7), callback time while a swap is
//! crossfaded against steady state, and load with input decaying into subnormals (T9).
//!
//! Scenario S1 (DESIGN.md section 5): a 10 s stereo decaying-noise IR (2 x 480,000 taps, L->L, R->R),
//! 48 kHz, block 64, for the schedules `sync`, `workers` and `sliced`, each with the optimal plan the
//! latency bench makes (the optimal planner with this machine's calibrated cost model, stereo shape).
//!
//! 1. **T7 prepare**: wall-clock (and thread-CPU) time of `Control::prepare` for a second S1 IR, median
//!    and max over repeated runs (the first run, on fresh memory, is kept). Beside it, the same
//!    preparation timed from inside (`Control::prepare_timed`, core's `test-hooks` feature) splits the
//!    time per level slot into FFT planning (twiddles), allocation with prefault, and the partition FFTs,
//!    so a miss can be attributed.
//! 2. **Crossfade**: a paced run (one host call of one block per deadline on the real grid, sleeping in
//!    between, through `partita::measure::drive`) of a few seconds steady, then a swap with a 1 s fade,
//!    repeated (A -> B -> A ...: the retired IR is swapped in again, so nothing is freed or prepared during
//!    the run). Every callback's thread-CPU and wall time is recorded with the engine's `fade_state` after
//!    it (one block boundary per call, so that state is what the call's boundary computed): `Pending` and
//!    `Crossfading` callbacks compute both IRs. Worker CPU (`Monitor::worker_cpu_seconds`, credited when a
//!    job completes) is reported per second of audio in each phase.
//! 3. **T9 denormals**: unpaced load (audio-thread CPU inside `process()` plus worker job CPU, over audio
//!    time) with an input that decays exponentially from full scale, crosses 1e-38 early and then stays
//!    in the subnormal range, against seeded noise of the same length, on fresh engines of the same kind,
//!    interleaved (normal, subnormal, normal, ...). Worker engines use `Lateness::Wait` so that no job is
//!    skipped when calls come faster than real time (the audio thread's time then includes waiting).
//!    A raw multiply-add loop with and without subnormal operands, on the bench thread (no flush-to-zero),
//!    shows how much this CPU penalises subnormals at all.
//!
//! Full run (`cargo bench --bench control`): about 75 s on a 2-core machine, after the build. Quick mode
//! (no `--bench` argument, as under `cargo test --benches`, or `PARTITA_BENCH_QUICK=1`): a 0.5 s IR, short
//! phases, fewer runs, same outputs, seconds.
//!
//! Outputs: Markdown tables on stdout and `target/partita-bench/control.csv` (long format: test,
//! schedule, phase, metric, value).

mod common;

use std::hint::black_box;
use std::time::Instant;

use partita::measure;

use common::{load_average, machine_line, median, out_dir, quick_mode, stereo_ir, Csv, Table, RATE_HZ};
use partita_core::synth::Noise;
use partita_core::{
    thread_cpu_seconds, CostModel, Engine, EngineOptions, Event, FadeState, ImpulseResponse, Kernel, Lateness, Plan,
    PlanMode, Planner, PreparedIr, Routing, Schedule, Shape, SwapReport,
};

const SCHEDULES: [Schedule; 3] = [Schedule::Sync, Schedule::Workers, Schedule::Sliced];
const BLOCK_FRAMES: usize = 64;
const T7_TARGET_MS: f64 = 20.0;
const CROSSFADE_TARGET_RATIO: f64 = 2.0;
const T9_TARGET_RATIO: f64 = 1.1;
/// Smallest positive normal f32: below it lie the subnormals.
const SUBNORMAL_BELOW: f32 = f32::MIN_POSITIVE;

/// Durations and repetitions of one run of the bench.
struct Setup {
    ir_seconds: f64,
    prepare_runs: usize,
    steady_seconds: f64,
    fade_frames: usize,
    swaps: usize,
    /// A swap that has not come back to `Steady` after this much audio is reported as stuck.
    swap_timeout_seconds: f64,
    denormal_seconds: f64,
    /// Where the decaying input crosses 1e-38.
    denormal_cross_seconds: f64,
    denormal_pairs: usize,
}

impl Setup {
    fn new(quick: bool) -> Self {
        if quick {
            Self {
                ir_seconds: 0.5,
                prepare_runs: 3,
                steady_seconds: 0.3,
                fade_frames: 4_800,
                swaps: 1,
                swap_timeout_seconds: 3.0,
                denormal_seconds: 1.0,
                denormal_cross_seconds: 0.1,
                denormal_pairs: 2,
            }
        } else {
            Self {
                ir_seconds: 10.0,
                prepare_runs: 7,
                steady_seconds: 4.0,
                fade_frames: RATE_HZ as usize, // 1 s
                swaps: 3,
                swap_timeout_seconds: 15.0,
                denormal_seconds: 20.0,
                denormal_cross_seconds: 1.0,
                denormal_pairs: 5,
            }
        }
    }
}

/// The optimal plan of the latency bench's `optimal-<schedule>` mode.
fn plan_for(schedule: Schedule, model: &CostModel, shape: Shape, ir_frames: usize) -> Plan {
    Planner::new()
        .block_frames(BLOCK_FRAMES)
        .mode(PlanMode::Optimal)
        .schedule(schedule)
        .cost_model(model.clone())
        .shape(shape)
        .plan(ir_frames)
        .expect("the planner accepts S1")
}

/// `64x15 512x14 ...`: the plan's levels in one cell.
fn plan_summary(plan: &Plan) -> String {
    let levels: Vec<String> = plan.levels.iter().map(|l| format!("{}x{}", l.block_frames, l.partitions)).collect();
    format!("head {}; {}", plan.head_frames, levels.join(" "))
}

fn ms(seconds: f64) -> f64 {
    1e3 * seconds
}

/// Nearest-rank quantile of an ascending sample (the convention of `partita::measure`).
fn quantile(sorted: &[f64], q: f64) -> f64 {
    if sorted.is_empty() {
        return f64::NAN;
    }
    sorted[((sorted.len() as f64 - 1.0) * q).round() as usize]
}

fn verdict(ok: bool) -> &'static str {
    if ok {
        "ok"
    } else {
        "MISSED"
    }
}

fn main() {
    let quick = quick_mode();
    let setup = Setup::new(quick);
    let kernel = Kernel::detect();
    let model = CostModel::Measured(partita::calibration::machine_costs(kernel, false));
    let routing = Routing::Stereo;
    let shape = Shape::of(&routing.resolve(2).expect("stereo routing takes a 2-channel IR"));
    let ir_a = stereo_ir(setup.ir_seconds, 1);
    let ir_b = stereo_ir(setup.ir_seconds, 11);
    println!(
        "# Control: IR swap and denormals{}: {} s stereo IR ({} taps per channel), L->L R->R, 48 kHz, block {}\n\n{}\n",
        if quick { " (quick mode)" } else { "" },
        setup.ir_seconds,
        ir_a.frames(),
        BLOCK_FRAMES,
        machine_line()
    );
    println!("System 1-minute load average at the start: {:.2}\n", load_average());
    let started = Instant::now();
    let mut csv = Csv::new(out_dir().join("control.csv"), &["test", "schedule", "phase", "metric", "value"]);

    let plans: Vec<(Schedule, Plan)> =
        SCHEDULES.iter().map(|&s| (s, plan_for(s, &model, shape, ir_a.frames()))).collect();
    let mut t = Table::new(&["schedule", "plan (head; N x P per level)", "latency frames", "model load %"]);
    for (s, plan) in &plans {
        t.row(vec![
            format!("`{s}`"),
            plan_summary(plan),
            plan.latency_frames().to_string(),
            format!("{:.2}", model.load_pct(plan, shape, f64::from(RATE_HZ))),
        ]);
    }
    println!("## Plans\n\n{}", t.render());

    eprintln!("control bench: T7 prepare");
    let prepare: Vec<PrepareResult> = plans.iter().map(|(s, p)| bench_prepare(*s, p, &ir_a, &ir_b, &setup)).collect();
    report_prepare(&prepare, &plans, &mut csv);

    eprintln!("control bench: paced crossfade runs");
    let fades: Vec<FadeRun> = plans.iter().map(|(s, p)| bench_crossfade(*s, p, &ir_a, &ir_b, &setup)).collect();
    report_crossfade(&fades, &setup, &mut csv);

    eprintln!("control bench: T9 denormals");
    let sensitivity = subnormal_penalty();
    let denormals: Vec<DenormalResult> = plans.iter().map(|(s, p)| bench_denormals(*s, p, &ir_a, &setup)).collect();
    report_denormals(&denormals, sensitivity, &setup, &mut csv);

    println!(
        "Bench time {:.0} s; system 1-minute load average at the end: {:.2} (this bench adds about 1).\n",
        started.elapsed().as_secs_f64(),
        load_average()
    );
    println!("wrote {}", csv.write().display());
}

// ---------------------------------------------------------------------------------------------------
// 1. T7: prepare time

struct LevelSplit {
    n: usize,
    partitions: usize,
    channels: usize,
    plan_s: f64,
    alloc_s: f64,
    fft_s: f64,
}

struct PrepareResult {
    schedule: Schedule,
    /// Wall and thread-CPU seconds of each `Control::prepare` call, in run order.
    wall_s: Vec<f64>,
    cpu_s: Vec<f64>,
    prepared_bytes: usize,
    /// Split per level slot, from the median run of the timed preparation.
    levels: Vec<LevelSplit>,
    timed_total_s: Vec<f64>,
}

fn bench_prepare(
    schedule: Schedule,
    plan: &Plan,
    ir_a: &ImpulseResponse,
    ir_b: &ImpulseResponse,
    setup: &Setup,
) -> PrepareResult {
    let mut engine = Engine::new(plan, ir_a, Routing::Stereo, BLOCK_FRAMES).expect("engine for a valid plan");
    let control = engine.control().expect("first call");
    let (mut wall_s, mut cpu_s) = (Vec::new(), Vec::new());
    let mut timed: Vec<(f64, Vec<LevelSplit>)> = Vec::new();
    let mut prepared_bytes = 0;
    // The plain prepare and the timed one alternate, so both see the same machine.
    for _ in 0..setup.prepare_runs {
        let c0 = thread_cpu_seconds();
        let t0 = Instant::now();
        let prepared = control.prepare(ir_b).expect("an IR of the engine's shape");
        let wall = t0.elapsed().as_secs_f64();
        let cpu = thread_cpu_seconds() - c0;
        prepared_bytes = prepared.memory_bytes();
        drop(black_box(prepared)); // freed outside the timed region
        wall_s.push(wall);
        cpu_s.push(cpu);
        timed.push(timed_prepare(&control, ir_b));
    }
    let timed_total_s: Vec<f64> = timed.iter().map(|r| r.0).collect();
    timed.sort_by(|a, b| a.0.total_cmp(&b.0));
    let levels = timed.swap_remove(timed.len() / 2).1;
    eprintln!(
        "  {schedule:<8} prepare median {:.2} ms, max {:.2} ms",
        ms(median(&wall_s)),
        ms(wall_s.iter().copied().fold(0.0, f64::max))
    );
    PrepareResult { schedule, wall_s, cpu_s, prepared_bytes, levels, timed_total_s }
}

/// One timed preparation of `ir` by the engine's own code: the total and the per-slot split.
fn timed_prepare(control: &partita_core::Control, ir: &ImpulseResponse) -> (f64, Vec<LevelSplit>) {
    let t0 = Instant::now();
    let (prepared, splits) = control.prepare_timed(ir).expect("an IR of the engine's shape");
    let total_s = t0.elapsed().as_secs_f64();
    drop(black_box(prepared)); // freed outside the timed region
    let levels = splits
        .iter()
        .map(|p| LevelSplit {
            n: p.block_frames,
            partitions: p.partitions,
            channels: p.ir_channels,
            plan_s: p.plan_s,
            alloc_s: p.alloc_s,
            fft_s: p.fft_s,
        })
        .collect();
    (total_s, levels)
}

fn report_prepare(results: &[PrepareResult], plans: &[(Schedule, Plan)], csv: &mut Csv) {
    let mut t = Table::new(&[
        "schedule",
        "runs",
        "spectra MB",
        "wall median ms",
        "wall max ms",
        "first run ms",
        "thread-CPU median ms",
        "timed median ms",
        "T7 <= 20 ms (median / max)",
    ]);
    for r in results {
        let name = r.schedule.as_str();
        let med = median(&r.wall_s);
        let max = r.wall_s.iter().copied().fold(0.0, f64::max);
        t.row(vec![
            format!("`{name}`"),
            r.wall_s.len().to_string(),
            format!("{:.1}", r.prepared_bytes as f64 / 1e6),
            format!("{:.2}", ms(med)),
            format!("{:.2}", ms(max)),
            format!("{:.2}", ms(r.wall_s[0])),
            format!("{:.2}", ms(median(&r.cpu_s))),
            format!("{:.2}", ms(median(&r.timed_total_s))),
            format!(
                "{} / {}{}",
                verdict(ms(med) <= T7_TARGET_MS),
                verdict(ms(max) <= T7_TARGET_MS),
                if ms(med) > T7_TARGET_MS {
                    format!(" (median {:.2}x the target)", ms(med) / T7_TARGET_MS)
                } else {
                    String::new()
                }
            ),
        ]);
        for (i, (w, c)) in r.wall_s.iter().zip(&r.cpu_s).enumerate() {
            csv.row(&["t7".into(), name.into(), format!("run{i}"), "prepare_wall_ms".into(), format!("{:.4}", ms(*w))]);
            csv.row(&["t7".into(), name.into(), format!("run{i}"), "prepare_cpu_ms".into(), format!("{:.4}", ms(*c))]);
        }
        for (metric, v) in [
            ("prepare_wall_median_ms", ms(med)),
            ("prepare_wall_max_ms", ms(max)),
            ("prepare_cpu_median_ms", ms(median(&r.cpu_s))),
            ("timed_median_ms", ms(median(&r.timed_total_s))),
            ("spectra_mb", r.prepared_bytes as f64 / 1e6),
        ] {
            csv.row(&["t7".into(), name.into(), "all".into(), metric.into(), format!("{v:.4}")]);
        }
    }
    println!("## T7: `Control::prepare` for the IR above (target <= {T7_TARGET_MS} ms for S1, off the audio thread)\n");
    println!(
        "Wall-clock time of one call on an idle engine, all runs of one engine (the first on fresh memory; later \
         runs may reuse pages the allocator kept). \"timed\" is the same preparation timed from inside, per slot.\n"
    );
    println!("{}", t.render());

    let mut t = Table::new(&[
        "schedule",
        "level N x P",
        "FFT size",
        "FFTs",
        "planning ms",
        "alloc + prefault ms",
        "FFTs + store ms",
        "us per FFT",
        "share of timed %",
    ]);
    for (r, (_, plan)) in results.iter().zip(plans) {
        let name = r.schedule.as_str();
        let total: f64 = r.levels.iter().map(|l| l.plan_s + l.alloc_s + l.fft_s).sum();
        for l in &r.levels {
            let ffts = l.partitions * l.channels;
            let level_s = l.plan_s + l.alloc_s + l.fft_s;
            t.row(vec![
                format!("`{name}`"),
                format!("{}x{}", l.n, l.partitions),
                (2 * l.n).to_string(),
                ffts.to_string(),
                format!("{:.3}", ms(l.plan_s)),
                format!("{:.3}", ms(l.alloc_s)),
                format!("{:.3}", ms(l.fft_s)),
                format!("{:.1}", 1e6 * l.fft_s / ffts as f64),
                format!("{:.1}", 100.0 * level_s / total),
            ]);
            let phase = format!("level{}x{}", l.n, l.partitions);
            for (metric, v) in [("planning_ms", ms(l.plan_s)), ("alloc_ms", ms(l.alloc_s)), ("fft_ms", ms(l.fft_s))] {
                csv.row(&["t7-split".into(), name.into(), phase.clone(), metric.into(), format!("{v:.4}")]);
            }
        }
        let (p, a, f) = r.levels.iter().fold((0.0, 0.0, 0.0), |s, l| (s.0 + l.plan_s, s.1 + l.alloc_s, s.2 + l.fft_s));
        t.row(vec![
            format!("`{name}`"),
            format!("all {} levels", plan.levels.len()),
            "-".into(),
            r.levels.iter().map(|l| l.partitions * l.channels).sum::<usize>().to_string(),
            format!("{:.3} ({:.0}%)", ms(p), 100.0 * p / total),
            format!("{:.3} ({:.0}%)", ms(a), 100.0 * a / total),
            format!("{:.3} ({:.0}%)", ms(f), 100.0 * f / total),
            "-".into(),
            "100".into(),
        ]);
    }
    println!("Where the time goes (`Control::prepare_timed`, median run; one row per level slot):\n");
    println!("{}", t.render());
}

// ---------------------------------------------------------------------------------------------------
// 2. Callback time during a crossfade

/// One paced callback.
#[derive(Clone, Copy)]
struct Call {
    cpu_s: f64,
    wall_s: f64,
    /// Worker CPU credited during this call (the monitor's delta across it).
    worker_s: f64,
    /// `fade_state` after the call.
    state: FadeState,
    late: u64,
}

struct FadeRun {
    schedule: Schedule,
    max_level_frames: usize,
    calls: Vec<Call>,
    reports: Vec<SwapReport>,
    /// Per swap: callbacks from `swap()` to `Steady` again, or `None` when it timed out.
    settle_calls: Vec<Option<usize>>,
    /// Callbacks whose outputs held a non-finite sample.
    nonfinite_outputs: usize,
    /// Callbacks that started later than their deadline-grid slot (the runner fell behind).
    behind: usize,
}

fn bench_crossfade(
    schedule: Schedule,
    plan: &Plan,
    ir_a: &ImpulseResponse,
    ir_b: &ImpulseResponse,
    setup: &Setup,
) -> FadeRun {
    let mut engine = Engine::new(plan, ir_a, Routing::Stereo, BLOCK_FRAMES).expect("engine for a valid plan");
    let mut control = engine.control().expect("first call");
    let mut next_ir: Option<PreparedIr> = Some(control.prepare(ir_b).expect("an IR of the engine's shape"));
    let monitor = engine.monitor();
    // Warm up unpaced (as the latency bench's probe does): 0.2 s of audio, not recorded.
    let warm_calls = (0.2 * f64::from(RATE_HZ)) as usize / BLOCK_FRAMES;
    measure::drive(&mut engine, RATE_HZ, warm_calls, BLOCK_FRAMES, measure::Pacing::None, |_, _, _| true);

    let steady_calls = (setup.steady_seconds * f64::from(RATE_HZ)) as usize / BLOCK_FRAMES;
    let timeout_calls = (setup.swap_timeout_seconds * f64::from(RATE_HZ)) as usize / BLOCK_FRAMES;
    let max_calls = (setup.swaps + 1) * (steady_calls + timeout_calls) + 1;
    let mut calls = Vec::with_capacity(max_calls);
    let mut reports = Vec::new();
    let mut settle_calls = Vec::new();
    let (mut nonfinite_outputs, mut behind) = (0, 0);
    // Bench state: calls left in the current steady stretch, or the call index where the swap was queued.
    let mut steady_left = steady_calls;
    let mut swapped_at: Option<usize> = None;
    let mut swaps_done = 0u64;
    let mut worker_before = monitor.worker_cpu_seconds();
    measure::drive(&mut engine, RATE_HZ, max_calls, BLOCK_FRAMES, measure::Pacing::Sleep, |k, t, outputs| {
        // Bookkeeping off the timed region (the control thread's work, done here between callbacks).
        behind += usize::from(t.behind);
        let status = control.status();
        let worker_now = monitor.worker_cpu_seconds();
        calls.push(Call {
            cpu_s: t.cpu_s,
            wall_s: t.wall_s,
            worker_s: worker_now - worker_before,
            state: status.fade_state,
            late: status.late_results,
        });
        worker_before = worker_now;
        if outputs.iter().flatten().any(|v| !v.is_finite()) {
            nonfinite_outputs += 1;
        }
        match swapped_at {
            None if steady_left > 0 => steady_left -= 1,
            None => {
                if settle_calls.len() >= setup.swaps {
                    return false;
                }
                let ir = next_ir.take().expect("an IR to swap in");
                if let Err(refused) = control.swap(ir, setup.fade_frames) {
                    panic!("swap refused with an empty queue: {refused}");
                }
                swapped_at = Some(k);
            }
            Some(from) => {
                let settled = status.swaps_completed > swaps_done && status.fade_state == FadeState::Steady;
                if settled {
                    swaps_done = status.swaps_completed;
                    for event in control.poll() {
                        if let Event::Retired { ir, report } = event {
                            reports.push(report);
                            next_ir = Some(ir); // swapped in again next time: nothing is freed in the run
                        }
                    }
                    settle_calls.push(Some(k - from));
                    swapped_at = None;
                    steady_left = steady_calls;
                } else if k - from >= timeout_calls {
                    eprintln!(
                        "  {schedule}: swap {} did not settle within {} s",
                        swaps_done + 1,
                        setup.swap_timeout_seconds
                    );
                    settle_calls.push(None);
                    return false;
                }
            }
        }
        true
    });
    let c = &calls;
    let count = |s: FadeState| c.iter().filter(|x| x.state == s).count();
    eprintln!(
        "  {schedule:<8} {} calls: steady {}, pending {}, crossfading {}, retiring {}; swaps settled {}",
        calls.len(),
        count(FadeState::Steady),
        count(FadeState::Pending),
        count(FadeState::Crossfading),
        count(FadeState::Retiring),
        settle_calls.iter().flatten().count()
    );
    FadeRun {
        schedule,
        max_level_frames: plan.max_level_frames(),
        calls,
        reports,
        settle_calls,
        nonfinite_outputs,
        behind,
    }
}

/// Statistics of one phase's callbacks.
struct PhaseStats {
    callbacks: usize,
    audio_s: f64,
    p50: f64,
    p99: f64,
    p999: f64,
    max: f64,
    p999_wall: f64,
    max_wall: f64,
    mean_cpu: f64,
    /// Audio-thread CPU over audio time, % of one core.
    audio_load_pct: f64,
    /// Worker CPU over audio time, % of one core.
    worker_load_pct: f64,
}

/// `None` when the phase has no callbacks. Times in % of the deadline.
fn phase_stats(calls: &[&Call]) -> Option<PhaseStats> {
    if calls.is_empty() {
        return None;
    }
    let deadline = BLOCK_FRAMES as f64 / f64::from(RATE_HZ);
    let mut cpu: Vec<f64> = calls.iter().map(|c| c.cpu_s).collect();
    let mut wall: Vec<f64> = calls.iter().map(|c| c.wall_s).collect();
    cpu.sort_by(f64::total_cmp);
    wall.sort_by(f64::total_cmp);
    let audio_s = calls.len() as f64 * deadline;
    let pct = |v: f64| 100.0 * v / deadline;
    let cpu_sum: f64 = cpu.iter().sum();
    Some(PhaseStats {
        callbacks: calls.len(),
        audio_s,
        p50: pct(quantile(&cpu, 0.5)),
        p99: pct(quantile(&cpu, 0.99)),
        p999: pct(quantile(&cpu, 0.999)),
        max: pct(*cpu.last().unwrap_or(&0.0)),
        p999_wall: pct(quantile(&wall, 0.999)),
        max_wall: pct(*wall.last().unwrap_or(&0.0)),
        mean_cpu: pct(cpu_sum / calls.len() as f64),
        audio_load_pct: 100.0 * cpu_sum / audio_s,
        worker_load_pct: 100.0 * calls.iter().map(|c| c.worker_s).sum::<f64>() / audio_s,
    })
}

fn report_crossfade(runs: &[FadeRun], setup: &Setup, csv: &mut Csv) {
    let mut t = Table::new(&[
        "schedule",
        "phase",
        "callbacks",
        "audio s",
        "p50 %",
        "p99 %",
        "p99.9 %",
        "max %",
        "p99.9 wall %",
        "max wall %",
        "audio thread load %",
        "worker CPU % (per audio s)",
    ]);
    let mut ratios = Table::new(&[
        "schedule",
        "p50",
        "p99",
        "p99.9",
        "max",
        "mean callback",
        "max wall",
        "all threads load",
        "<= 2x (p99.9 / max)",
    ]);
    let phases: [(&str, &[FadeState]); 5] = [
        ("steady", &[FadeState::Steady]),
        ("pending", &[FadeState::Pending]),
        ("crossfading", &[FadeState::Crossfading]),
        ("pending + crossfading (both IRs)", &[FadeState::Pending, FadeState::Crossfading]),
        ("retiring", &[FadeState::Retiring]),
    ];
    for run in runs {
        let name = run.schedule.as_str();
        let mut both = None;
        let mut steady = None;
        for (phase, states) in phases {
            let sel: Vec<&Call> = run.calls.iter().filter(|c| states.contains(&c.state)).collect();
            let Some(s) = phase_stats(&sel) else {
                t.row(
                    vec![format!("`{name}`"), phase.into(), "0".into()]
                        .into_iter()
                        .chain((0..9).map(|_| "-".into()))
                        .collect(),
                );
                continue;
            };
            t.row(vec![
                format!("`{name}`"),
                phase.into(),
                s.callbacks.to_string(),
                format!("{:.2}", s.audio_s),
                format!("{:.2}", s.p50),
                format!("{:.2}", s.p99),
                format!("{:.2}", s.p999),
                format!("{:.1}", s.max),
                format!("{:.1}", s.p999_wall),
                format!("{:.1}", s.max_wall),
                format!("{:.2}", s.audio_load_pct),
                format!("{:.2}", s.worker_load_pct),
            ]);
            let key = phase.split(' ').next().unwrap_or(phase).to_string();
            let key = if states.len() == 2 { "both".to_string() } else { key };
            for (metric, v) in [
                ("callbacks", s.callbacks as f64),
                ("audio_s", s.audio_s),
                ("p50_pct", s.p50),
                ("p99_pct", s.p99),
                ("p999_pct", s.p999),
                ("max_pct", s.max),
                ("p999_wall_pct", s.p999_wall),
                ("max_wall_pct", s.max_wall),
                ("mean_callback_pct", s.mean_cpu),
                ("audio_load_pct", s.audio_load_pct),
                ("worker_load_pct", s.worker_load_pct),
            ] {
                csv.row(&["crossfade".into(), name.into(), key.clone(), metric.into(), format!("{v:.4}")]);
            }
            if states.len() == 2 {
                both = Some(s);
            } else if phase == "steady" {
                steady = Some(s);
            }
        }
        match (&both, &steady) {
            (Some(b), Some(s)) => {
                let r = |x: f64, y: f64| x / y;
                let all_b = b.audio_load_pct + b.worker_load_pct;
                let all_s = s.audio_load_pct + s.worker_load_pct;
                let values = [
                    ("p50", r(b.p50, s.p50)),
                    ("p99", r(b.p99, s.p99)),
                    ("p999", r(b.p999, s.p999)),
                    ("max", r(b.max, s.max)),
                    ("mean_callback", r(b.mean_cpu, s.mean_cpu)),
                    ("max_wall", r(b.max_wall, s.max_wall)),
                    ("all_threads_load", r(all_b, all_s)),
                ];
                let mut row = vec![format!("`{name}`")];
                row.extend(values.iter().map(|(_, v)| format!("{v:.2}")));
                row.push(format!(
                    "{} / {}",
                    verdict(values[2].1 <= CROSSFADE_TARGET_RATIO),
                    verdict(values[3].1 <= CROSSFADE_TARGET_RATIO)
                ));
                ratios.row(row);
                for (metric, v) in values {
                    csv.row(&[
                        "crossfade-ratio".into(),
                        name.into(),
                        "both/steady".into(),
                        metric.into(),
                        format!("{v:.4}"),
                    ]);
                }
            }
            _ => {
                let mut row = vec![format!("`{name}`")];
                row.extend((0..7).map(|_| "-".to_string()));
                row.push("no crossfade callbacks: the swap never started".into());
                ratios.row(row);
            }
        }
    }
    println!(
        "## Callback time during a crossfade (paced, {} swap{} per schedule, fade {} frames = {:.2} s, \
         {} s steady between)\n",
        setup.swaps,
        if setup.swaps == 1 { "" } else { "s" },
        setup.fade_frames,
        setup.fade_frames as f64 / f64::from(RATE_HZ),
        setup.steady_seconds
    );
    println!(
        "Thread-CPU time of one `process()` call in % of the deadline ({:.3} ms), grouped by the engine's `fade_state` \
         after the call; wall-clock beside it. Worker CPU: `Monitor::worker_cpu_seconds` credited during the phase's \
         callbacks (a job is credited when it completes), over the phase's audio time, % of one core.\n",
        1e3 * BLOCK_FRAMES as f64 / f64::from(RATE_HZ)
    );
    println!("{}", t.render());
    println!(
        "Ratios, pending + crossfading (both IRs computed) over steady (issue target: <= {CROSSFADE_TARGET_RATIO}x):\n"
    );
    println!("{}", ratios.render());

    let mut t = Table::new(&[
        "schedule",
        "swap",
        "picked up (frame)",
        "pending frames",
        "largest level N",
        "fade frames",
        "callbacks from swap() to Steady",
        "late results in run",
        "non-finite output callbacks",
        "callbacks behind the grid",
    ]);
    for run in runs {
        let name = run.schedule.as_str();
        let late = run.calls.last().map_or(0, |c| c.late) - run.calls.first().map_or(0, |c| c.late);
        for (i, settle) in run.settle_calls.iter().enumerate() {
            let report = run.reports.get(i);
            let pending = report.map(|r| r.fade_start - r.picked_up);
            let fade = report.map(|r| r.fade_end - r.fade_start);
            t.row(vec![
                format!("`{name}`"),
                (i + 1).to_string(),
                report.map_or("-".into(), |r| r.picked_up.to_string()),
                pending.map_or("-".into(), |v| v.to_string()),
                run.max_level_frames.to_string(),
                fade.map_or("-".into(), |v| v.to_string()),
                settle.map_or("did not settle".into(), |v| v.to_string()),
                late.to_string(),
                run.nonfinite_outputs.to_string(),
                run.behind.to_string(),
            ]);
            let phase = format!("swap{}", i + 1);
            for (metric, v) in [
                ("pending_frames", pending.map_or(f64::NAN, |v| v as f64)),
                ("fade_frames", fade.map_or(f64::NAN, |v| v as f64)),
                ("settle_callbacks", settle.map_or(f64::NAN, |v| v as f64)),
            ] {
                csv.row(&["swap".into(), name.into(), phase.clone(), metric.into(), format!("{v}")]);
            }
        }
        csv.row(&["swap".into(), name.into(), "all".into(), "late_results".into(), late.to_string()]);
    }
    println!(
        "Swap timing (frames are output frames; the crossfade may start up to N (sync) or 2N (workers, sliced) \
         after pick-up):\n"
    );
    println!("{}", t.render());
}

// ---------------------------------------------------------------------------------------------------
// 3. T9: denormals

struct DenormalResult {
    schedule: Schedule,
    /// (normal, subnormal) per pair: (audio-thread load %, worker load %).
    pairs: Vec<[(f64, f64); 2]>,
    /// Fraction of the decaying input's samples that are subnormal.
    subnormal_fraction: f64,
}

/// Noise decaying exponentially from full scale so that its envelope crosses 1e-38 at `cross_frames`,
/// then held at an envelope of 1e-41: every later sample is subnormal (or zero).
fn decaying_input(frames: usize, cross_frames: usize, seed: u64) -> Vec<f32> {
    let mut noise = Noise::new(seed);
    let rate = (1e-38f64).ln() / cross_frames as f64; // ln of the envelope per frame (negative)
    (0..frames)
        .map(|n| {
            let env = (rate * n as f64).exp().max(1e-41);
            (f64::from(noise.sample()) * env) as f32
        })
        .collect()
}

/// Unpaced: returns (audio-thread load %, worker load %) for `inputs` on a fresh engine.
fn denormal_run(plan: &Plan, ir: &ImpulseResponse, schedule: Schedule, inputs: &[Vec<f32>]) -> (f64, f64) {
    let mut options = EngineOptions::new(BLOCK_FRAMES);
    if schedule == Schedule::Workers {
        options.lateness = Lateness::Wait; // no job skipped when calls come faster than real time
    }
    let mut engine = Engine::with_options(plan, ir, Routing::Stereo, options).expect("engine for a valid plan");
    let monitor = engine.monitor();
    let mut outputs = vec![vec![0.0f32; BLOCK_FRAMES]; 2];
    let frames = inputs[0].len();
    let calls = frames / BLOCK_FRAMES;
    let w0 = monitor.worker_cpu_seconds();
    let mut cpu = 0.0;
    for k in 0..calls {
        let at = k * BLOCK_FRAMES;
        let ins: [&[f32]; 2] = [&inputs[0][at..at + BLOCK_FRAMES], &inputs[1][at..at + BLOCK_FRAMES]];
        let mut outs: Vec<&mut [f32]> = outputs.iter_mut().map(|y| &mut y[..]).collect();
        let c0 = thread_cpu_seconds();
        let result = engine.process(&ins, &mut outs);
        cpu += thread_cpu_seconds() - c0;
        debug_assert!(result.is_ok());
    }
    let audio_s = (calls * BLOCK_FRAMES) as f64 / f64::from(RATE_HZ);
    let worker = monitor.worker_cpu_seconds() - w0;
    black_box(&outputs);
    (100.0 * cpu / audio_s, 100.0 * worker / audio_s)
}

fn bench_denormals(schedule: Schedule, plan: &Plan, ir: &ImpulseResponse, setup: &Setup) -> DenormalResult {
    let frames = (setup.denormal_seconds * f64::from(RATE_HZ)) as usize;
    let cross = (setup.denormal_cross_seconds * f64::from(RATE_HZ)) as usize;
    let normal: Vec<Vec<f32>> = (0..2).map(|c| Noise::new(0xD0 + c).vec(frames)).collect();
    let decaying: Vec<Vec<f32>> = (0..2).map(|c| decaying_input(frames, cross, 0xD0 + c)).collect();
    let subnormal = decaying.iter().flatten().filter(|v| v.abs() < SUBNORMAL_BELOW && **v != 0.0).count();
    let subnormal_fraction = subnormal as f64 / (2 * frames) as f64;
    let mut pairs = Vec::new();
    for _ in 0..setup.denormal_pairs {
        let a = denormal_run(plan, ir, schedule, &normal);
        let b = denormal_run(plan, ir, schedule, &decaying);
        pairs.push([a, b]);
    }
    let ratios: Vec<f64> = pairs.iter().map(|[a, b]| (b.0 + b.1) / (a.0 + a.1)).collect();
    eprintln!("  {schedule:<8} subnormal/normal load ratio median {:.3}", median(&ratios));
    DenormalResult { schedule, pairs, subnormal_fraction }
}

/// Raw cost of subnormal arithmetic on this CPU with flush-to-zero off (the bench thread's default mode):
/// time of a multiply-add pass with subnormal operands and results over the same pass with normal ones.
fn subnormal_penalty() -> f64 {
    let len = 4096;
    let y = vec![0.5f32; len];
    let time = |x: &[f32]| {
        let mut best = f64::INFINITY;
        for _ in 0..7 {
            let mut acc = vec![0.0f32; len];
            let t0 = Instant::now();
            for _ in 0..200 {
                for ((a, &xv), &yv) in acc.iter_mut().zip(black_box(x)).zip(&y) {
                    *a = xv * yv + *a * 0.5;
                }
                black_box(&mut acc);
            }
            best = best.min(t0.elapsed().as_secs_f64());
        }
        best
    };
    let normal = vec![1e-3f32; len];
    let subnormal = vec![1e-40f32; len];
    time(&subnormal) / time(&normal)
}

fn report_denormals(results: &[DenormalResult], penalty: f64, setup: &Setup, csv: &mut Csv) {
    let mut t = Table::new(&[
        "schedule",
        "pairs",
        "normal load % (audio + workers)",
        "subnormal load % (audio + workers)",
        "ratio median",
        "ratio min / max",
        "worker-only ratio median",
        "T9 <= 1.1x",
    ]);
    for r in results {
        let name = r.schedule.as_str();
        let total = |x: (f64, f64)| x.0 + x.1;
        let normal: Vec<f64> = r.pairs.iter().map(|p| total(p[0])).collect();
        let sub: Vec<f64> = r.pairs.iter().map(|p| total(p[1])).collect();
        let ratios: Vec<f64> = normal.iter().zip(&sub).map(|(a, b)| b / a).collect();
        let wn: Vec<f64> = r.pairs.iter().map(|p| p[0].1).collect();
        let ws: Vec<f64> = r.pairs.iter().map(|p| p[1].1).collect();
        let worker_ratio = (r.schedule == Schedule::Workers).then(|| median(&ws) / median(&wn));
        let (lo, hi) = ratios.iter().fold((f64::INFINITY, 0.0f64), |(a, b), &v| (a.min(v), b.max(v)));
        let split = |p: &[(f64, f64)]| {
            let a: Vec<f64> = p.iter().map(|x| x.0).collect();
            let w: Vec<f64> = p.iter().map(|x| x.1).collect();
            format!("{:.3} ({:.3} + {:.3})", median(&a) + median(&w), median(&a), median(&w))
        };
        let pn: Vec<(f64, f64)> = r.pairs.iter().map(|p| p[0]).collect();
        let ps: Vec<(f64, f64)> = r.pairs.iter().map(|p| p[1]).collect();
        t.row(vec![
            format!("`{name}`"),
            r.pairs.len().to_string(),
            split(&pn),
            split(&ps),
            format!("{:.3}", median(&ratios)),
            format!("{lo:.3} / {hi:.3}"),
            worker_ratio.map_or("-".into(), |v| format!("{v:.3}")),
            verdict(median(&ratios) <= T9_TARGET_RATIO).into(),
        ]);
        for (i, p) in r.pairs.iter().enumerate() {
            for (kind, (a, w)) in [("normal", p[0]), ("subnormal", p[1])] {
                let phase = format!("pair{i}-{kind}");
                csv.row(&["t9".into(), name.into(), phase.clone(), "audio_load_pct".into(), format!("{a:.5}")]);
                csv.row(&["t9".into(), name.into(), phase, "worker_load_pct".into(), format!("{w:.5}")]);
            }
        }
        csv.row(&["t9".into(), name.into(), "all".into(), "ratio_median".into(), format!("{:.5}", median(&ratios))]);
        csv.row(&[
            "t9".into(),
            name.into(),
            "all".into(),
            "subnormal_input_fraction".into(),
            format!("{:.5}", r.subnormal_fraction),
        ]);
    }
    csv.row(&["t9".into(), "-".into(), "raw".into(), "subnormal_penalty_no_ftz".into(), format!("{penalty:.3}")]);
    let fraction = results.first().map_or(0.0, |r| r.subnormal_fraction);
    println!("## T9: load with input decaying into subnormals / normal load (target <= {T9_TARGET_RATIO}x)\n");
    println!(
        "Unpaced, {} s of stereo input per run on a fresh engine, normal and subnormal runs interleaved. The decaying \
         input falls from full scale through 1e-38 at {} s and then stays at an envelope of 1e-41: {:.1}% of its \
         samples are subnormal. Load = audio-thread CPU inside `process()` + worker job CPU over audio time, % of one \
         core (workers: `Lateness::Wait`, so the audio thread's share includes waiting for results).\n",
        setup.denormal_seconds,
        setup.denormal_cross_seconds,
        100.0 * fraction
    );
    println!("{}", t.render());
    println!(
        "Sensitivity: on this CPU, without flush-to-zero, a multiply-add pass with subnormal operands and results \
         takes {penalty:.1}x the time of the same pass with normal ones (bench thread, FTZ/DAZ off).\n"
    );
}
