//! The streaming engine: owns every buffer, runs a [`Plan`] on the audio thread.
//!
//! Rooms, each owning its state: [`slots`] (the slot layout, plain data computed before anything is
//! allocated), [`mix`] (the output mix), [`swap`] (the two IR slots and the swap between them), [`reset`]
//! (the spread reset). The levels themselves live in [`crate::level`].

use std::sync::atomic::Ordering;
use std::sync::Arc;

use realfft::RealFftPlanner;
use ringbuf::traits::{Consumer, Observer, Producer};

use crate::control::wire::{queues, Command, ControlEnds, Counters, EngineEnds, Event, Monitor, StatusCells};
use crate::control::{check_command, Control};
use crate::denormal::DenormalGuard;
use crate::error::{EngineError, ProcessError, SendError};
use crate::head::Head;
use crate::ir::ImpulseResponse;
use crate::kernel::Kernel;
use crate::level::fdl::{LevelIo, LevelRunner};
use crate::level::sliced::SlicedLevel;
use crate::level::workers::{Lateness, WorkerLevel, WorkerSetup};
use crate::level::{LevelSlot, WorkerCounts};
use crate::plan::planner::min_worker_level_frames;
use crate::plan::{Plan, Schedule};
use crate::prepared::{LevelSpec, SpectraRecipe};
use crate::ring::{Sanitized, TimeRing};
use crate::routing::{RouteMap, Routing};

pub(crate) mod mix;
mod options;
pub(crate) mod reset;
pub(crate) mod slots;
pub(crate) mod swap;

pub use mix::Mix;
use mix::{OutputStage, Taken, WetSources};
pub use options::EngineOptions;
use reset::{ResetPhase, SweepItems, SweepStep, SWEEP_SAMPLES};
use slots::SlotLayout;
use swap::IrSlots;

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
#[must_use = "an engine does nothing until `process` is called"]
pub struct Engine {
    plan: Plan,
    routes: RouteMap,
    options: EngineOptions,
    latency: usize,
    inputs: Vec<TimeRing>,
    /// Accumulator rings per IR slot.
    acc: [Vec<TimeRing>; 2],
    head: Option<Head>,
    levels: Vec<LevelSlot>,
    /// Per level slot: the end (exclusive frame) of the last result released.
    cover_end: Vec<i64>,
    irs: IrSlots,
    reset: Option<ResetPhase>,
    out: OutputStage,
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
    recipe: Arc<SpectraRecipe>,
    /// Commands queued on the audio thread itself ([`Engine::send`]): a fixed capacity, never grown; read
    /// from `local_read` on at block boundaries, after the control queue's.
    local: Vec<Command>,
    local_read: usize,
    /// Whether the shape has a dry signal (computed at build: the check on the audio thread must not allocate).
    has_dry: bool,
}

/// Commands [`Engine::send`] holds until the next block boundary.
const LOCAL_COMMANDS: usize = 64;

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
    /// As [`Engine::new`], and [`EngineError::Mix`] when the initial mix does not fit the engine.
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
        for (what, frames, limit_frames) in [
            ("max_host_frames", options.max_host_frames, EngineOptions::MAX_HOST_FRAMES),
            ("max_predelay_frames", options.max_predelay_frames, EngineOptions::MAX_PREDELAY_FRAMES),
        ] {
            if frames > limit_frames {
                return Err(EngineError::OptionTooLarge { what, frames, limit_frames });
            }
        }
        if ir.frames() > plan.covered_frames() {
            return Err(EngineError::IrLongerThanPlan { ir_frames: ir.frames(), plan_frames: plan.covered_frames() });
        }
        let routes = routing.resolve(ir.channels())?;
        options.mix.check(routes.inputs, routes.outputs, options.max_predelay_frames)?;
        let min_worker = min_worker_level_frames(plan.block_frames, options.host_period_frames);
        if let Some(level) = plan.levels.iter().find(|l| l.schedule == Schedule::Workers && l.block_frames < min_worker)
        {
            return Err(EngineError::WorkerLevelTooShort {
                level_frames: level.block_frames,
                host_period_frames: options.host_period_frames.unwrap_or(plan.block_frames),
            });
        }
        let b = plan.block_frames;
        let latency = plan.latency_frames();

        let head = (plan.head_frames > 0)
            .then(|| Head::new(plan.head_frames, b, routes.paths.iter().map(|p| (p.input, p.output)).collect()));
        let head_channels: Vec<usize> =
            if plan.head_frames > 0 { routes.paths.iter().map(|p| p.ir_channel).collect() } else { Vec::new() };

        // First the slot layout (which IR channels each level slot transforms), then the IR's spectra.
        let layout = SlotLayout::new(plan, &routes);
        let specs = layout
            .slots
            .iter()
            .map(|s| LevelSpec {
                n: s.shape.n,
                partitions: s.shape.partitions,
                offset: s.offset_frames,
                channels: s.ir_channels.clone(),
            })
            .collect();
        let recipe = Arc::new(SpectraRecipe::new(
            ir.channels(),
            plan.covered_frames(),
            ir.sample_rate_hz(),
            (plan.head_frames, head_channels),
            specs,
            options.max_predelay_frames,
        ));
        // One planner for the IR and the levels, so each FFT size's twiddles are computed once.
        let mut planner = RealFftPlanner::<f32>::new();
        let first = recipe.prepare_with(ir, &mut planner).map_err(EngineError::Control)?;
        let mut complex_planner = rustfft::FftPlanner::<f32>::new();
        let mut levels = Vec::with_capacity(layout.slots.len());
        for slot in &layout.slots {
            let runner = LevelRunner::new(slot.shape, &mut planner, slot.inputs.clone(), slot.outputs.clone());
            levels.push(match slot.schedule {
                Schedule::Sync => LevelSlot::Sync(runner),
                Schedule::Sliced => {
                    LevelSlot::Sliced(Box::new(SlicedLevel::new(runner, &mut complex_planner, options.kernel)))
                }
                Schedule::Workers => {
                    // Rate-monotonic: the smallest worker level gets the highest priority.
                    let n = slot.shape.n;
                    let rank =
                        plan.levels.iter().filter(|l| l.schedule == Schedule::Workers && l.block_frames > n).count();
                    let setup = WorkerSetup {
                        kernel: options.kernel,
                        priority: options.realtime_workers.then_some(10 + rank as i32),
                        name_index: slot.level,
                        lateness: if options.offline { Lateness::Wait } else { options.lateness },
                    };
                    LevelSlot::Workers(
                        WorkerLevel::spawn(runner, setup).map_err(|e| EngineError::Spawn(e.to_string()))?,
                    )
                }
            });
        }

        let (ends, control) = queues();
        let has_dry = mix::dry_sources(routes.inputs, routes.outputs).is_some();
        let q = routes.outputs;
        let ring_set = || (0..q).map(|_| TimeRing::new(layout.output_reach)).collect::<Vec<_>>();
        let out = OutputStage::new(
            routes.inputs,
            q,
            (b, latency),
            ir.sample_rate_hz(),
            options.max_predelay_frames,
            &options.mix,
        );
        Ok(Self {
            plan: plan.clone(),
            options,
            latency,
            inputs: (0..routes.inputs).map(|_| TimeRing::new(layout.input_reach)).collect(),
            acc: [ring_set(), ring_set()],
            routes,
            head,
            cover_end: vec![i64::MIN; levels.len()],
            levels,
            irs: IrSlots::new(first),
            reset: None,
            out,
            now: 0,
            frame_base: 0,
            fill: 0,
            counters: Arc::default(),
            status: Arc::default(),
            ends,
            control: Some(control),
            recipe,
            local: Vec::with_capacity(LOCAL_COMMANDS),
            local_read: 0,
            has_dry,
        })
    }

    /// The control handle for this engine: IR swaps, parameters, status. There is one; later calls
    /// return `None`. Call it off the audio thread (it allocates a little).
    pub fn control(&mut self) -> Option<Control> {
        let ends = self.control.take()?;
        let (inputs, outputs) = (self.routes.inputs, self.routes.outputs);
        let dry = ((inputs, outputs), mix::dry_sources(inputs, outputs).is_some());
        Some(Control::new(ends, Arc::clone(&self.recipe), Arc::clone(&self.status), self.monitor(), dry))
    }

    /// Convolves one host call. `inputs` and `outputs` are planar, one slice per engine input and output,
    /// all of the same length from 0 to `max_host_frames`. With the default parameters, output frame `n`
    /// of the stream is `sum_k h[k] x[n - latency_frames - k]`.
    ///
    /// Never allocates, frees, locks, logs or waits. Non-finite input samples are replaced by zero and
    /// counted in [`Monitor::nonfinite_inputs`]; finite ones beyond +-[`INPUT_LIMIT`](crate::INPUT_LIMIT)
    /// (about 120 dB above full scale) are clamped to it and counted in [`Monitor::clamped_inputs`], so no
    /// input can overflow the delay lines into NaN.
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
        let mut bad = Sanitized::default();
        let mut peak = 0.0f32;
        let mut done = 0;
        while done < frames {
            let len = (frames - done).min(b - self.fill);
            let sweeping = matches!(self.reset, Some(ResetPhase::Sweep { .. }));
            let dry_live = self.out.dry_live();
            for (i, (ring, x)) in self.inputs.iter_mut().zip(inputs).enumerate() {
                let x = &x[done..done + len];
                if dry_live {
                    bad += self.out.dry_ring(i).write_sanitized(self.now, x);
                    if sweeping {
                        ring.write_zeros(self.now, len);
                    } else {
                        ring.write_sanitized(self.now, x);
                    }
                } else {
                    bad += ring.write_sanitized(self.now, x);
                }
            }
            peak = peak.max(self.emit_chunk(outputs, done, len));
            self.now += len as i64;
            self.fill += len;
            done += len;
            if self.fill == b {
                self.fill = 0;
                self.block_boundary();
            }
        }
        if bad.nonfinite > 0 {
            self.counters.nonfinite_inputs.fetch_add(bad.nonfinite, Ordering::Relaxed);
        }
        if bad.clamped > 0 {
            self.counters.clamped_inputs.fetch_add(bad.clamped, Ordering::Relaxed);
        }
        if peak > 0.0 && peak.to_bits() > self.status.peak_bits.load(Ordering::Relaxed) {
            self.status.peak_bits.fetch_max(peak.to_bits(), Ordering::AcqRel);
        }
        self.publish_worker_counters();
        self.counters.frames_processed.fetch_add(frames as u64, Ordering::Relaxed);
        Ok(())
    }

    /// Emits the next `len` output frames into `outputs[..][at..at + len]` through the output stage.
    fn emit_chunk(&mut self, outputs: &mut [&mut [f32]], at: usize, len: usize) -> f32 {
        let emit = self.now - self.latency as i64;
        let src = WetSources {
            acc: &mut self.acc,
            head: self.head.as_mut(),
            inputs: &self.inputs,
            irs: &self.irs.irs,
            first: self.irs.first_heard(),
            fade: self.irs.run,
            sweeping: matches!(self.reset, Some(ResetPhase::Sweep { .. })),
            resetting: self.reset.is_some(),
        };
        self.out.emit(src, outputs, (at, len), emit)
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

    /// At every block boundary: control messages, the reset and swap state machines, then every level's
    /// work for the boundary that just passed (sync levels whose input block completed, worker
    /// hand-offs, each sliced level's share).
    fn block_boundary(&mut self) {
        let emit = self.now - self.latency as i64;
        self.apply_commands(emit);
        self.advance_reset(emit);
        let (latency, frame_base) = (self.latency, self.frame_base);
        let fade_from = self.cover_end.iter().copied().fold(emit, i64::max);
        self.irs.advance(emit, &self.levels, &mut self.ends, &self.status, (self.reset.is_none(), fade_from), |f| {
            out_frame(latency, frame_base, f)
        });
        if matches!(self.reset, Some(ResetPhase::Sweep { .. })) {
            return; // levels pause while their state is zeroed
        }
        let block = (self.now / self.plan.block_frames as i64) as u64;
        let kernel = self.options.kernel;
        let Self { levels, irs, acc, inputs, cover_end, now, .. } = self;
        for (k, level) in levels.iter_mut().enumerate() {
            let (n, lead) = level.geometry();
            let start = emit + lead as i64;
            let release = level.due_at(block).then(|| {
                cover_end[k] = start + n as i64;
                irs.release_mask(start, n)
            });
            let level_irs = [0, 1].map(|slot| irs.irs[slot].as_ref().map(|s| &s.get().levels[k]));
            let io = LevelIo { inputs, outputs: &mut *acc, now: *now, emit };
            level.at_boundary(io, level_irs, release, block, kernel);
        }
    }

    /// Queues a command from the audio thread itself, between two [`process`](Self::process) calls (a
    /// plugin's parameter events, which arrive with the audio): applied at the next block boundary after
    /// the commands of the [`Control`] queue, then ramped like them. Refuses what
    /// [`Control::send`] refuses. Never allocates, locks or waits.
    ///
    /// # Errors
    /// [`SendError::Invalid`] as [`Control::send`]; [`SendError::QueueFull`] when 64 commands already wait
    /// for the next block boundary.
    pub fn send(&mut self, command: Command) -> Result<(), SendError> {
        let shape = (self.routes.inputs, self.routes.outputs);
        check_command(command, self.options.max_predelay_frames, shape, self.has_dry)?;
        if self.local.len() == self.local.capacity() && self.local_read > 0 {
            // Drain shifts the unread commands to the front; it never frees or reallocates.
            self.local.drain(..self.local_read);
            self.local_read = 0;
        }
        if self.local.len() == self.local.capacity() {
            return Err(SendError::QueueFull(command));
        }
        self.local.push(command);
        Ok(())
    }

    /// The next queued command: the control queue's first, then those of [`send`](Self::send).
    fn next_command(&mut self) -> Option<Command> {
        if let Some(command) = self.ends.commands.try_pop() {
            return Some(command);
        }
        let command = self.local.get(self.local_read).copied();
        if command.is_some() {
            self.local_read += 1;
        } else if self.local_read > 0 {
            self.local.clear();
            self.local_read = 0;
        }
        command
    }

    /// Applies queued commands (all of them, unless a reset is already running: the rest wait).
    fn apply_commands(&mut self, emit: i64) {
        while self.reset.is_none() {
            let Some(command) = self.next_command() else { break };
            match self.out.apply(command) {
                Taken::Now => self.report(command, emit),
                Taken::Deferred => {} // reported when it starts
                Taken::NotMine => {
                    // Command::Reset: reported when the wet signal starts fading back in.
                    self.out.fade_wet(0.0);
                    self.reset = Some(ResetPhase::FadeOut);
                }
            }
        }
        if let Some(command) = self.out.start_deferred() {
            self.report(command, emit);
        }
        self.out.update_dry_live(&self.inputs, self.now, self.latency, self.reset.is_some());
    }

    /// Sends an `Applied` event if the queue has room beyond what retired IRs may need.
    fn report(&mut self, command: Command, emit: i64) {
        let frame = out_frame(self.latency, self.frame_base, emit);
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
            Some(ResetPhase::FadeOut) if self.out.fade_done() => {
                for level in &mut self.levels {
                    level.forget_work();
                }
                self.reset = Some(ResetPhase::Sweep { item: 0, pos: 0 });
            }
            Some(ResetPhase::FadeOut) => {}
            Some(ResetPhase::Sweep { item, pos }) => {
                let items = SweepItems {
                    inputs: &mut self.inputs,
                    acc: &mut self.acc,
                    predelay: self.out.predelay_rings(),
                    levels: &mut self.levels,
                };
                // One item (or a slice of one) per boundary.
                self.reset = match items.sweep(item, pos, SWEEP_SAMPLES) {
                    SweepStep::More(pos) => Some(ResetPhase::Sweep { item, pos }),
                    SweepStep::Done => Some(ResetPhase::Sweep { item: item + 1, pos: 0 }),
                    SweepStep::End => {
                        self.out.fade_wet(1.0);
                        self.report(Command::Reset, emit);
                        None
                    }
                };
            }
        }
    }

    /// Copies the worker levels' counters into the shared ones (plain stores, no allocation).
    fn publish_worker_counters(&self) {
        let mut c = WorkerCounts::default();
        for level in &self.levels {
            level.add_worker_counts(&mut c);
        }
        if c.late + c.refused > 0 || c.cpu_seconds > 0.0 {
            self.counters.late_results.store(c.late, Ordering::Relaxed);
            self.counters.refused_jobs.store(c.refused, Ordering::Relaxed);
            self.counters.worker_cpu_nanos.store((c.cpu_seconds * 1e9) as u64, Ordering::Relaxed);
        }
    }

    /// For each worker thread, the real-time priority granted (`Ok`), the OS error when refused
    /// (`Err`; `i32::MAX` where this build cannot set real-time priorities at all), or `None` when none
    /// was asked for. Off the audio thread (allocates the list).
    pub fn worker_priorities(&self) -> Vec<Option<Result<i32, i32>>> {
        self.levels.iter().filter_map(LevelSlot::worker_priority).collect()
    }

    /// Number of worker threads the engine runs.
    pub fn worker_threads(&self) -> usize {
        self.levels.iter().filter(|l| l.worker_priority().is_some()).count()
    }

    /// Starts the spread reset of [`Command::Reset`] from the audio thread, for a host or bridge that must
    /// clear the engine inside a callback (say after a safety mute): the wet signal fades out, the state is
    /// zeroed a bounded slice per block boundary, then the wet signal fades back in on fresh input; the dry
    /// signal passes throughout. Real-time safe: it only sets state, and no callback does more than one
    /// slice of the work ([`reset`](Self::reset) zeroes everything in one call instead). Does nothing while a
    /// reset already runs. The control side sees an `Applied` event for `Command::Reset` when it ends.
    pub fn begin_reset(&mut self) {
        if self.reset.is_none() {
            self.out.fade_wet(0.0);
            self.reset = Some(ResetPhase::FadeOut);
        }
    }

    /// Returns to the freshly built state at once: silence in every delay line and accumulator, the
    /// block grid restarted. Counters keep counting, parameters and a swap in progress carry on.
    /// Does not allocate, but zeroes all the engine's state in one call (milliseconds for a long IR):
    /// on a running stream, send [`Command::Reset`] instead, which spreads the work.
    pub fn reset(&mut self) {
        for r in self.inputs.iter_mut().chain(self.acc.iter_mut().flatten()) {
            r.clear();
        }
        self.out.clear();
        for l in &mut self.levels {
            l.clear();
        }
        // Restart the frame grid at 0 (so the levels' phases match a fresh engine's) and move every
        // frame number the engine keeps by the same amount.
        let shift = self.now;
        self.frame_base += shift.max(0) as u64;
        if let Some(s) = &mut self.irs.run {
            s.shift(shift);
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

    /// Frames per host call the engine was built for ([`EngineOptions::host_period_frames`]; one block when
    /// not given).
    pub fn host_period_frames(&self) -> usize {
        self.options.host_period_frames.unwrap_or(self.plan.block_frames)
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
        let rings: usize = self.inputs.iter().chain(self.acc.iter().flatten()).map(|r| 4 * r.len()).sum();
        rings
            + self.out.memory_bytes()
            + self.irs.memory_bytes()
            + self.head.as_ref().map_or(0, Head::memory_bytes)
            + self.levels.iter().map(LevelSlot::memory_bytes).sum::<usize>()
    }

    /// The multiply-accumulate kernel in use.
    pub fn kernel(&self) -> Kernel {
        self.options.kernel
    }
}

/// Test hooks (feature `test-hooks`): not part of the stable API.
#[cfg(feature = "test-hooks")]
impl Engine {
    /// Cost units (butterflies, moves and multiply-accumulated bins, counted) done by sliced levels at
    /// the last block boundary: for tests that check the work is spread evenly.
    pub fn sliced_cost_last_boundary(&self) -> u64 {
        self.levels.iter().filter_map(LevelSlot::sliced_costs).map(|(last, _, _)| last).sum()
    }

    /// Cost units of one whole job of every sliced level, with each level's period in blocks.
    pub fn sliced_job_costs(&self) -> Vec<(u64, u64)> {
        self.levels.iter().filter_map(LevelSlot::sliced_costs).map(|(_, job, period)| (job, period)).collect()
    }

    /// For each worker thread, whether it runs with flush-to-zero on (it reports its mode when it starts).
    pub fn worker_flush_modes(&self) -> Vec<bool> {
        self.levels.iter().filter_map(LevelSlot::worker_flushing).collect()
    }

    /// Makes every worker job take `delay` longer, to force late results.
    pub fn set_worker_test_delay(&self, delay: std::time::Duration) {
        for level in &self.levels {
            level.set_worker_test_delay(delay);
        }
    }

    /// Fills every scratch buffer with `value`, for tests that prove scratch contents do not leak into
    /// the output.
    pub fn dirty_scratch(&mut self, value: f32) {
        if let Some(h) = &mut self.head {
            h.dirty(value);
        }
        self.out.dirty(value);
        for l in &mut self.levels {
            l.dirty(value);
        }
    }
}

// The handles move to the threads that use them: the engine to the audio thread, the control handle to a
// control thread, monitors anywhere. Checked at compile time so a change that breaks it cannot land.
const _: () = {
    const fn assert_send<T: Send>() {}
    const fn assert_send_sync<T: Send + Sync>() {}
    assert_send::<Engine>();
    assert_send::<Control>();
    assert_send_sync::<Monitor>();
};

/// Output frame number (since the engine was built) of engine frame `emit`.
fn out_frame(latency: usize, frame_base: u64, emit: i64) -> u64 {
    (emit + latency as i64).max(0) as u64 + frame_base
}
