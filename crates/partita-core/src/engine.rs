//! The streaming engine: owns every buffer, runs a [`Plan`] on the audio thread.

use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Arc;

use realfft::RealFftPlanner;
use ringbuf::traits::{Consumer, Observer, Producer};

use crate::control::{
    queues, Command, Control, ControlEnds, EngineEnds, Event, FadeState, IrSet, Layout, LevelSpec, PreparedIr,
    StatusCells, SwapReport, PARAM_RAMP_SECONDS,
};
use crate::denormal::DenormalGuard;
use crate::error::{EngineError, ProcessError};
use crate::fdl::{LevelIo, LevelRunner, LevelShape, OutputTerms};
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

impl LevelSlot {
    /// Level block N and the lead of its results (frames from the next output to emit at a release to
    /// the first frame the result covers).
    fn geometry(&self) -> (usize, usize) {
        match self {
            Self::Sync(l) => (l.n(), l.lead),
            Self::Workers(w) => (w.n(), w.lead()),
            Self::Sliced(s) => (s.n(), s.lead()),
        }
    }

    /// True while work in flight still reads IR slot `slot`.
    fn holds(&self, slot: usize) -> bool {
        match self {
            Self::Sync(_) => false,
            Self::Workers(w) => w.holds(slot),
            Self::Sliced(s) => s.holds(slot),
        }
    }
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
    /// The longest pre-delay [`Command::PreDelayFrames`] may ask for; 0 (none) by default. Costs
    /// 4 bytes per frame and output.
    pub max_predelay_frames: usize,
}

impl EngineOptions {
    /// Defaults for a host calling with at most `max_host_frames` frames.
    pub fn new(max_host_frames: usize) -> Self {
        Self {
            max_host_frames,
            kernel: Kernel::detect(),
            realtime_workers: false,
            lateness: Lateness::default(),
            max_predelay_frames: 0,
        }
    }
}

/// A per-sample linear ramp towards a target. Each value is computed from the start point (not by
/// accumulating steps), so a long ramp carries no rounding drift.
#[derive(Debug, Clone, Copy)]
struct Ramp {
    value: f32,
    from: f32,
    target: f32,
    k: u32,
    frames: u32,
}

impl Ramp {
    fn new(value: f32) -> Self {
        Self { value, from: value, target: value, k: 0, frames: 0 }
    }

    /// Ramps to `target` over `frames` samples (at once for 0).
    fn set(&mut self, target: f32, frames: u32) {
        self.from = self.value;
        self.target = target;
        self.k = 0;
        self.frames = frames;
        if frames == 0 {
            self.value = target;
        }
    }

    /// The value for the next sample: `from + (target - from) (k + 1) / frames` for the k-th sample
    /// after `set`, `target` from the last one on.
    fn next(&mut self) -> f32 {
        if self.k < self.frames {
            self.k += 1;
            self.value = if self.k == self.frames {
                self.target
            } else {
                self.from + (self.target - self.from) * (self.k as f32 / self.frames as f32)
            };
        }
        self.value
    }

    fn idle(&self) -> bool {
        self.k >= self.frames
    }
}

/// The mix parameters, smoothed.
#[derive(Debug, Clone, Copy)]
struct Mix {
    wet: Ramp,
    dry: Ramp,
    out: Ramp,
    bypass: Ramp,
    /// Wet envelope for resets: 1, or fading to 0 and back.
    env: Ramp,
    /// Pre-delay read taps: from `pd_from` to `pd_to`, crossfaded by `pd_x`.
    pd_from: usize,
    pd_to: usize,
    pd_x: Ramp,
    ramp_frames: u32,
}

impl Mix {
    /// Every parameter at its default and at rest: wet 1, dry 0, output 0 dB, no bypass, no pre-delay.
    fn is_identity(&self) -> bool {
        let at = |r: &Ramp, v: f32| r.idle() && r.value == v;
        at(&self.wet, 1.0)
            && at(&self.dry, 0.0)
            && at(&self.out, 1.0)
            && at(&self.bypass, 0.0)
            && at(&self.env, 1.0)
            && self.pd_x.idle()
            && self.pd_to == 0
            && self.pd_from == 0
    }
}

/// A swap in progress, in this engine's frame coordinates (`emit` frames).
#[derive(Debug, Clone, Copy)]
struct SwapRun {
    old: usize,
    new: usize,
    picked: i64,
    start: i64,
    end: i64,
    /// The new IR is the primary one (the fade is over).
    flipped: bool,
    /// Last frame (exclusive) any old-IR result was delivered to.
    old_until: i64,
}

impl SwapRun {
    /// Weight of the new IR at frame `f`: the raised cosine of [`crate::control`].
    fn weight(&self, f: i64) -> f32 {
        if f < self.start {
            0.0
        } else if f >= self.end {
            1.0
        } else {
            let t = (f - self.start) as f64 / (self.end - self.start) as f64;
            (0.5 - 0.5 * (std::f64::consts::PI * t).cos()) as f32
        }
    }
}

/// A control reset in progress.
#[derive(Debug, Clone, Copy)]
enum ResetPhase {
    /// The wet envelope fades to 0.
    FadeOut,
    /// State is zeroed a slice per block: item (input ring, output ring, pre-delay ring, level) and
    /// position in it.
    Sweep { item: usize, pos: usize },
}

/// Samples zeroed per block boundary while a reset sweeps (256 KiB: tens of microseconds).
const SWEEP_SAMPLES: usize = 65_536;

/// A partitioned convolution engine for one stream.
///
/// Built off the audio thread (building allocates everything); [`process`](Self::process) then never
/// allocates, frees, locks, logs or waits. [`control`](Self::control) gives the handle that swaps IRs
/// and changes parameters while it runs.
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
    /// Accumulator rings per IR slot.
    outputs: [Vec<TimeRing>; 2],
    /// The input again, for the dry signal and bypass (kept while a reset zeroes `inputs`). Written only
    /// while `dry_live`: seeded from `inputs` when a command first needs it.
    dry: Vec<TimeRing>,
    dry_live: bool,
    /// Wet signal history per output, for the pre-delay (empty without one).
    predelay: Vec<TimeRing>,
    head: Option<Head>,
    levels: Vec<LevelSlot>,
    /// Per level slot: the end (exclusive frame) of the last result released.
    cover_end: Vec<i64>,
    /// The IRs in the two slots; `active` is heard when no swap runs.
    irs: [Option<Box<IrSet>>; 2],
    active: usize,
    swap: Option<SwapRun>,
    reset: Option<ResetPhase>,
    mix: Mix,
    /// Scratch: wet signal per IR slot and output, pre-delay taps, dry, gains (one block each).
    wet: [Vec<Vec<f32>>; 2],
    tap_a: Vec<f32>,
    tap_b: Vec<f32>,
    dry_chunk: Vec<f32>,
    gains: [Vec<f32>; 5],
    /// Input frames received since start or reset.
    now: i64,
    /// Output frames emitted before the last `reset()` restarted `now` at 0.
    frame_base: u64,
    /// Frames into the current engine block.
    fill: usize,
    counters: Arc<Counters>,
    status: Arc<StatusCells>,
    ends: EngineEnds,
    control: Option<ControlEnds>,
    layout: Arc<Layout>,
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

        let head = (plan.head_frames > 0)
            .then(|| Head::new(plan.head_frames, b, routes.paths.iter().map(|p| (p.input, p.output)).collect()));
        let head_channels: Vec<usize> =
            if plan.head_frames > 0 { routes.paths.iter().map(|p| p.ir_channel).collect() } else { Vec::new() };

        // First the level layout (which IR channels each level slot transforms), then the IR's spectra.
        let groups = routes.groups();
        // A `workers` or `sliced` level runs every group in one job: one wake-up (or one step list) per
        // release instead of one per group. Their hand-offs are chunked and their work spread, so the
        // staggering of groups that keeps big `sync` levels apart is not needed there. Measured side by
        // side on S1 (BENCHMARKS.md): about 10% less paced load for both schedules.
        // Groups without a path (an unused input or output) are left out, as below.
        let merged = vec![groups.iter().filter(|(gi, go)| !gi.is_empty() && !go.is_empty()).fold(
            (Vec::new(), Vec::new()),
            |(mut i, mut o), (gi, go)| {
                i.extend_from_slice(gi);
                o.extend_from_slice(go);
                (i, o)
            },
        )];
        let mut specs = Vec::new();
        let mut slots = Vec::new();
        for (li, level) in plan.levels.iter().enumerate() {
            let level_groups = if level.schedule != Schedule::Sync { &merged } else { &groups };
            for (gi, (g_inputs, g_outputs)) in level_groups.iter().enumerate() {
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
                specs.push(LevelSpec {
                    n: level.block_frames,
                    partitions: level.partitions,
                    offset: level.offset_frames,
                    channels,
                });
                slots.push((li, gi, level_groups.len(), g_inputs.clone(), outputs));
            }
        }
        let layout = Arc::new(Layout::new(
            ir.channels(),
            plan.covered_frames(),
            ir.sample_rate_hz(),
            (plan.head_frames, head_channels),
            specs,
            options.max_predelay_frames,
        ));
        // One planner for the IR and the levels, so each FFT size's twiddles are computed once.
        let mut planner = RealFftPlanner::<f32>::new();
        let first = layout.prepare_with(ir, &mut planner).map_err(EngineError::Control)?;
        let mut complex_planner = rustfft::FftPlanner::<f32>::new();
        let mut levels = Vec::new();
        let mut input_reach = latency + plan.head_frames + b;
        let mut output_reach = b;
        for (li, gi, group_count, g_inputs, outputs) in slots {
            let level = &plan.levels[li];
            let n = level.block_frames;
            let due = level.schedule.due_frames(n);
            // d = s - N + latency - D: read the input as late as the level's result allows, so the result
            // lands at the next frame to emit plus D. The offset rule guarantees d >= 0.
            let delay = level.offset_frames + latency - n - due;
            // Sliced jobs read their window during the whole period that follows.
            input_reach = input_reach.max(delay + 3 * n + b);
            output_reach = output_reach.max(due + n + b);
            let period_blocks = (n / b) as u64;
            // Stagger: level li of group gi completes its input at a different block phase from its
            // neighbours, so big levels of different groups do not share a callback.
            let phase_blocks = ((li * group_count + gi) as u64) % period_blocks;
            let shape = LevelShape { n, partitions: level.partitions, delay, lead: due, period_blocks, phase_blocks };
            let runner = LevelRunner::new(shape, &mut planner, g_inputs, outputs);
            levels.push(match level.schedule {
                Schedule::Sync => LevelSlot::Sync(runner),
                Schedule::Sliced => {
                    LevelSlot::Sliced(Box::new(SlicedLevel::new(runner, &mut complex_planner, options.kernel)))
                }
                Schedule::Workers => {
                    // Rate-monotonic: the smallest worker level gets the highest priority.
                    let rank =
                        plan.levels.iter().filter(|l| l.schedule == Schedule::Workers && l.block_frames > n).count();
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

        let ramp_frames = ((PARAM_RAMP_SECONDS * f64::from(ir.sample_rate_hz())).round() as u32).max(1);
        let (ends, control) = queues();
        let q = routes.outputs;
        let ring_set = || (0..q).map(|_| TimeRing::new(output_reach)).collect::<Vec<_>>();
        let scratch = || (0..q).map(|_| vec![0.0f32; b]).collect::<Vec<_>>();
        let pd = options.max_predelay_frames;
        Ok(Self {
            plan: plan.clone(),
            options,
            latency,
            inputs: (0..routes.inputs).map(|_| TimeRing::new(input_reach)).collect(),
            outputs: [ring_set(), ring_set()],
            dry: (0..routes.inputs).map(|_| TimeRing::new(latency + b + 1)).collect(),
            dry_live: false,
            predelay: if pd > 0 { (0..q).map(|_| TimeRing::new(pd + b + 1)).collect() } else { Vec::new() },
            routes,
            head,
            cover_end: vec![i64::MIN; levels.len()],
            levels,
            irs: [Some(Box::new(first)), None],
            active: 0,
            swap: None,
            reset: None,
            mix: Mix {
                wet: Ramp::new(1.0),
                dry: Ramp::new(0.0),
                out: Ramp::new(1.0),
                bypass: Ramp::new(0.0),
                env: Ramp::new(1.0),
                pd_from: 0,
                pd_to: 0,
                pd_x: Ramp::new(1.0),
                ramp_frames,
            },
            wet: [scratch(), scratch()],
            tap_a: vec![0.0; b],
            tap_b: vec![0.0; b],
            dry_chunk: vec![0.0; b],
            gains: std::array::from_fn(|_| vec![0.0; b]),
            now: 0,
            frame_base: 0,
            fill: 0,
            counters: Arc::default(),
            status: Arc::default(),
            ends,
            control: Some(control),
            layout,
        })
    }

    /// The control handle for this engine: IR swaps, parameters, status. There is one; later calls
    /// return `None`. Call it off the audio thread (it allocates a little).
    pub fn control(&mut self) -> Option<Control> {
        let ends = self.control.take()?;
        Some(Control::new(ends, Arc::clone(&self.layout), Arc::clone(&self.status), self.monitor()))
    }

    /// Convolves one host call. `inputs` and `outputs` are planar, one slice per engine input and output,
    /// all of the same length from 0 to `max_host_frames`. With the default parameters, output frame `n`
    /// of the stream is `sum_k h[k] x[n - latency_frames - k]`.
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
        let mut peak = 0.0f32;
        let mut done = 0;
        while done < frames {
            let len = (frames - done).min(b - self.fill);
            let sweeping = matches!(self.reset, Some(ResetPhase::Sweep { .. }));
            for ((ring, dry), x) in self.inputs.iter_mut().zip(&mut self.dry).zip(inputs) {
                let x = &x[done..done + len];
                if self.dry_live {
                    bad += dry.write_sanitized(self.now, x);
                    if sweeping {
                        ring.write_zeros(self.now, len);
                    } else {
                        ring.write_sanitized(self.now, x);
                    }
                } else {
                    bad += ring.write_sanitized(self.now, x);
                }
            }
            peak = peak.max(self.render(outputs, done, len));
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
        if peak > 0.0 && peak.to_bits() > self.status.peak_bits.load(Ordering::Relaxed) {
            self.status.peak_bits.fetch_max(peak.to_bits(), Ordering::AcqRel);
        }
        self.publish_worker_counters();
        self.counters.frames_processed.fetch_add(frames as u64, Ordering::Relaxed);
        Ok(())
    }

    /// Emits output frames `[emit, emit + len)` into `outputs[..][at..at + len]`: the wet signal of each
    /// IR slot in use (accumulators plus head), the swap crossfade, pre-delay, gains and bypass. Returns
    /// the peak absolute output.
    fn render(&mut self, outputs: &mut [&mut [f32]], at: usize, len: usize) -> f32 {
        let emit = self.now - self.latency as i64;
        let (first, second) = match &self.swap {
            Some(s) => (s.old, Some(s.new)),
            None => (self.active, None),
        };
        if second.is_none() && self.reset.is_none() && self.predelay.is_empty() && self.mix.is_identity() {
            // Default parameters, no swap, no pre-delay line to feed: the output is the wet signal itself.
            let mut peak = 0.0f32;
            for (o, y) in outputs.iter_mut().enumerate() {
                let y = &mut y[at..at + len];
                self.outputs[first][o].take(emit, y);
                peak = peak.max(peak_abs(y));
            }
            if let (Some(head), Some(ir)) = (&mut self.head, &self.irs[first]) {
                let wet = &mut self.wet[first];
                for w in wet.iter_mut() {
                    w[..len].fill(0.0);
                }
                head.add(&self.inputs, emit, wet, len, &ir.head);
                peak = 0.0;
                for (y, w) in outputs.iter_mut().zip(wet.iter()) {
                    let y = &mut y[at..at + len];
                    for (v, h) in y.iter_mut().zip(&w[..len]) {
                        *v += h;
                    }
                    peak = peak.max(peak_abs(y));
                }
            }
            return peak;
        }
        for slot in std::iter::once(first).chain(second) {
            let wet = &mut self.wet[slot];
            for (ring, w) in self.outputs[slot].iter_mut().zip(wet.iter_mut()) {
                ring.take(emit, &mut w[..len]);
            }
            if let (Some(head), Some(ir)) = (&mut self.head, &self.irs[slot]) {
                head.add(&self.inputs, emit, wet, len, &ir.head);
            }
        }
        let sweeping = matches!(self.reset, Some(ResetPhase::Sweep { .. }));
        // Gains for this chunk, shared by every output.
        let m = &mut self.mix;
        if m.pd_x.idle() {
            m.pd_from = m.pd_to; // the last pre-delay crossfade ended in an earlier chunk
        }
        let [g_wet, g_dry, g_by, g_w, g_pd] = &mut self.gains;
        for j in 0..len {
            let out = m.out.next();
            g_wet[j] = m.wet.next() * m.env.next() * out;
            g_dry[j] = m.dry.next() * out;
            g_by[j] = m.bypass.next();
            g_pd[j] = m.pd_x.next();
            g_w[j] = self.swap.as_ref().map_or(0.0, |s| s.weight(emit + j as i64));
        }
        let (pd_from, pd_to) = (m.pd_from, m.pd_to);
        let mut peak = 0.0f32;
        let inputs = self.routes.inputs;
        for (o, y) in outputs.iter_mut().enumerate() {
            let y = &mut y[at..at + len];
            // The wet signal: one slot, or the crossfade of two.
            let a = &self.wet[first][o][..len];
            match second {
                Some(sn) => {
                    let bw = &self.wet[sn][o][..len];
                    for j in 0..len {
                        y[j] = (1.0 - g_w[j]) * a[j] + g_w[j] * bw[j];
                    }
                }
                None => y.copy_from_slice(a),
            }
            if sweeping {
                y.fill(0.0);
            }
            if let Some(ring) = self.predelay.get_mut(o) {
                ring.write(emit, y);
                ring.read(emit - pd_from as i64, &mut self.tap_a[..len]);
                if pd_from == pd_to {
                    y.copy_from_slice(&self.tap_a[..len]);
                } else {
                    ring.read(emit - pd_to as i64, &mut self.tap_b[..len]);
                    for j in 0..len {
                        y[j] = (1.0 - g_pd[j]) * self.tap_a[j] + g_pd[j] * self.tap_b[j];
                    }
                }
            }
            let dry = &mut self.dry_chunk[..len];
            self.dry[o % inputs].read(emit, dry);
            for j in 0..len {
                let mixed = g_wet[j] * y[j] + g_dry[j] * dry[j];
                let v = (1.0 - g_by[j]) * mixed + g_by[j] * dry[j];
                y[j] = v;
                peak = peak.max(v.abs());
            }
        }
        peak
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

    /// Output frame number (since the engine was built) of engine frame `emit`.
    fn out_frame(&self, emit: i64) -> u64 {
        (emit + self.latency as i64).max(0) as u64 + self.frame_base
    }

    /// At every block boundary: control messages, the reset and swap state machines, then every level's
    /// work for the boundary that just passed (sync levels whose input block completed, worker
    /// hand-offs, each sliced level's share).
    fn block_boundary(&mut self) {
        let emit = self.now - self.latency as i64;
        self.apply_commands(emit);
        self.advance_reset(emit);
        self.advance_swap(emit);
        if matches!(self.reset, Some(ResetPhase::Sweep { .. })) {
            return; // levels pause while their state is zeroed
        }
        let block = (self.now / self.plan.block_frames as i64) as u64;
        let kernel = self.options.kernel;
        let Self { levels, irs, outputs, inputs, swap, active, cover_end, now, .. } = self;
        for (k, level) in levels.iter_mut().enumerate() {
            let level_irs = [irs[0].as_ref().map(|s| &s.levels[k]), irs[1].as_ref().map(|s| &s.levels[k])];
            let (n, lead) = level.geometry();
            let start = emit + lead as i64;
            let io = LevelIo { inputs, outputs: &mut *outputs, now: *now, emit };
            let mask = match level {
                LevelSlot::Sync(l) => l.due_at(block),
                LevelSlot::Workers(w) => w.due_at(block),
                LevelSlot::Sliced(s) => s.due_at(block),
            }
            .then(|| {
                cover_end[k] = start + n as i64;
                match swap {
                    None => 1 << *active,
                    Some(s) if start < s.end => {
                        s.old_until = s.old_until.max(start + n as i64);
                        (1 << s.new) | (1 << s.old)
                    }
                    Some(s) => 1 << s.new,
                }
            });
            match level {
                LevelSlot::Sync(l) => {
                    if let Some(mask) = mask {
                        l.run_sync(io, level_irs, mask, kernel);
                    }
                }
                LevelSlot::Workers(w) => {
                    if mask.is_some() || w.active_at(block) {
                        w.at_boundary(io, level_irs, mask);
                    }
                }
                LevelSlot::Sliced(s) => s.at_boundary(io, level_irs, mask),
            }
        }
    }

    /// Applies queued commands (all of them, unless a reset is already running: the rest wait).
    fn apply_commands(&mut self, emit: i64) {
        let r = self.mix.ramp_frames;
        while self.reset.is_none() {
            let Some(command) = self.ends.commands.try_pop() else { break };
            match command {
                Command::WetGain(g) => self.mix.wet.set(finite_or(g, self.mix.wet.target), r),
                Command::DryGain(g) => self.mix.dry.set(finite_or(g, self.mix.dry.target), r),
                Command::OutputGainDb(db) => {
                    let g = 10f32.powf(finite_or(db, 0.0) / 20.0);
                    self.mix.out.set(finite_or(g, self.mix.out.target), r);
                }
                Command::PreDelayFrames(d) => {
                    if !self.predelay.is_empty() && d <= self.options.max_predelay_frames {
                        // Finish a running pre-delay crossfade at its target, then fade to the new one.
                        self.mix.pd_from = self.mix.pd_to;
                        self.mix.pd_to = d;
                        self.mix.pd_x = Ramp::new(0.0);
                        self.mix.pd_x.set(1.0, r);
                    }
                }
                Command::Bypass(on) => self.mix.bypass.set(if on { 1.0 } else { 0.0 }, r),
                Command::Reset => {
                    self.mix.env.set(0.0, r);
                    self.reset = Some(ResetPhase::FadeOut);
                    continue; // reported when the wet signal starts fading back in
                }
            }
            self.report(command, emit);
        }
        self.update_dry_live();
    }

    /// Keeps the dry ring written while the dry signal, bypass or a reset may read it; when it starts,
    /// seeds it with the history it needs from the input rings (at most two blocks, no allocation).
    fn update_dry_live(&mut self) {
        let m = &self.mix;
        let needed = m.dry.target != 0.0
            || m.dry.value != 0.0
            || m.bypass.target != 0.0
            || m.bypass.value != 0.0
            || self.reset.is_some();
        if needed && !self.dry_live {
            let b = self.plan.block_frames;
            let from = self.now - (self.latency + b) as i64;
            for (ring, dry) in self.inputs.iter().zip(&mut self.dry) {
                let mut at = from;
                while at < self.now {
                    let n = ((self.now - at) as usize).min(b);
                    ring.read(at, &mut self.tap_a[..n]);
                    dry.write(at, &self.tap_a[..n]);
                    at += n as i64;
                }
            }
        }
        self.dry_live = needed;
    }

    /// Sends an `Applied` event if the queue has room beyond what retired IRs may need.
    fn report(&mut self, command: Command, emit: i64) {
        let frame = self.out_frame(emit);
        if self.ends.events.vacant_len() > 8 {
            let _ = self.ends.events.try_push(Event::Applied { command, frame });
        } else {
            self.status.events_dropped.fetch_add(1, Ordering::Relaxed);
        }
    }

    /// Moves a control reset along: after the fade-out, zero a slice of state per boundary; when all is
    /// zero, fade the wet signal back in.
    fn advance_reset(&mut self, emit: i64) {
        match self.reset {
            None => {}
            Some(ResetPhase::FadeOut) if self.mix.env.idle() => {
                for level in &mut self.levels {
                    if let LevelSlot::Workers(w) = level {
                        w.reset();
                    }
                }
                self.reset = Some(ResetPhase::Sweep { item: 0, pos: 0 });
            }
            Some(ResetPhase::FadeOut) => {}
            Some(ResetPhase::Sweep { item, pos }) => {
                // One item (or a slice of one) per boundary.
                self.reset = match self.sweep_item(item, pos, SWEEP_SAMPLES) {
                    SweepStep::More(pos) => Some(ResetPhase::Sweep { item, pos }),
                    SweepStep::Done => Some(ResetPhase::Sweep { item: item + 1, pos: 0 }),
                    SweepStep::End => {
                        self.mix.env.set(1.0, self.mix.ramp_frames);
                        self.report(Command::Reset, emit);
                        None
                    }
                };
            }
        }
    }

    /// Zeroes up to `budget` samples of sweep item `item` from `pos`.
    fn sweep_item(&mut self, item: usize, pos: usize, budget: usize) -> SweepStep {
        let ring = |r: &mut TimeRing| match crate::fdl::sweep(std::iter::once(r.samples_mut()), pos, budget) {
            Some(p) => SweepStep::More(p),
            None => SweepStep::Done,
        };
        let mut k = item;
        if k < self.inputs.len() {
            return ring(&mut self.inputs[k]);
        }
        k -= self.inputs.len();
        for set in &mut self.outputs {
            if k < set.len() {
                return ring(&mut set[k]);
            }
            k -= set.len();
        }
        if k < self.predelay.len() {
            return ring(&mut self.predelay[k]);
        }
        k -= self.predelay.len();
        let Some(level) = self.levels.get_mut(k) else { return SweepStep::End };
        let next = match level {
            LevelSlot::Sync(l) => l.sweep(pos, budget),
            LevelSlot::Sliced(s) => s.sweep(pos, budget),
            LevelSlot::Workers(_) => None, // the worker zeroes its own state before its next job
        };
        match next {
            Some(p) => SweepStep::More(p),
            None => SweepStep::Done,
        }
    }

    /// Moves a swap along: flip to the new IR when the crossfade ends, hand the old IR back once no work
    /// in flight reads it, finish when its accumulators have drained; or pick up a queued swap.
    fn advance_swap(&mut self, emit: i64) {
        if let Some(mut s) = self.swap {
            if !s.flipped && emit >= s.end {
                s.flipped = true;
                self.active = s.new;
                self.status.swaps_completed.fetch_add(1, Ordering::AcqRel);
            }
            if s.flipped && self.irs[s.old].is_some() && !self.levels.iter().any(|l| l.holds(s.old)) {
                if let Some(set) = self.irs[s.old].take() {
                    let new_id = self.irs[s.new].as_ref().map_or(0, |n| n.id);
                    let report = SwapReport {
                        new_id,
                        old_id: set.id,
                        picked_up: self.out_frame(s.picked),
                        fade_start: self.out_frame(s.start),
                        fade_end: self.out_frame(s.end),
                    };
                    if let Err(Event::Retired { ir, .. }) =
                        self.ends.events.try_push(Event::Retired { ir: PreparedIr { set }, report })
                    {
                        self.irs[s.old] = Some(ir.set); // the queue is full: try again next boundary
                    }
                }
            }
            let state = if self.irs[s.old].is_none() && emit >= s.old_until {
                self.swap = None;
                FadeState::Steady
            } else {
                self.swap = Some(s);
                if s.flipped {
                    FadeState::Retiring
                } else if emit < s.start {
                    FadeState::Pending
                } else {
                    FadeState::Crossfading
                }
            };
            self.status.fade_state.store(state.to_u8(), Ordering::Release);
            if self.swap.is_some() {
                return;
            }
        }
        if self.reset.is_some() {
            return;
        }
        let Some(request) = self.ends.swaps.try_pop() else { return };
        let new = 1 - self.active;
        let id = request.set.id;
        self.irs[new] = Some(request.set);
        // The crossfade starts where no result computed before this boundary reaches.
        let start = self.cover_end.iter().copied().fold(emit, i64::max);
        let end = start + request.fade_frames as i64;
        self.swap = Some(SwapRun { old: self.active, new, picked: emit, start, end, flipped: false, old_until: emit });
        self.status.fade_start.store(self.out_frame(start), Ordering::Release);
        self.status.fade_end.store(self.out_frame(end), Ordering::Release);
        self.status.ir_id.store(id, Ordering::Release);
        let state = if emit < start { FadeState::Pending } else { FadeState::Crossfading };
        self.status.fade_state.store(state.to_u8(), Ordering::Release);
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

    /// Returns to the freshly built state at once: silence in every delay line and accumulator, the
    /// block grid restarted. Counters keep counting, parameters and a swap in progress carry on.
    /// Does not allocate, but zeroes all the engine's state in one call (milliseconds for a long IR):
    /// on a running stream, send [`Command::Reset`] instead, which spreads the work.
    pub fn reset(&mut self) {
        for r in self.inputs.iter_mut().chain(self.outputs.iter_mut().flatten()).chain(&mut self.predelay) {
            r.clear();
        }
        for l in &mut self.levels {
            match l {
                LevelSlot::Sync(l) => l.clear(),
                LevelSlot::Workers(w) => w.reset(),
                LevelSlot::Sliced(s) => s.clear(),
            }
        }
        // Restart the frame grid at 0 (so the levels' phases match a fresh engine's) and move every
        // frame number the engine keeps by the same amount.
        let shift = self.now;
        self.frame_base += shift.max(0) as u64;
        if let Some(s) = &mut self.swap {
            s.picked -= shift;
            s.start -= shift;
            s.end -= shift;
            s.old_until -= shift;
        }
        for c in &mut self.cover_end {
            *c = c.saturating_sub(shift);
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

    /// Taps the plan covers: the longest IR the engine (and [`Control::prepare`]) accepts.
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

    /// Bytes of audio state the engine holds: IR spectra (one IR; a swap holds a second one while it
    /// runs), delay lines, rings and scratch (not counting small fixed-size fields or the FFT plans'
    /// twiddle tables).
    pub fn memory_bytes(&self) -> usize {
        let rings: usize = self
            .inputs
            .iter()
            .chain(self.outputs.iter().flatten())
            .chain(&self.dry)
            .chain(&self.predelay)
            .map(|r| 4 * r.len())
            .sum();
        let scratch = 4 * self.plan.block_frames * (2 * self.routes.outputs + 3 + 5);
        let irs = self.irs.iter().flatten().map(|s| s.memory_bytes()).max().unwrap_or(0);
        rings
            + scratch
            + irs
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
        for w in self.wet.iter_mut().flatten() {
            w.fill(value);
        }
        for v in [&mut self.tap_a, &mut self.tap_b, &mut self.dry_chunk].into_iter().chain(&mut self.gains) {
            v.fill(value);
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

/// Where a reset sweep stands after one call.
enum SweepStep {
    /// The item has more to zero from this position.
    More(usize),
    /// The item is zero; go on with the next.
    Done,
    /// Every item is zero.
    End,
}

/// The largest |v| of `y` (NaN counts as the largest), by the bit patterns so it vectorizes: the
/// magnitudes of non-negative IEEE 754 floats order like their bits as unsigned integers.
fn peak_abs(y: &[f32]) -> f32 {
    f32::from_bits(y.iter().fold(0u32, |m, v| m.max(v.to_bits() & 0x7fff_ffff)))
}

/// `v` when finite, else `fallback` (a NaN gain from the control side must not reach the output).
fn finite_or(v: f32, fallback: f32) -> f32 {
    if v.is_finite() {
        v
    } else {
        fallback
    }
}
