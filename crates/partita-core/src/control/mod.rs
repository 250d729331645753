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

use std::sync::atomic::Ordering;
use std::sync::Arc;

use ringbuf::traits::{Consumer, Producer};

use crate::error::{ControlError, MixError, SendError};
use crate::ir::ImpulseResponse;
use crate::prepared::{PreparedIr, SpectraRecipe};

pub(crate) mod wire;

pub use wire::{Command, Event, FadeState, Monitor, Refused, Status, SwapReport, PARAM_RAMP_SECONDS};
use wire::{ControlEnds, StatusCells, SwapRequest};

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
#[must_use = "dropping the control handle frees the IRs the engine hands back; keep it while the engine runs"]
pub struct Control {
    ends: ControlEnds,
    recipe: Arc<SpectraRecipe>,
    status: Arc<StatusCells>,
    monitor: Monitor,
    /// The engine's shape has a dry signal (see [`Mix`](crate::Mix)).
    has_dry: bool,
    /// Engine inputs and outputs.
    shape: (usize, usize),
}

impl std::fmt::Debug for Control {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Control").field("status", &self.status()).finish_non_exhaustive()
    }
}

impl Control {
    pub(crate) fn new(
        ends: ControlEnds,
        recipe: Arc<SpectraRecipe>,
        status: Arc<StatusCells>,
        monitor: Monitor,
        (shape, has_dry): ((usize, usize), bool),
    ) -> Self {
        Self { ends, recipe, status, monitor, has_dry, shape }
    }

    /// Prepares `ir` for this engine: checks it and computes every level's spectra. Allocates; run it
    /// off the audio thread. Cost: one forward FFT per partition and IR channel (`cargo bench --bench
    /// control` measures it; docs/benchmarks/control.md has the figures).
    ///
    /// # Errors
    /// [`ControlError`] when the IR has a different channel count (a different routing), another sample
    /// rate, or more taps than the engine's plan covers.
    pub fn prepare(&self, ir: &ImpulseResponse) -> Result<PreparedIr, ControlError> {
        Ok(PreparedIr { set: Box::new(self.recipe.prepare(ir)?) })
    }

    /// Test hook (feature `test-hooks`): [`prepare`](Self::prepare), also returning where the time went
    /// per level slot, measured inside the engine's own preparation.
    ///
    /// # Errors
    /// As [`prepare`](Self::prepare).
    #[cfg(feature = "test-hooks")]
    pub fn prepare_timed(
        &self,
        ir: &ImpulseResponse,
    ) -> Result<(PreparedIr, Vec<crate::prepared::PrepareSplit>), ControlError> {
        let mut times = Vec::new();
        let set = self.recipe.prepare_timed(ir, &mut realfft::RealFftPlanner::<f32>::new(), Some(&mut times))?;
        Ok((PreparedIr { set: Box::new(set) }, times))
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
    /// [`SendError::Invalid`] when the command does not fit the engine, and nothing is queued: a gain that
    /// is NaN or infinite (or an output gain in dB whose linear value overflows), a pre-delay beyond the
    /// engine's bound (check with [`max_predelay_frames`](Self::max_predelay_frames)), or a non-zero dry
    /// gain or bypass on an engine whose shape has no dry signal (check with [`has_dry`](Self::has_dry);
    /// see [`Mix`](crate::Mix)). [`SendError::QueueFull`] hands the command back when the queue is full.
    pub fn send(&mut self, command: Command) -> Result<(), SendError> {
        check_command(command, self.recipe.max_predelay_frames, self.shape, self.has_dry)?;
        self.ends.commands.try_push(command).map_err(SendError::QueueFull)
    }

    /// Whether the engine's shape has a dry signal: as many inputs as outputs, or a mono input.
    pub fn has_dry(&self) -> bool {
        self.has_dry
    }

    /// Frames in `ms` milliseconds at the engine's rate, rounded.
    pub fn frames_for_ms(&self, ms: f64) -> usize {
        (ms.max(0.0) * 1e-3 * f64::from(self.recipe.rate)).round() as usize
    }

    /// The largest pre-delay the engine was built for (`EngineOptions::max_predelay_frames`).
    pub fn max_predelay_frames(&self) -> usize {
        self.recipe.max_predelay_frames
    }

    /// The IR length the engine's plan covers: the longest IR [`prepare`](Self::prepare) accepts.
    pub fn max_ir_frames(&self) -> usize {
        self.recipe.covered_frames
    }

    /// Takes every event the engine has sent. Retired IRs are yours: drop them here or swap them in
    /// again. Call it regularly (a few times per second) so old IRs are freed promptly.
    pub fn poll(&mut self) -> Vec<Event> {
        let mut out = Vec::new();
        while let Some(e) = self.next_event() {
            out.push(e);
        }
        out
    }

    /// Takes the oldest event the engine has sent, if any, without allocating (for hosts that poll one
    /// event at a time, such as the C ABI). Dropping a retired IR it returns frees it on the calling thread.
    pub fn next_event(&mut self) -> Option<Event> {
        self.ends.events.try_pop()
    }

    /// Reads the status. Resets the peak meter.
    pub fn status(&self) -> Status {
        let opt = |v: u64| (v != u64::MAX).then_some(v);
        Status {
            frames_processed: self.monitor.frames_processed(),
            nonfinite_inputs: self.monitor.nonfinite_inputs(),
            clamped_inputs: self.monitor.clamped_inputs(),
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

/// The one check of a command against an engine built for pre-delays up to `max_predelay_frames`, with
/// `shape` (inputs, outputs) and a dry signal or not: [`Control::send`] and [`Engine::send`](crate::Engine::send)
/// both refuse what it refuses. Never allocates (the audio thread calls it).
pub(crate) fn check_command(
    command: Command,
    max_predelay_frames: usize,
    (inputs, outputs): (usize, usize),
    has_dry: bool,
) -> Result<(), SendError> {
    let invalid = |reason| Err(SendError::Invalid { command, reason });
    let not_finite = |parameter| invalid(MixError::NotFinite { parameter });
    match command {
        Command::WetGain(g) if !g.is_finite() => not_finite("wet"),
        Command::DryGain(g) if !g.is_finite() => not_finite("dry"),
        Command::OutputGainDb(db) if !(db.is_finite() && 10f32.powf(db / 20.0).is_finite()) => {
            not_finite("output gain")
        }
        Command::PreDelayFrames(d) if d > max_predelay_frames => {
            invalid(MixError::PreDelayTooLong { predelay_frames: d, max_predelay_frames })
        }
        Command::DryGain(g) if g != 0.0 && !has_dry => invalid(MixError::NoDryPath { inputs, outputs }),
        Command::Bypass(true) if !has_dry => invalid(MixError::NoDryPath { inputs, outputs }),
        _ => Ok(()),
    }
}

impl Drop for Control {
    fn drop(&mut self) {
        // Retired IRs waiting in the queue are freed here, on this thread, not on the audio thread.
        while self.ends.events.try_pop().is_some() {}
    }
}
