//! Live control of a running [`Engine`](crate::Engine): impulse-response swaps with a crossfade,
//! smoothed parameters, status, and reclamation of old IRs off the audio thread.
//!
//! The [`Control`] handle lives on a non-real-time thread. It talks to the engine over three bounded
//! wait-free single-producer single-consumer queues (ringbuf) and a block of atomics:
//! - swaps (control to engine): a [`PreparedIr`] built off the audio thread, moved by pointer;
//! - commands (control to engine): [`Command`]s, plain `Copy` values;
//! - events (engine to control): [`Event`]s, among them every IR the engine no longer uses, so that it
//!   is dropped on the control side. The audio thread never allocates or frees.
//!
//! A full queue hands the message back to the sender with [`Refused`]; nothing blocks.
//!
//! # Crossfade
//!
//! Both IRs read the same input delay lines, so the new IR needs no warm-up: from the block boundary
//! where the engine picks a swap up, every level computes its results with both IRs (the input FFTs
//! are shared; the multiply-accumulates and inverse FFTs run twice) into two accumulator sets. The
//! crossfade starts at the first output frame whose every level result was computed after pick-up:
//! up to one level period later (`N_max` frames for `sync` levels, `2 N_max` for `workers` and
//! `sliced`, where `N_max` is the largest level block). It runs for the requested number of frames
//! with the raised-cosine weight
//!
//! ```text
//! w[n] = 0.5 - 0.5 cos(pi (n - start) / (end - start))   for start <= n < end   (0 before, 1 after)
//! out[n] = (1 - w[n]) old[n] + w[n] new[n]
//! ```
//!
//! The weights sum to one, so swapping to the same IR (or a closely correlated one, such as another
//! position in the same room) leaves the output unchanged; for uncorrelated responses the output
//! power dips by at most 3 dB at the midpoint. The S-shape has no slope step at either end. A fade of
//! 0 frames switches at `start`, a block boundary. The engine's block size and latency never change.
//!
//! # IR length
//!
//! The engine is built for a plan, which covers a maximum IR length ([`Engine::ir_frames`]); any IR up
//! to that length fits the same levels (the spectra past its end are zero), so preparing a swap never
//! re-plans. Plan for the longest IR you will swap in: a shorter IR then costs what the longest would.
//!
//! [`Engine::ir_frames`]: crate::Engine::ir_frames

use std::sync::atomic::{AtomicU32, AtomicU64, AtomicU8, Ordering};
use std::sync::Arc;

use realfft::RealFftPlanner;
use ringbuf::traits::{Consumer, Producer, Split};
use ringbuf::{HeapCons, HeapProd, HeapRb};

use crate::engine::Monitor;
use crate::error::ControlError;
use crate::fdl::LevelIr;
use crate::head::head_taps;
use crate::ir::ImpulseResponse;

/// Swaps that may wait in the queue.
const SWAP_QUEUE: usize = 4;
/// Commands that may wait in the queue.
const COMMAND_QUEUE: usize = 64;
/// Events that may wait for [`Control::poll`]; retired IRs always fit (at most the queued swaps plus
/// the two the engine holds), and `Applied` events beyond the room left are counted and dropped.
const EVENT_QUEUE: usize = 256;

/// Seconds over which gains, bypass and pre-delay changes ramp (linearly, per sample).
pub const PARAM_RAMP_SECONDS: f64 = 0.010;

/// One IR level's spectra recipe: which level, and which IR channels of its routing group.
#[derive(Debug, Clone)]
pub(crate) struct LevelSpec {
    pub(crate) n: usize,
    pub(crate) partitions: usize,
    pub(crate) offset: usize,
    pub(crate) channels: Vec<usize>,
}

/// Everything needed to prepare an IR for a given engine, off the audio thread.
#[derive(Debug)]
pub(crate) struct Layout {
    pub(crate) ir_channels: usize,
    pub(crate) covered_frames: usize,
    pub(crate) rate: u32,
    pub(crate) head_frames: usize,
    /// IR channel of each head path.
    pub(crate) head_channels: Vec<usize>,
    pub(crate) levels: Vec<LevelSpec>,
    pub(crate) max_predelay_frames: usize,
    next_id: AtomicU64,
}

impl Layout {
    pub(crate) fn new(
        ir_channels: usize,
        covered_frames: usize,
        rate: u32,
        head: (usize, Vec<usize>),
        levels: Vec<LevelSpec>,
        max_predelay_frames: usize,
    ) -> Self {
        Self {
            ir_channels,
            covered_frames,
            rate,
            head_frames: head.0,
            head_channels: head.1,
            levels,
            max_predelay_frames,
            next_id: AtomicU64::new(0),
        }
    }

    /// Checks `ir` against the engine and transforms it. Allocates; runs on the caller's thread.
    pub(crate) fn prepare(&self, ir: &ImpulseResponse) -> Result<IrSet, ControlError> {
        self.prepare_with(ir, &mut RealFftPlanner::<f32>::new())
    }

    /// [`prepare`](Self::prepare) with the caller's FFT planner (whose twiddle tables it reuses).
    pub(crate) fn prepare_with(
        &self,
        ir: &ImpulseResponse,
        planner: &mut RealFftPlanner<f32>,
    ) -> Result<IrSet, ControlError> {
        if ir.channels() != self.ir_channels {
            return Err(ControlError::RoutingMismatch { expected: self.ir_channels, got: ir.channels() });
        }
        if ir.sample_rate_hz() != self.rate {
            return Err(ControlError::RateMismatch { expected: self.rate, got: ir.sample_rate_hz() });
        }
        if ir.frames() > self.covered_frames {
            return Err(ControlError::IrTooLong { ir_frames: ir.frames(), max_frames: self.covered_frames });
        }
        let levels = self
            .levels
            .iter()
            .map(|spec| {
                let taps: Vec<&[f32]> = spec.channels.iter().map(|&c| ir.channel(c)).collect();
                LevelIr::new(&taps, spec.n, spec.partitions, spec.offset, planner)
            })
            .collect();
        let head = head_taps(
            self.head_frames,
            self.head_channels.iter().map(|&c| {
                let taps = ir.channel(c);
                taps[..self.head_frames.min(taps.len())].to_vec()
            }),
        );
        Ok(IrSet { levels, head, frames: ir.frames(), id: self.next_id.fetch_add(1, Ordering::Relaxed) })
    }
}

/// An IR transformed for one engine: the spectra of every level and the head taps.
pub(crate) struct IrSet {
    /// Per engine level slot (level x routing group), in the engine's order.
    pub(crate) levels: Vec<LevelIr>,
    /// Reversed head taps per head path (empty without a head).
    pub(crate) head: Vec<Vec<f32>>,
    pub(crate) frames: usize,
    pub(crate) id: u64,
}

impl std::fmt::Debug for IrSet {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("IrSet").field("id", &self.id).field("frames", &self.frames).finish_non_exhaustive()
    }
}

impl IrSet {
    pub(crate) fn memory_bytes(&self) -> usize {
        self.levels.iter().map(LevelIr::memory_bytes).sum::<usize>() + 4 * self.head.iter().map(Vec::len).sum::<usize>()
    }
}

/// An impulse response prepared for one engine ([`Control::prepare`]): partitioned, transformed and
/// allocated, ready to be adopted by the audio thread with a pointer hand-off.
pub struct PreparedIr {
    pub(crate) set: Box<IrSet>,
}

impl std::fmt::Debug for PreparedIr {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("PreparedIr")
            .field("id", &self.set.id)
            .field("frames", &self.set.frames)
            .field("memory_bytes", &self.memory_bytes())
            .finish()
    }
}

impl PreparedIr {
    /// A number unique among the IRs prepared for this engine (the IR it was built with is 0).
    pub fn id(&self) -> u64 {
        self.set.id
    }

    /// Taps per channel.
    pub fn frames(&self) -> usize {
        self.set.frames
    }

    /// Bytes of spectra and taps it holds.
    pub fn memory_bytes(&self) -> usize {
        self.set.memory_bytes()
    }
}

/// A parameter change or action for the audio thread. Applied at the next engine block boundary;
/// gains, bypass and pre-delay then ramp over [`PARAM_RAMP_SECONDS`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub enum Command {
    /// Linear gain of the convolved (wet) signal; 1 by default.
    WetGain(f32),
    /// Linear gain of the input (dry) signal, aligned with the wet one (delayed by the latency); 0 by
    /// default. Output `o` takes input `o % inputs`.
    DryGain(f32),
    /// Gain of the whole output in dB; 0 by default.
    OutputGainDb(f32),
    /// Delay of the wet signal in frames, up to the engine's `max_predelay_frames`; 0 by default.
    /// Changes crossfade between the old and the new delay.
    PreDelayFrames(usize),
    /// Bypass: the output crossfades to the aligned input (gain 1) and back. The levels keep running,
    /// so leaving bypass needs no warm-up.
    Bypass(bool),
    /// Silence the reverberation: the wet signal fades out, the engine's delay lines and accumulators
    /// are zeroed a slice per block (levels paused, input ignored by the convolution meanwhile), then
    /// the wet signal fades back in. The dry signal passes throughout.
    Reset,
}

/// How far a swap has come.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum FadeState {
    /// No swap in progress.
    Steady,
    /// Picked up; the levels compute both IRs, the crossfade has not started yet.
    Pending,
    /// Crossfading from the old IR to the new one.
    Crossfading,
    /// The new IR alone is heard; the old one is still being released.
    Retiring,
}

impl FadeState {
    pub(crate) fn to_u8(self) -> u8 {
        self as u8
    }

    fn from_u8(v: u8) -> Self {
        match v {
            1 => Self::Pending,
            2 => Self::Crossfading,
            3 => Self::Retiring,
            _ => Self::Steady,
        }
    }
}

/// What a finished swap did, in output frames (frame 0 is the first sample the engine emitted).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct SwapReport {
    /// Id of the IR swapped in ([`PreparedIr::id`]).
    pub new_id: u64,
    /// Id of the IR swapped out.
    pub old_id: u64,
    /// First output frame of the block boundary where the engine picked the swap up.
    pub picked_up: u64,
    /// First output frame of the crossfade (weight 0).
    pub fade_start: u64,
    /// First output frame with the new IR alone (weight 1).
    pub fade_end: u64,
}

/// A message from the engine to the control side.
#[derive(Debug)]
pub enum Event {
    /// An IR the engine no longer uses, handed back to be dropped (or swapped in again) off the audio
    /// thread, with the report of the swap that replaced it.
    Retired {
        /// The old IR.
        ir: PreparedIr,
        /// Where the swap happened.
        report: SwapReport,
    },
    /// A command took effect at the start of output frame `frame` (for `Reset`: where the wet signal
    /// starts fading back in).
    Applied {
        /// The command.
        command: Command,
        /// Output frame.
        frame: u64,
    },
}

/// A message the queue had no room for, handed back.
#[derive(Debug)]
pub struct Refused<T>(pub T);

impl<T> std::fmt::Display for Refused<T> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "the engine's queue is full (is its audio thread running?); try again later")
    }
}

impl<T: std::fmt::Debug> std::error::Error for Refused<T> {}

/// A swap on its way to the engine.
#[derive(Debug)]
pub(crate) struct SwapRequest {
    pub(crate) set: Box<IrSet>,
    pub(crate) fade_frames: usize,
}

/// Status the audio thread publishes (atomics only).
#[derive(Debug)]
pub(crate) struct StatusCells {
    pub(crate) swaps_completed: AtomicU64,
    pub(crate) fade_start: AtomicU64,
    pub(crate) fade_end: AtomicU64,
    pub(crate) fade_state: AtomicU8,
    /// f32 bits of the peak |output| since the control side last read it.
    pub(crate) peak_bits: AtomicU32,
    pub(crate) events_dropped: AtomicU64,
    pub(crate) ir_id: AtomicU64,
}

impl Default for StatusCells {
    fn default() -> Self {
        Self {
            swaps_completed: AtomicU64::new(0),
            fade_start: AtomicU64::new(u64::MAX),
            fade_end: AtomicU64::new(u64::MAX),
            fade_state: AtomicU8::new(0),
            peak_bits: AtomicU32::new(0),
            events_dropped: AtomicU64::new(0),
            ir_id: AtomicU64::new(0),
        }
    }
}

/// A snapshot of the engine's state, read without locks.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Status {
    /// Frames processed since the engine was built.
    pub frames_processed: u64,
    /// Non-finite input samples replaced by zero.
    pub nonfinite_inputs: u64,
    /// Worker results that were late (see [`Monitor::late_results`]).
    pub late_results: u64,
    /// Swaps whose crossfade has finished.
    pub swaps_completed: u64,
    /// Output frame where the last crossfade started (`None` before the first swap).
    pub fade_start: Option<u64>,
    /// Output frame where it ended (or will end).
    pub fade_end: Option<u64>,
    /// Where the current swap stands.
    pub fade_state: FadeState,
    /// Id of the IR heard alone once the current crossfade ends.
    pub ir_id: u64,
    /// Peak absolute output sample since the previous [`Control::status`] call.
    pub peak: f32,
    /// `Applied` events dropped because the event queue was full (poll more often).
    pub events_dropped: u64,
}

/// The audio-thread ends of the queues.
pub(crate) struct EngineEnds {
    pub(crate) swaps: HeapCons<SwapRequest>,
    pub(crate) commands: HeapCons<Command>,
    pub(crate) events: HeapProd<Event>,
}

impl std::fmt::Debug for EngineEnds {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("EngineEnds").finish_non_exhaustive()
    }
}

/// The control ends, held by the engine until [`Engine::control`](crate::Engine::control) hands them
/// out.
pub(crate) struct ControlEnds {
    swaps: HeapProd<SwapRequest>,
    commands: HeapProd<Command>,
    events: HeapCons<Event>,
}

impl std::fmt::Debug for ControlEnds {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("ControlEnds").finish_non_exhaustive()
    }
}

/// Builds the three queues. Allocates. Each ring is freed when the last of its two halves is dropped;
/// the engine's halves go with the engine, which is dropped off the audio thread.
pub(crate) fn queues() -> (EngineEnds, ControlEnds) {
    let (sp, sc) = HeapRb::new(SWAP_QUEUE).split();
    let (cp, cc) = HeapRb::new(COMMAND_QUEUE).split();
    let (ep, ec) = HeapRb::new(EVENT_QUEUE).split();
    (EngineEnds { swaps: sc, commands: cc, events: ep }, ControlEnds { swaps: sp, commands: cp, events: ec })
}

/// The control side of an engine: `Send`, for a non-real-time thread. Prepare IRs, swap them in, change
/// parameters, read status, and collect what the engine hands back.
///
/// ```
/// use partita_core::{Command, Engine, Event, ImpulseResponse, Plan, Routing};
/// let room = ImpulseResponse::new(vec![vec![1.0, 0.5, 0.25]], 48_000)?;
/// let hall = ImpulseResponse::new(vec![vec![0.8, 0.0, 0.4, 0.2]], 48_000)?;
/// let plan = Plan::uniform(16, 64)?; // plan for the longest IR to be swapped in
/// let mut engine = Engine::new(&plan, &room, Routing::Mono, 64)?;
/// let mut control = engine.control().expect("first call");
///
/// let prepared = control.prepare(&hall)?; // off the audio thread: allocates and transforms
/// control.swap(prepared, 480).expect("queue has room"); // 10 ms crossfade at 48 kHz
/// control.send(Command::WetGain(0.5)).expect("queue has room");
///
/// let (x, mut y) = (vec![0.1f32; 64], vec![0.0f32; 64]);
/// for _ in 0..100 {
///     engine.process(&[&x], &mut [&mut y])?; // on the audio thread
/// }
/// let mut retired = 0;
/// for event in control.poll() {
///     if let Event::Retired { ir, report } = event {
///         assert!(report.fade_end >= report.fade_start);
///         drop(ir); // the old IR is freed here, on the control thread
///         retired += 1;
///     }
/// }
/// assert_eq!(retired, 1);
/// assert_eq!(control.status().swaps_completed, 1);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
pub struct Control {
    ends: ControlEnds,
    layout: Arc<Layout>,
    status: Arc<StatusCells>,
    monitor: Monitor,
}

impl std::fmt::Debug for Control {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Control").field("status", &self.status()).finish_non_exhaustive()
    }
}

impl Control {
    pub(crate) fn new(ends: ControlEnds, layout: Arc<Layout>, status: Arc<StatusCells>, monitor: Monitor) -> Self {
        Self { ends, layout, status, monitor }
    }

    /// Prepares `ir` for this engine: checks it and computes every level's spectra. Allocates; run it
    /// off the audio thread. Cost: one forward FFT per partition and IR channel; for a 10 s stereo IR
    /// planned at block 64, 7.1-7.3 ms (median) on a 2-vCPU Intel Xeon VM (`cargo bench --bench
    /// control`, BENCHMARKS.md).
    ///
    /// # Errors
    /// [`ControlError`] when the IR has a different channel count (a different routing), another sample
    /// rate, or more taps than the engine's plan covers.
    pub fn prepare(&self, ir: &ImpulseResponse) -> Result<PreparedIr, ControlError> {
        Ok(PreparedIr { set: Box::new(self.layout.prepare(ir)?) })
    }

    /// Queues a swap to `ir` with a crossfade of `fade_frames` output frames (0 switches at once, at a
    /// block boundary). The whole routing matrix changes together.
    ///
    /// # Errors
    /// The IR comes back in [`Refused`] when [`SWAP_QUEUE`](self) swaps are already waiting.
    pub fn swap(&mut self, ir: PreparedIr, fade_frames: usize) -> Result<(), Refused<PreparedIr>> {
        self.ends
            .swaps
            .try_push(SwapRequest { set: ir.set, fade_frames })
            .map_err(|r| Refused(PreparedIr { set: r.set }))
    }

    /// Queues a command.
    ///
    /// # Errors
    /// The command comes back in [`Refused`] when the queue is full. A pre-delay beyond the engine's
    /// bound is refused too (check with [`max_predelay_frames`](Self::max_predelay_frames)).
    pub fn send(&mut self, command: Command) -> Result<(), Refused<Command>> {
        if let Command::PreDelayFrames(d) = command {
            if d > self.layout.max_predelay_frames {
                return Err(Refused(command));
            }
        }
        self.ends.commands.try_push(command).map_err(Refused)
    }

    /// Frames in `ms` milliseconds at the engine's rate, rounded.
    pub fn frames_for_ms(&self, ms: f64) -> usize {
        (ms.max(0.0) * 1e-3 * f64::from(self.layout.rate)).round() as usize
    }

    /// The largest pre-delay the engine was built for (`EngineOptions::max_predelay_frames`).
    pub fn max_predelay_frames(&self) -> usize {
        self.layout.max_predelay_frames
    }

    /// The IR length the engine's plan covers: the longest IR [`prepare`](Self::prepare) accepts.
    pub fn max_ir_frames(&self) -> usize {
        self.layout.covered_frames
    }

    /// Takes every event the engine has sent. Retired IRs are yours: drop them here or swap them in
    /// again. Call it regularly (a few times per second) so old IRs are freed promptly.
    pub fn poll(&mut self) -> Vec<Event> {
        let mut out = Vec::new();
        while let Some(e) = self.ends.events.try_pop() {
            out.push(e);
        }
        out
    }

    /// Reads the status. Resets the peak meter.
    pub fn status(&self) -> Status {
        let opt = |v: u64| (v != u64::MAX).then_some(v);
        Status {
            frames_processed: self.monitor.frames_processed(),
            nonfinite_inputs: self.monitor.nonfinite_inputs(),
            late_results: self.monitor.late_results(),
            swaps_completed: self.status.swaps_completed.load(Ordering::Acquire),
            fade_start: opt(self.status.fade_start.load(Ordering::Acquire)),
            fade_end: opt(self.status.fade_end.load(Ordering::Acquire)),
            fade_state: FadeState::from_u8(self.status.fade_state.load(Ordering::Acquire)),
            ir_id: self.status.ir_id.load(Ordering::Acquire),
            peak: f32::from_bits(self.status.peak_bits.swap(0, Ordering::AcqRel)),
            events_dropped: self.status.events_dropped.load(Ordering::Relaxed),
        }
    }

    /// A counters-only view (cheap to clone, `Sync`).
    pub fn monitor(&self) -> Monitor {
        self.monitor.clone()
    }
}

impl Drop for Control {
    fn drop(&mut self) {
        // Retired IRs waiting in the queue are freed here, on this thread, not on the audio thread.
        while self.ends.events.try_pop().is_some() {}
    }
}
