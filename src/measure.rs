//! Measuring an engine on this machine: CPU clocks and paced callback runs.
//!
//! Mean load (DESIGN.md section 4) is the CPU time of the threads the engine uses, on their thread CPU
//! clocks, over the audio time processed, in % of one core: the calling (audio) thread's clock inside
//! `process()` plus the engine's worker threads' clocks during their jobs
//! ([`Monitor::worker_cpu_seconds`](partita_core::Monitor::worker_cpu_seconds)). Beside it, the whole
//! process's CPU clock over the same run: an upper bound, since it also counts the runner's own pacing and
//! bookkeeping, the workers' wake-ups and parking, and any other thread of the process. Callback time is
//! one `process()` call, on the calling thread's CPU clock (judged against the deadline) with the
//! wall-clock time beside it. The clocks are partita-core's ([`partita_core::thread_cpu_seconds`],
//! [`partita_core::process_cpu_seconds`]).

use std::time::{Duration, Instant};

use partita_core::synth::Noise;
use partita_core::{process_cpu_seconds, thread_cpu_seconds, Engine};
use serde::Serialize;

/// What a measured run found.
#[derive(Debug, Clone, Copy, PartialEq, Serialize)]
pub struct RunStats {
    /// Audio seconds processed.
    pub audio_seconds: f64,
    /// Callbacks issued.
    pub callbacks: usize,
    /// Mean load: the engine's thread CPU time (the audio thread inside `process()` plus the worker
    /// threads' jobs) over audio time, % of one core.
    pub mean_load_pct: f64,
    /// The whole process's CPU time over the same run and audio time, % of one core. An upper bound on
    /// [`mean_load_pct`](Self::mean_load_pct): it also counts this runner's pacing loop, worker wake-ups and
    /// parking, and unrelated threads of the process.
    pub process_load_pct: f64,
    /// Callback thread-CPU time percentiles and maximum, % of the callback deadline.
    pub p50_pct: f64,
    /// 99th percentile.
    pub p99_pct: f64,
    /// 99.9th percentile.
    pub p999_pct: f64,
    /// Worst callback, thread-CPU time.
    pub max_pct: f64,
    /// Worst callback, wall-clock time.
    pub max_wall_pct: f64,
    /// 99.9th percentile of wall-clock time.
    pub p999_wall_pct: f64,
    /// Worker results that missed their deadline during the run.
    pub late: u64,
    /// Callbacks in one period of the largest level (its block over the host call size, when that
    /// divides it; else 1): the callbacks at the same position in that period do the same level work.
    pub phase_calls: usize,
    /// The worst, over the positions in that period, of the median callback thread-CPU time at that
    /// position (across the run's periods), % of the deadline. The median takes out the machine's rare
    /// noise (preemption, interrupts, a stalled vCPU) and leaves the work the schedule puts in each
    /// callback: how evenly a schedule spreads its levels, even where the maximum is set by noise. Needs
    /// a run of several periods of the largest level.
    pub worst_phase_median_pct: f64,
}

/// How a measured run issues its host calls.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Pacing {
    /// Back to back, as fast as the engine runs: its cost with warm caches.
    None,
    /// On the real deadline grid, sleeping until each call's slot, as a sound card wakes the audio
    /// thread: the cost as it is live, where the core may run other work (and lose the engine's cache
    /// lines) while the thread sleeps.
    #[default]
    Sleep,
    /// On the real deadline grid, spinning until each call's slot: the thread keeps its core between
    /// calls as far as this OS is concerned (a virtual machine's host may still run other work on it).
    /// A diagnostic beside `Sleep`: the difference between the two is what the sleeps cost on this
    /// machine, not the engine's work.
    Spin,
}

impl Pacing {
    /// The name used on the command line and in reports.
    pub fn as_str(self) -> &'static str {
        match self {
            Pacing::None => "none",
            Pacing::Sleep => "sleep",
            Pacing::Spin => "spin",
        }
    }

    /// True when calls are issued on the deadline grid.
    pub fn paced(self) -> bool {
        self != Pacing::None
    }
}

impl std::str::FromStr for Pacing {
    type Err = String;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "none" => Ok(Pacing::None),
            "sleep" => Ok(Pacing::Sleep),
            "spin" => Ok(Pacing::Spin),
            other => Err(format!("unknown pacing `{other}`: use sleep, spin or none")),
        }
    }
}

/// The timing of one host call.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct CallTime {
    /// Thread-CPU seconds of the `process()` call.
    pub cpu_s: f64,
    /// Wall-clock seconds of the call.
    pub wall_s: f64,
    /// The call was issued more than a period after its slot on the deadline grid (paced runs only).
    pub behind: bool,
}

/// Issues up to `calls` host calls of `host_frames` frames of seeded noise through `engine`, as `pacing`
/// says: on the real deadline grid, sleeping until each slot (as a sound card would wake the audio
/// thread, so caches go cold as they do live) or spinning until it, or back to back. After each call, outside the
/// timed region, `after(k, timing, outputs)` sees the call's index, timing and output buffers; it
/// returns `false` to stop early. Allocates its buffers before the first call. Returns the calls made.
///
/// # Panics
/// When `host_frames` exceeds the engine's `max_host_frames`.
pub fn drive(
    engine: &mut Engine,
    sample_rate_hz: u32,
    calls: usize,
    host_frames: usize,
    pacing: Pacing,
    mut after: impl FnMut(usize, CallTime, &[Vec<f32>]) -> bool,
) -> usize {
    assert!(host_frames >= 1 && host_frames <= engine.max_host_frames());
    let mut noise = Noise::new(0xC0FFEE);
    let inputs: Vec<Vec<f32>> = (0..engine.inputs()).map(|_| noise.vec(host_frames * 64)).collect();
    let mut outputs = vec![vec![0.0f32; host_frames]; engine.outputs()];
    let period = Duration::from_secs_f64(host_frames as f64 / f64::from(sample_rate_hz));
    let mut ins: Vec<&[f32]> = Vec::with_capacity(inputs.len());
    let start = Instant::now();
    for k in 0..calls {
        let mut behind = false;
        if pacing.paced() {
            let due = start + period * k as u32;
            let now = Instant::now();
            if due > now {
                if pacing == Pacing::Spin {
                    while Instant::now() < due {
                        std::hint::spin_loop();
                    }
                } else {
                    std::thread::sleep(due - now);
                }
            } else {
                behind = now - due > period;
            }
        }
        let at = (k % 63) * host_frames;
        ins.clear();
        ins.extend(inputs.iter().map(|x| &x[at..at + host_frames]));
        let mut outs: Vec<&mut [f32]> = outputs.iter_mut().map(|y| &mut y[..]).collect();
        let t0 = Instant::now();
        let c0 = thread_cpu_seconds();
        let result = engine.process(&ins, &mut outs);
        let c1 = thread_cpu_seconds();
        let wall_s = t0.elapsed().as_secs_f64();
        debug_assert!(result.is_ok());
        if !after(k, CallTime { cpu_s: c1 - c0, wall_s, behind }, &outputs) {
            return k + 1;
        }
    }
    calls
}

/// Runs `engine` over `seconds` of seeded noise in host calls of `host_frames`, issued as `pacing` says
/// (see [`drive`]), and summarizes the run.
///
/// Worker CPU is credited when a job completes and published by `process()`, so a job still running when
/// the run ends is left out of `mean_load_pct` and one that began just before the run is counted whole;
/// over a run of many worker periods this is small.
///
/// # Panics
/// When `host_frames` exceeds the engine's `max_host_frames`.
pub fn run(engine: &mut Engine, sample_rate_hz: u32, seconds: f64, host_frames: usize, pacing: Pacing) -> RunStats {
    let calls = ((seconds * f64::from(sample_rate_hz)) / host_frames as f64).ceil().max(1.0) as usize;
    let period = Duration::from_secs_f64(host_frames as f64 / f64::from(sample_rate_hz));
    let mut cpu = Vec::with_capacity(calls);
    let mut wall = Vec::with_capacity(calls);
    let monitor = engine.monitor();
    let workers_start = monitor.worker_cpu_seconds();
    let late_start = monitor.late_results();
    let process_start = process_cpu_seconds();
    drive(engine, sample_rate_hz, calls, host_frames, pacing, |_, t, _| {
        cpu.push(t.cpu_s);
        wall.push(t.wall_s);
        true
    });
    let process_cpu = process_cpu_seconds() - process_start;
    // Audio-thread time in the callbacks plus the worker threads' job time: the pacing loop's own
    // sleeping and bookkeeping is not the engine's load (it is in `process_cpu`).
    let engine_cpu: f64 = cpu.iter().sum::<f64>() + (monitor.worker_cpu_seconds() - workers_start);
    let audio_seconds = (calls * host_frames) as f64 / f64::from(sample_rate_hz);
    let deadline = period.as_secs_f64();
    let pct = |v: f64| 100.0 * v / deadline;
    let max_level = engine.plan().max_level_frames();
    let phase_calls = if max_level.is_multiple_of(host_frames) { (max_level / host_frames).max(1) } else { 1 };
    let mut by_phase: Vec<Vec<f64>> = vec![Vec::new(); phase_calls];
    for (k, &c) in cpu.iter().enumerate() {
        by_phase[k % phase_calls].push(c);
    }
    let worst_phase = by_phase
        .iter_mut()
        .filter(|v| !v.is_empty())
        .map(|v| {
            v.sort_by(f64::total_cmp);
            v[v.len() / 2]
        })
        .fold(0.0, f64::max);
    cpu.sort_by(f64::total_cmp);
    wall.sort_by(f64::total_cmp);
    let q = |v: &[f64], f: f64| v[((v.len() as f64 - 1.0) * f).round() as usize];
    RunStats {
        audio_seconds,
        callbacks: calls,
        mean_load_pct: 100.0 * engine_cpu / audio_seconds,
        process_load_pct: 100.0 * process_cpu / audio_seconds,
        p50_pct: pct(q(&cpu, 0.5)),
        p99_pct: pct(q(&cpu, 0.99)),
        p999_pct: pct(q(&cpu, 0.999)),
        max_pct: pct(*cpu.last().unwrap_or(&0.0)),
        max_wall_pct: pct(*wall.last().unwrap_or(&0.0)),
        p999_wall_pct: pct(q(&wall, 0.999)),
        late: monitor.late_results() - late_start,
        phase_calls,
        worst_phase_median_pct: pct(worst_phase),
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use partita_core::{ImpulseResponse, PlanMode, Planner, Routing};

    fn small_engine(block: usize) -> Engine {
        let ir = ImpulseResponse::new(vec![partita_core::synth::decaying_noise(2048, 512.0, 3)], 48_000).unwrap();
        let plan = Planner::new().block_frames(block).mode(PlanMode::Uniform).plan(2048).unwrap();
        Engine::new(&plan, &ir, Routing::Mono, block).unwrap()
    }

    #[test]
    fn paced_runs_follow_the_deadline_grid_and_unpaced_ones_do_not_wait() {
        // 40 calls of 256 frames at 48 kHz: the last call's slot is 39 periods (208 ms) after the first,
        // so a paced run cannot end sooner, whichever way it waits.
        let (calls, block) = (40, 256);
        let grid = Duration::from_secs_f64(39.0 * block as f64 / 48_000.0);
        for pacing in [Pacing::Sleep, Pacing::Spin] {
            let mut engine = small_engine(block);
            let t0 = Instant::now();
            let made = drive(&mut engine, 48_000, calls, block, pacing, |_, _, _| true);
            assert_eq!(made, calls);
            assert!(t0.elapsed() >= grid, "{pacing:?} ended after {:?}, before the grid's {grid:?}", t0.elapsed());
        }
        // Back to back, the same calls take far less than their audio time on any machine that runs
        // this engine in real time (a 2048-tap mono engine at block 256 is a fraction of a percent).
        let mut engine = small_engine(block);
        let t0 = Instant::now();
        drive(&mut engine, 48_000, calls, block, Pacing::None, |_, t, _| {
            assert!(!t.behind, "unpaced calls are never behind a grid");
            true
        });
        assert!(t0.elapsed() < grid, "unpaced run took {:?}", t0.elapsed());
    }

    #[test]
    fn pacing_names_round_trip_and_unknown_ones_are_refused() {
        for p in [Pacing::None, Pacing::Sleep, Pacing::Spin] {
            assert_eq!(p.as_str().parse::<Pacing>(), Ok(p));
        }
        assert_eq!(Pacing::default(), Pacing::Sleep);
        let err = "busy".parse::<Pacing>().unwrap_err();
        assert!(err.contains("sleep, spin or none"), "{err}");
    }
}
