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
use crate::ring::TimeRing;
use crate::routing::{RouteMap, Routing};

/// Counters the audio thread updates and any thread may read.
#[derive(Debug, Default)]
struct Counters {
    frames_processed: AtomicU64,
    nonfinite_inputs: AtomicU64,
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
}

/// Build-time options of an [`Engine`].
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct EngineOptions {
    /// The largest frame count a host call may carry.
    pub max_host_frames: usize,
    /// Multiply-accumulate kernel; [`Kernel::detect`] by default.
    pub kernel: Kernel,
}

impl EngineOptions {
    /// Defaults for a host calling with at most `max_host_frames` frames.
    pub fn new(max_host_frames: usize) -> Self {
        Self { max_host_frames, kernel: Kernel::detect() }
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
    levels: Vec<LevelRunner>,
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
        let mut levels = Vec::new();
        let mut input_reach = latency + plan.head_frames + b;
        let mut output_reach = b;
        for (li, level) in plan.levels.iter().enumerate() {
            let n = level.block_frames;
            let due = level.schedule.due_frames(n);
            // d = s - N + latency - D: read the input as late as the level's result allows, so the result
            // lands at the next frame to emit plus D. The offset rule guarantees d >= 0.
            let delay = level.offset_frames + latency - n - due;
            input_reach = input_reach.max(delay + 2 * n + b);
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
                levels.push(LevelRunner::new(shape, &mut planner, g_inputs.clone(), outputs, level_ir));
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

    /// Runs every level whose input block has just completed.
    fn block_boundary(&mut self) {
        let block = (self.now / self.plan.block_frames as i64) as u64;
        let emit = self.now - self.latency as i64;
        let kernel = self.options.kernel;
        for level in &mut self.levels {
            if level.due_at(block) {
                level.run_sync(&self.inputs, &mut self.outputs, self.now, emit, kernel);
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
            l.clear();
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
            + self.levels.iter().map(LevelRunner::memory_bytes).sum::<usize>()
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
            l.dirty(value);
        }
    }
}
