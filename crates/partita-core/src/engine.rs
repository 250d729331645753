//! The streaming engine: owns every buffer, runs a [`Plan`] on the audio thread.

use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Arc;

use realfft::RealFftPlanner;

use crate::denormal::DenormalGuard;
use crate::error::{EngineError, ProcessError};
use crate::fdl::{LevelIr, LevelRunner, LevelShape, OutputTerms};
use crate::head::Head;
use crate::ir::ImpulseResponse;
use crate::kernel::Kernel;
use crate::plan::Plan;
use crate::plan::Schedule;
use crate::ring::TimeRing;
use crate::routing::{RouteMap, Routing};
use crate::sliced::SlicedLevel;
use crate::workers::{Lateness, WorkerLevel, WorkerSetup};

/// A level of one routing group, run by its schedule.
#[derive(Debug)]
enum LevelSlot {
    Sync(LevelRunner),
    Workers(WorkerLevel),
    Sliced(Box<SlicedLevel>),
}

/// Counters the audio thread updates and any thread may read.
#[derive(Debug, Default)]
struct Counters {
    frames_processed: AtomicU64,
    nonfinite_inputs: AtomicU64,
    late_results: AtomicU64,
    refused_jobs: AtomicU64,
    worker_cpu_nanos: AtomicU64,
}

/// A read-only view of an engine's run-time counters, for the control side. Cheap to clone, `Send` and
/// `Sync`; reading never blocks the audio thread.
#[derive(Debug, Clone)]
pub struct Monitor {
    counters: Arc<Counters>,
}

impl Monitor {
    /// Frames processed since the engine was built.
    pub fn frames_processed(&self) -> u64 {
        self.counters.frames_processed.load(Ordering::Relaxed)
    }

    /// Non-finite input samples (NaN, +-Inf) replaced by zero since the engine was built.
    pub fn nonfinite_inputs(&self) -> u64 {
        self.counters.nonfinite_inputs.load(Ordering::Relaxed)
    }

    /// Worker results that were not ready at their due boundary (after waiting at most
    /// [`LATE_SPIN`](crate::LATE_SPIN)); those blocks went out without the level's contribution.
    pub fn late_results(&self) -> u64 {
        self.counters.late_results.load(Ordering::Relaxed)
    }

    /// Input blocks a worker level could not take because it was several periods behind (its output is
    /// then wrong until the delay line has turned over): a sign of a machine far too slow for the plan.
    pub fn refused_jobs(&self) -> u64 {
        self.counters.refused_jobs.load(Ordering::Relaxed)
    }

    /// CPU seconds used by the engine's worker threads (thread CPU clocks), as of the last `process()`.
    pub fn worker_cpu_seconds(&self) -> f64 {
        self.counters.worker_cpu_nanos.load(Ordering::Relaxed) as f64 * 1e-9
    }
}

/// Build-time options of an [`Engine`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct EngineOptions {
    /// The largest frame count a host call may carry.
    pub max_host_frames: usize,
    /// Multiply-accumulate kernel; [`Kernel::detect`] by default.
    pub kernel: Kernel,
    /// Ask for rate-monotonic real-time priorities (SCHED_FIFO, smaller levels higher) for worker
    /// threads. Off by default: a spinning real-time thread can starve a small machine. When refused
    /// (no privilege), the workers run at normal priority; [`Engine::worker_priorities`] says what was
    /// granted.
    pub realtime_workers: bool,
    /// What to do when a worker result is late; [`Lateness::SpinThenDrop`] by default (real-time).
    pub lateness: Lateness,
}

impl EngineOptions {
    /// Defaults for a host calling with at most `max_host_frames` frames.
    pub fn new(max_host_frames: usize) -> Self {
        Self { max_host_frames, kernel: Kernel::detect(), realtime_workers: false, lateness: Lateness::default() }
    }
}

/// A partitioned convolution engine for one stream.
///
/// Built off the audio thread (building allocates everything); [`process`](Self::process) then never
/// allocates, frees, locks, logs or waits.
///
/// ```
/// use partita_core::{Engine, ImpulseResponse, Plan, Routing};
/// let ir = ImpulseResponse::new(vec![vec![1.0, 0.5, 0.25]], 48_000).unwrap();
/// let plan = Plan::uniform(4, ir.frames()).unwrap();
/// let mut engine = Engine::new(&plan, &ir, Routing::Mono, 16).unwrap();
/// let input = [1.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0, 0.0];
/// let mut output = [0.0f32; 8];
/// engine.process(&[&input], &mut [&mut output]).unwrap();
/// // The impulse appears after the block latency of 4 frames.
/// assert_eq!(engine.latency_frames(), 4);
/// assert!((output[4] - 1.0).abs() < 1e-6 && (output[5] - 0.5).abs() < 1e-6);
/// ```
#[derive(Debug)]
pub struct Engine {
    plan: Plan,
    routes: RouteMap,
    options: EngineOptions,
    latency: usize,
    inputs: Vec<TimeRing>,
    outputs: Vec<TimeRing>,
    head: Option<Head>,
    levels: Vec<LevelSlot>,
    /// Input frames received since start or reset.
    now: i64,
    /// Frames into the current engine block.
    fill: usize,
    counters: Arc<Counters>,
}

impl Engine {
    /// Builds an engine for `plan`, `ir` and `routing`, accepting host calls of 1 to `max_host_frames`
    /// frames. Allocates every buffer.
    ///
    /// # Errors
    /// [`EngineError`] when the plan is invalid, the routing does not fit the IR, the IR is longer than the
    /// plan, or `max_host_frames` is 0.
    pub fn new(
        plan: &Plan,
        ir: &ImpulseResponse,
        routing: Routing,
        max_host_frames: usize,
    ) -> Result<Self, EngineError> {
        Self::with_options(plan, ir, routing, EngineOptions::new(max_host_frames))
    }

    /// [`Engine::new`] with explicit options. Allocates.
    ///
    /// # Errors
    /// As [`Engine::new`].
    pub fn with_options(
        plan: &Plan,
        ir: &ImpulseResponse,
        routing: Routing,
        options: EngineOptions,
    ) -> Result<Self, EngineError> {
        plan.validate()?;
        if options.max_host_frames == 0 {
            return Err(EngineError::MaxHostFramesZero);
        }
        if ir.frames() > plan.covered_frames() {
            return Err(EngineError::IrLongerThanPlan { ir_frames: ir.frames(), plan_frames: plan.covered_frames() });
        }
        let routes = routing.resolve(ir.channels())?;
        let b = plan.block_frames;
        let latency = plan.latency_frames();

        let head = (plan.head_frames > 0).then(|| {
            let paths = routes
                .paths
                .iter()
                .map(|p| {
                    let taps = ir.channel(p.ir_channel);
                    let mut h = vec![0.0f32; plan.head_frames];
                    let n = plan.head_frames.min(taps.len());
                    h[..n].copy_from_slice(&taps[..n]);
                    (p.input, p.output, h)
                })
                .collect();
            Head::new(plan.head_frames, b, paths)
        });

        let groups = routes.groups();
        let mut planner = RealFftPlanner::<f32>::new();
        let mut complex_planner = rustfft::FftPlanner::<f32>::new();
        let mut levels = Vec::new();
        let mut input_reach = latency + plan.head_frames + b;
        let mut output_reach = b;
        for (li, level) in plan.levels.iter().enumerate() {
            let n = level.block_frames;
            let due = level.schedule.due_frames(n);
            // d = s - N + latency - D: read the input as late as the level's result allows, so the result
            // lands at the next frame to emit plus D. The offset rule guarantees d >= 0.
            let delay = level.offset_frames + latency - n - due;
            // Sliced jobs read their window during the whole period that follows.
            input_reach = input_reach.max(delay + 3 * n + b);
            output_reach = output_reach.max(due + n + b);
            let period_blocks = (n / b) as u64;
            for (gi, (g_inputs, g_outputs)) in groups.iter().enumerate() {
                if g_outputs.is_empty() || g_inputs.is_empty() {
                    continue;
                }
                // Distinct IR channels used by this group.
                let mut channels: Vec<usize> = Vec::new();
                let outputs: Vec<OutputTerms> = g_outputs
                    .iter()
                    .map(|&o| OutputTerms {
                        output: o,
                        terms: routes
                            .paths
                            .iter()
                            .filter(|p| p.output == o)
                            .map(|p| {
                                let local_in = g_inputs.iter().position(|&i| i == p.input).unwrap_or(0);
                                let c = match channels.iter().position(|&c| c == p.ir_channel) {
                                    Some(c) => c,
                                    None => {
                                        channels.push(p.ir_channel);
                                        channels.len() - 1
                                    }
                                };
                                (local_in, c)
                            })
                            .collect(),
                    })
                    .collect();
                let taps: Vec<&[f32]> = channels.iter().map(|&c| ir.channel(c)).collect();
                let level_ir = LevelIr::new(&taps, n, level.partitions, level.offset_frames);
                // Stagger: level li of group gi completes its input at a different block phase from its
                // neighbours, so big levels of different groups do not share a callback.
                let phase_blocks = ((li * groups.len() + gi) as u64) % period_blocks;
                let shape =
                    LevelShape { n, partitions: level.partitions, delay, lead: due, period_blocks, phase_blocks };
                let runner = LevelRunner::new(shape, &mut planner, g_inputs.clone(), outputs, level_ir);
                levels.push(match level.schedule {
                    Schedule::Sync => LevelSlot::Sync(runner),
                    Schedule::Sliced => {
                        LevelSlot::Sliced(Box::new(SlicedLevel::new(runner, &mut complex_planner, options.kernel)))
                    }
                    Schedule::Workers => {
                        // Rate-monotonic: the smallest worker level gets the highest priority.
                        let rank = plan
                            .levels
                            .iter()
                            .filter(|l| l.schedule == Schedule::Workers && l.block_frames > n)
                            .count();
                        let setup = WorkerSetup {
                            kernel: options.kernel,
                            priority: options.realtime_workers.then_some(10 + rank as i32),
                            name_index: li,
                            lateness: options.lateness,
                        };
                        LevelSlot::Workers(
                            WorkerLevel::spawn(runner, setup).map_err(|e| EngineError::Spawn(e.to_string()))?,
                        )
                    }
                });
            }
        }

        Ok(Self {
            plan: plan.clone(),
            options,
            latency,
            inputs: (0..routes.inputs).map(|_| TimeRing::new(input_reach)).collect(),
            outputs: (0..routes.outputs).map(|_| TimeRing::new(output_reach)).collect(),
            routes,
            head,
            levels,
            now: 0,
            fill: 0,
            counters: Arc::default(),
        })
    }

    /// Convolves one host call. `inputs` and `outputs` are planar, one slice per engine input and output,
    /// all of the same length from 0 to `max_host_frames`. Output frame `n` of the stream is
    /// `sum_k h[k] x[n - latency_frames - k]`.
    ///
    /// Never allocates, frees, locks, logs or waits. Non-finite input samples are replaced by zero and
    /// counted in [`Monitor::nonfinite_inputs`].
    ///
    /// # Errors
    /// [`ProcessError`] when the buffer counts or lengths are wrong; the outputs are then zeroed where
    /// possible and the engine state is unchanged.
    pub fn process(&mut self, inputs: &[&[f32]], outputs: &mut [&mut [f32]]) -> Result<(), ProcessError> {
        let frames = outputs.first().map_or(0, |o| o.len());
        if let Err(e) = self.check_call(inputs, outputs, frames) {
            for o in outputs.iter_mut() {
                o.fill(0.0);
            }
            return Err(e);
        }
        let _flush = DenormalGuard::new();
        let b = self.plan.block_frames;
        let mut bad = 0u64;
        let mut done = 0;
        while done < frames {
            let len = (frames - done).min(b - self.fill);
            for (ring, x) in self.inputs.iter_mut().zip(inputs) {
                bad += ring.write_sanitized(self.now, &x[done..done + len]);
            }
            let emit = self.now - self.latency as i64;
            for (ring, y) in self.outputs.iter_mut().zip(outputs.iter_mut()) {
                ring.take(emit, &mut y[done..done + len]);
            }
            if let Some(head) = &mut self.head {
                head.add(&self.inputs, emit, outputs, done, len);
            }
            self.now += len as i64;
            self.fill += len;
            done += len;
            if self.fill == b {
                self.fill = 0;
                self.block_boundary();
            }
        }
        if bad > 0 {
            self.counters.nonfinite_inputs.fetch_add(bad, Ordering::Relaxed);
        }
        self.publish_worker_counters();
        self.counters.frames_processed.fetch_add(frames as u64, Ordering::Relaxed);
        Ok(())
    }

    fn check_call(&self, inputs: &[&[f32]], outputs: &[&mut [f32]], frames: usize) -> Result<(), ProcessError> {
        if inputs.len() != self.routes.inputs || outputs.len() != self.routes.outputs {
            return Err(ProcessError::ChannelMismatch {
                inputs_expected: self.routes.inputs,
                outputs_expected: self.routes.outputs,
                inputs_got: inputs.len(),
                outputs_got: outputs.len(),
            });
        }
        if inputs.iter().any(|x| x.len() != frames) || outputs.iter().any(|y| y.len() != frames) {
            return Err(ProcessError::UnequalBuffers);
        }
        if frames > self.options.max_host_frames {
            return Err(ProcessError::TooManyFrames { max_host_frames: self.options.max_host_frames, got: frames });
        }
        Ok(())
    }

    /// Runs every level's work for the boundary that just passed: sync levels whose input block
    /// completed, worker hand-offs, and each sliced level's share.
    fn block_boundary(&mut self) {
        let block = (self.now / self.plan.block_frames as i64) as u64;
        let emit = self.now - self.latency as i64;
        let kernel = self.options.kernel;
        for level in &mut self.levels {
            match level {
                LevelSlot::Sync(l) => {
                    if l.due_at(block) {
                        l.run_sync(&self.inputs, &mut self.outputs, self.now, emit, kernel);
                    }
                }
                LevelSlot::Workers(w) => {
                    if w.due_at(block) {
                        w.at_boundary(&self.inputs, &mut self.outputs, self.now, emit);
                    }
                }
                LevelSlot::Sliced(s) => {
                    let release = s.due_at(block);
                    s.at_boundary(&self.inputs, &mut self.outputs, self.now, emit, release);
                }
            }
        }
    }

    /// Copies the worker levels' counters into the shared ones (plain stores, no allocation).
    fn publish_worker_counters(&self) {
        let (mut late, mut refused, mut cpu) = (0u64, 0u64, 0.0f64);
        for level in &self.levels {
            if let LevelSlot::Workers(w) = level {
                late += w.late();
                refused += w.refused();
                cpu += w.cpu_seconds();
            }
        }
        if late + refused > 0 || cpu > 0.0 {
            self.counters.late_results.store(late, Ordering::Relaxed);
            self.counters.refused_jobs.store(refused, Ordering::Relaxed);
            self.counters.worker_cpu_nanos.store((cpu * 1e9) as u64, Ordering::Relaxed);
        }
    }

    /// Cost units (butterflies, moves and multiply-accumulated bins, counted) done by sliced levels at
    /// the last block boundary: for tests and benches that check the work is spread evenly.
    #[doc(hidden)]
    pub fn sliced_cost_last_boundary(&self) -> u64 {
        self.levels.iter().map(|l| if let LevelSlot::Sliced(s) = l { s.last_cost } else { 0 }).sum()
    }

    /// Cost units of one whole job of every sliced level, with each level's period in blocks.
    #[doc(hidden)]
    pub fn sliced_job_costs(&self) -> Vec<(u64, u64)> {
        self.levels
            .iter()
            .filter_map(|l| if let LevelSlot::Sliced(s) = l { Some((s.job_cost(), s.period_blocks())) } else { None })
            .collect()
    }

    /// For each worker thread, the real-time priority granted (`Ok`), the OS error when refused
    /// (`Err`), or `None` when none was asked for. Off the audio thread (allocates the list).
    pub fn worker_priorities(&self) -> Vec<Option<Result<i32, i32>>> {
        self.levels
            .iter()
            .filter_map(|l| if let LevelSlot::Workers(w) = l { Some(w.priority()) } else { None })
            .collect()
    }

    /// Number of worker threads the engine runs.
    pub fn worker_threads(&self) -> usize {
        self.levels.iter().filter(|l| matches!(l, LevelSlot::Workers(_))).count()
    }

    /// Test hook: make every worker job take `delay` longer, to force late results.
    #[doc(hidden)]
    pub fn set_worker_test_delay(&self, delay: std::time::Duration) {
        for level in &self.levels {
            if let LevelSlot::Workers(w) = level {
                w.set_test_delay(delay);
            }
        }
    }

    /// Returns to the freshly built state: silence in every delay line and accumulator. Counters keep
    /// counting. Does not allocate.
    pub fn reset(&mut self) {
        for r in self.inputs.iter_mut().chain(self.outputs.iter_mut()) {
            r.clear();
        }
        for l in &mut self.levels {
            match l {
                LevelSlot::Sync(l) => l.clear(),
                LevelSlot::Workers(w) => w.reset(),
                LevelSlot::Sliced(s) => s.clear(),
            }
        }
        self.now = 0;
        self.fill = 0;
    }

    /// A read-only handle on the run-time counters, for another thread. Allocates nothing but an `Arc`
    /// clone; call it off the audio thread.
    pub fn monitor(&self) -> Monitor {
        Monitor { counters: Arc::clone(&self.counters) }
    }

    /// Where an impulse at input frame 0 appears in the output.
    pub fn latency_frames(&self) -> usize {
        self.latency
    }

    /// Engine block size B.
    pub fn block_frames(&self) -> usize {
        self.plan.block_frames
    }

    /// Taps the plan covers.
    pub fn ir_frames(&self) -> usize {
        self.plan.covered_frames()
    }

    /// Largest host call accepted.
    pub fn max_host_frames(&self) -> usize {
        self.options.max_host_frames
    }

    /// Number of input buffers `process()` takes.
    pub fn inputs(&self) -> usize {
        self.routes.inputs
    }

    /// Number of output buffers `process()` fills.
    pub fn outputs(&self) -> usize {
        self.routes.outputs
    }

    /// The plan the engine runs.
    pub fn plan(&self) -> &Plan {
        &self.plan
    }

    /// Bytes of audio state the engine holds: spectra, delay lines, rings and scratch (not counting
    /// small fixed-size fields or the FFT plans' twiddle tables).
    pub fn memory_bytes(&self) -> usize {
        let rings: usize = self.inputs.iter().chain(&self.outputs).map(|r| 4 * r.len()).sum();
        rings
            + self.head.as_ref().map_or(0, Head::memory_bytes)
            + self
                .levels
                .iter()
                .map(|l| match l {
                    LevelSlot::Sync(l) => l.memory_bytes(),
                    LevelSlot::Workers(w) => w.memory_bytes(),
                    LevelSlot::Sliced(s) => s.memory_bytes(),
                })
                .sum::<usize>()
    }

    /// The multiply-accumulate kernel in use.
    pub fn kernel(&self) -> Kernel {
        self.options.kernel
    }

    /// Fills every scratch buffer with `value`. For tests that prove scratch contents do not leak into
    /// the output; not part of the stable API.
    #[doc(hidden)]
    pub fn dirty_scratch(&mut self, value: f32) {
        if let Some(h) = &mut self.head {
            h.dirty(value);
        }
        for l in &mut self.levels {
            match l {
                LevelSlot::Sync(l) => l.dirty(value),
                LevelSlot::Workers(_) => {} // worker buffers belong to the worker thread
                LevelSlot::Sliced(s) => s.dirty(value),
            }
        }
    }
}
