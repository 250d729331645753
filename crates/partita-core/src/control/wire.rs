//! Everything that crosses between the audio thread and the others: the messages ([`Command`], [`Event`]),
//! the three wait-free queues that carry them, the status cells and counters the audio thread publishes
//! with atomics, and the read-only [`Monitor`]. Nothing here allocates, locks or waits on the audio side.

use std::sync::atomic::{AtomicU32, AtomicU64, AtomicU8, Ordering};
use std::sync::Arc;

use ringbuf::traits::Split;
use ringbuf::{HeapCons, HeapProd, HeapRb};

use crate::prepared::{IrSet, PreparedIr};

/// Seconds over which gains, bypass and pre-delay changes ramp (linearly, per sample).
pub const PARAM_RAMP_SECONDS: f64 = 0.010;

/// Swaps that may wait in the queue.
pub(crate) const SWAP_QUEUE: usize = 4;
/// Commands that may wait in the queue.
const COMMAND_QUEUE: usize = 64;
/// Events that may wait for [`Control::poll`](crate::Control::poll); retired IRs always fit (at most the
/// queued swaps plus the two the engine holds), and `Applied` events beyond the room left are counted and dropped.
const EVENT_QUEUE: usize = 256;

/// A parameter change or action for the audio thread. Applied at the next engine block boundary;
/// gains, bypass and pre-delay then ramp over [`PARAM_RAMP_SECONDS`].
#[derive(Debug, Clone, Copy, PartialEq)]
#[non_exhaustive]
pub enum Command {
    /// Linear gain of the convolved (wet) signal; 1 by default.
    WetGain(f32),
    /// Linear gain of the input (dry) signal, aligned with the wet one (delayed by the latency); 0 by
    /// default. Output `o` takes input `o` (as many inputs as outputs) or input 0 (a mono input); other
    /// shapes have no dry signal and [`Control::send`](crate::Control::send) refuses a non-zero dry gain.
    DryGain(f32),
    /// Gain of the whole output in dB; 0 by default.
    OutputGainDb(f32),
    /// Delay of the wet signal in frames, up to the engine's `max_predelay_frames`; 0 by default.
    /// Changes crossfade between the old and the new delay. A change that arrives while such a crossfade
    /// runs starts at the first block boundary after it ends, from where it ended (the output never
    /// jumps); its `Applied` event carries that frame, and a newer request meanwhile replaces it.
    PreDelayFrames(usize),
    /// Bypass: the output crossfades to the aligned input (gain 1) and back. The levels keep running,
    /// so leaving bypass needs no warm-up. Refused like a non-zero [`DryGain`](Self::DryGain) on shapes
    /// without a dry signal.
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

    pub(crate) fn from_u8(v: u8) -> Self {
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
#[non_exhaustive]
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
    /// Finite input samples clamped to +-[`INPUT_LIMIT`](crate::INPUT_LIMIT).
    pub clamped_inputs: u64,
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
    /// Peak absolute output sample since the previous [`Control::status`](crate::Control::status) call.
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
    pub(crate) swaps: HeapProd<SwapRequest>,
    pub(crate) commands: HeapProd<Command>,
    pub(crate) events: HeapCons<Event>,
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

/// Counters the audio thread updates and any thread may read.
#[derive(Debug, Default)]
pub(crate) struct Counters {
    pub(crate) frames_processed: AtomicU64,
    pub(crate) nonfinite_inputs: AtomicU64,
    pub(crate) clamped_inputs: AtomicU64,
    pub(crate) late_results: AtomicU64,
    pub(crate) refused_jobs: AtomicU64,
    pub(crate) worker_cpu_nanos: AtomicU64,
}

/// A read-only view of an engine's run-time counters, for the control side. Cheap to clone, `Send` and
/// `Sync`; reading never blocks the audio thread.
#[derive(Debug, Clone)]
#[must_use]
pub struct Monitor {
    pub(crate) counters: Arc<Counters>,
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

    /// Finite input samples beyond +-[`INPUT_LIMIT`](crate::INPUT_LIMIT) clamped to it since the engine was
    /// built (a sign of a wrongly scaled input: full scale is 1).
    pub fn clamped_inputs(&self) -> u64 {
        self.counters.clamped_inputs.load(Ordering::Relaxed)
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
