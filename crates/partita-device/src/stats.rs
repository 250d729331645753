//! Run-time counters shared by the audio callbacks (atomics only) and what the control side reads.

use std::sync::atomic::{
    AtomicBool, AtomicI64, AtomicU32, AtomicU64, AtomicU8, Ordering::Acquire, Ordering::Relaxed, Ordering::Release,
};

use crate::error::Direction;
use crate::safety::MuteReason;
use crate::timing::{CallbackTimes, TimeHistogram};

/// Why a running stream stopped working. The error callbacks and the watchdog set it; the control side
/// ends the stream with [`Fault`]'s message.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Fault {
    /// The device went away, or the JACK server stopped (cpal's `DeviceNotAvailable`).
    DeviceLost(Direction),
    /// The host itself is gone (`HostUnavailable`).
    HostLost(Direction),
    /// The stream must be rebuilt, e.g. the server's sample rate changed (`StreamInvalidated`).
    StreamInvalidated(Direction),
    /// No callback for a second while the stream should be running.
    Stalled(Direction),
    /// The JACK server shut the duplex client down (it stopped, or was killed).
    ServerStopped,
    /// A rate or period change needed a new engine and building it failed (the duplex client's
    /// `rebuild_error` says why).
    RebuildFailed,
}

impl Fault {
    fn code(self) -> (u8, u8) {
        let (c, d) = match self {
            Self::DeviceLost(d) => (1, d),
            Self::HostLost(d) => (2, d),
            Self::StreamInvalidated(d) => (3, d),
            Self::Stalled(d) => (4, d),
            Self::ServerStopped => (5, Direction::Output),
            Self::RebuildFailed => (6, Direction::Output),
        };
        (c, if d == Direction::Input { 0 } else { 1 })
    }

    fn from_code(code: u8, dir: u8) -> Option<Self> {
        let d = if dir == 0 { Direction::Input } else { Direction::Output };
        match code {
            1 => Some(Self::DeviceLost(d)),
            2 => Some(Self::HostLost(d)),
            3 => Some(Self::StreamInvalidated(d)),
            4 => Some(Self::Stalled(d)),
            5 => Some(Self::ServerStopped),
            6 => Some(Self::RebuildFailed),
            _ => None,
        }
    }
}

impl std::fmt::Display for Fault {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::DeviceLost(d) => write!(
                f,
                "the {d} device is no longer available (unplugged, or the JACK server stopped); the stream was \
                 ended"
            ),
            Self::HostLost(d) => write!(f, "the audio host went away ({d} stream); the stream was ended"),
            Self::StreamInvalidated(d) => write!(
                f,
                "the {d} stream was invalidated by the host (e.g. the server's sample rate changed); restart \
                 partita"
            ),
            Self::Stalled(d) => {
                write!(f, "the {d} stream stopped calling back for over a second; the stream was ended")
            }
            Self::ServerStopped => {
                write!(f, "the JACK server stopped (or shut this client down); the stream was ended")
            }
            Self::RebuildFailed => write!(
                f,
                "the server's sample rate or period changed and the engine could not be rebuilt for it; the stream \
                 was ended"
            ),
        }
    }
}

/// A snapshot of a bridge's counters. Plain data, read off the audio thread.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Stats {
    /// Audio seconds played (output frames over the rate).
    pub seconds: f64,
    /// Xruns the host or server reported (through cpal's error callback).
    pub host_xruns: u64,
    /// Times the playback side found the ring without a callback's worth of frames after priming.
    pub ring_underruns: u64,
    /// Times the capture side found the ring too full and dropped frames.
    pub ring_overflows: u64,
    /// Callbacks whose own work took longer than their period: wall clock over the period and the
    /// thread's CPU time over it too (measured inside the callback).
    pub late_callbacks: u64,
    /// Callbacks over their period by the wall clock while their CPU time was within it: the thread was
    /// preempted (a server or callback thread without real-time priority on a busy machine). Not one of
    /// our overruns; the cure is real-time scheduling (a real-time server, or `--realtime`).
    pub preempted_callbacks: u64,
    /// Frames dropped to correct drift (input faster than output; [`DriftMode::FrameSlip`](crate::drift::DriftMode) only).
    pub drift_slips: u64,
    /// Frames repeated to correct drift (input slower than output; [`DriftMode::FrameSlip`](crate::drift::DriftMode) only).
    pub drift_repeats: u64,
    /// The resampler's rate correction in the latest output callback, ppm: positive when the input
    /// runs fast (the ring is read faster than the output plays). 0 until the resampler engages, and
    /// always in [`DriftMode::FrameSlip`](crate::drift::DriftMode).
    pub drift_ppm: f64,
    /// The resampler's share of the latency (its interpolator's look-ahead; 0 until it engages), ms.
    /// Included in the latency figures.
    pub resampler_latency_ms: f64,
    /// Excess buffering dropped at once after a disturbance (e.g. the period shrank).
    pub resyncs: u64,
    /// Times the ring was primed again after a period change or an underrun (the first start not counted).
    pub reprimes: u64,
    /// Worker or sliced results that missed their deadline (the engine's `Monitor::late_results`).
    pub late_results: u64,
    /// Engine calls that returned an error (the output was zeroed for that chunk).
    pub engine_errors: u64,
    /// Non-finite input samples, replaced by 0 before the engine and the dry path.
    pub nonfinite_inputs: u64,
    /// Non-finite output samples the safety stage caught.
    pub nonfinite_outputs: u64,
    /// Times the safety stage muted.
    pub mutes: u64,
    /// Why the output is muted now, if it is.
    pub muted: Option<MuteReason>,
    /// Input-to-output latency, mean over the run (device capture and playback delays from cpal's
    /// timestamps, time in the ring and the resampler, and the engine's latency), ms.
    pub latency_ms: f64,
    /// Smallest latency measured, ms.
    pub latency_min_ms: f64,
    /// Largest latency measured, ms.
    pub latency_max_ms: f64,
    /// The latest measurement, ms.
    pub latency_last_ms: f64,
    /// The engine's part of the latency, ms.
    pub engine_latency_ms: f64,
    /// CPU time of the callbacks (thread CPU clocks) and the engine's worker threads over audio time, %
    /// of one core.
    pub mean_load_pct: f64,
    /// The slowest callback, wall clock, % of its period.
    pub max_callback_pct: f64,
    /// Frames of the latest input callback.
    pub input_period_frames: u32,
    /// Frames of the latest output callback.
    pub output_period_frames: u32,
    /// Input callbacks so far.
    pub input_callbacks: u64,
    /// Output callbacks so far.
    pub output_callbacks: u64,
    /// Errors of other kinds cpal reported (e.g. real-time priority refused), counted only.
    pub other_errors: u64,
    /// Wall-clock time of the callback that runs the engine: p50, p99, p99.9, max.
    pub callback_times: CallbackTimes,
    /// The real-time priority asked for the audio callback's thread (`--realtime`): `None` when not
    /// asked (or no callback yet), `Some(Ok(p))` granted SCHED_FIFO priority `p`, `Some(Err(errno))`
    /// refused.
    pub callback_priority: Option<Result<i32, i32>>,
}

impl Stats {
    /// Partita's own overruns, as opposed to the host's xruns: ring underruns and overflows, callbacks
    /// over their period, late worker or sliced results, engine errors.
    pub fn overruns(&self) -> u64 {
        self.ring_underruns + self.ring_overflows + self.late_callbacks + self.late_results + self.engine_errors
    }

    /// Drift corrections: slips plus repeats.
    pub fn drift_corrections(&self) -> u64 {
        self.drift_slips + self.drift_repeats
    }

    /// Non-finite samples, input and output.
    pub fn nonfinite_samples(&self) -> u64 {
        self.nonfinite_inputs + self.nonfinite_outputs
    }
}

/// Input and output peaks since the last read, linear.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct Peaks {
    /// Largest |sample| of the engine inputs.
    pub input: f32,
    /// Largest |sample| sent to the device (after the safety stage).
    pub output: f32,
}

/// Atomics shared by the callbacks, the error callbacks and the control side.
#[derive(Debug)]
pub(crate) struct BridgeCells {
    pub rate_hz: u32,
    pub engine_latency_frames: u64,
    pub host_xruns: AtomicU64,
    pub ring_underruns: AtomicU64,
    pub ring_overflows: AtomicU64,
    pub late_callbacks: AtomicU64,
    pub preempted_callbacks: AtomicU64,
    pub drift_slips: AtomicU64,
    pub drift_repeats: AtomicU64,
    /// The resampler's correction in ppm, as f64 bits.
    pub drift_ppm_bits: AtomicU64,
    /// Frames the resampler holds beyond the output position (its delay).
    pub resampler_frames: AtomicU64,
    pub resyncs: AtomicU64,
    pub reprimes: AtomicU64,
    pub nonfinite_inputs: AtomicU64,
    pub nonfinite_outputs: AtomicU64,
    pub mutes: AtomicU64,
    pub mute_reason: AtomicU8,
    pub other_errors: AtomicU64,
    pub fault: AtomicU8,
    pub fault_direction: AtomicU8,
    pub cpu_ns: AtomicU64,
    pub max_callback_ppm: AtomicU64,
    pub frames_out: AtomicU64,
    pub callbacks_in: AtomicU64,
    pub callbacks_out: AtomicU64,
    pub in_period: AtomicU32,
    pub out_period: AtomicU32,
    /// Time of the last input callback (ns, the bridge's clock) and its frame count.
    pub last_input_ns: AtomicU64,
    pub last_input_frames: AtomicU64,
    pub capture_delay_ns: AtomicU64,
    pub latency_last_ns: AtomicU64,
    pub latency_min_ns: AtomicU64,
    pub latency_max_ns: AtomicU64,
    pub latency_sum_ns: AtomicU64,
    pub latency_count: AtomicU64,
    pub in_peak: AtomicU32,
    pub out_peak: AtomicU32,
    pub unmute: AtomicBool,
    pub engine_errors: AtomicU64,
    pub callback_times: TimeHistogram,
    /// `i64::MIN`: no priority asked; >= 0 granted priority; < 0 minus the OS error.
    pub callback_priority: AtomicI64,
    #[cfg(feature = "test-hooks")]
    pub stall_ns: AtomicU64,
    #[cfg(feature = "test-hooks")]
    pub inject_nonfinite: AtomicBool,
}

impl BridgeCells {
    pub fn new(rate_hz: u32, engine_latency_frames: usize) -> Self {
        let z = || AtomicU64::new(0);
        Self {
            rate_hz,
            engine_latency_frames: engine_latency_frames as u64,
            host_xruns: z(),
            ring_underruns: z(),
            ring_overflows: z(),
            late_callbacks: z(),
            preempted_callbacks: z(),
            drift_slips: z(),
            drift_repeats: z(),
            drift_ppm_bits: z(),
            resampler_frames: z(),
            resyncs: z(),
            reprimes: z(),
            nonfinite_inputs: z(),
            nonfinite_outputs: z(),
            mutes: z(),
            mute_reason: AtomicU8::new(0),
            other_errors: z(),
            fault: AtomicU8::new(0),
            fault_direction: AtomicU8::new(0),
            cpu_ns: z(),
            max_callback_ppm: z(),
            frames_out: z(),
            callbacks_in: z(),
            callbacks_out: z(),
            in_period: AtomicU32::new(0),
            out_period: AtomicU32::new(0),
            last_input_ns: z(),
            last_input_frames: z(),
            capture_delay_ns: z(),
            latency_last_ns: z(),
            latency_min_ns: AtomicU64::new(u64::MAX),
            latency_max_ns: z(),
            latency_sum_ns: z(),
            latency_count: z(),
            in_peak: AtomicU32::new(0),
            out_peak: AtomicU32::new(0),
            unmute: AtomicBool::new(false),
            engine_errors: z(),
            callback_times: TimeHistogram::new(),
            callback_priority: AtomicI64::new(i64::MIN),
            #[cfg(feature = "test-hooks")]
            stall_ns: z(),
            #[cfg(feature = "test-hooks")]
            inject_nonfinite: AtomicBool::new(false),
        }
    }

    /// Records the first fault; later ones are ignored. Atomics only (called from error callbacks).
    pub fn set_fault(&self, fault: Fault) {
        let (c, d) = fault.code();
        if self.fault.compare_exchange(0, c, Relaxed, Relaxed).is_ok() {
            self.fault_direction.store(d, Relaxed);
        }
    }

    pub fn fault(&self) -> Option<Fault> {
        Fault::from_code(self.fault.load(Relaxed), self.fault_direction.load(Relaxed))
    }

    /// What an error callback does with cpal's error: classify it into counters and flags.
    pub fn note_error(&self, kind: cpal::ErrorKind, direction: Direction) {
        use cpal::ErrorKind as K;
        match kind {
            K::Xrun => {
                self.host_xruns.fetch_add(1, Relaxed);
            }
            K::DeviceNotAvailable => self.set_fault(Fault::DeviceLost(direction)),
            K::HostUnavailable => self.set_fault(Fault::HostLost(direction)),
            K::StreamInvalidated => self.set_fault(Fault::StreamInvalidated(direction)),
            _ => {
                self.other_errors.fetch_add(1, Relaxed);
            }
        }
    }

    /// Raises a peak meter (non-negative f32 bit patterns order like the integers).
    #[inline]
    pub fn raise_peak(meter: &AtomicU32, peak: f32) {
        if peak > 0.0 {
            meter.fetch_max(peak.to_bits(), Relaxed);
        }
    }

    pub fn take_peaks(&self) -> Peaks {
        Peaks {
            input: f32::from_bits(self.in_peak.swap(0, Relaxed)),
            output: f32::from_bits(self.out_peak.swap(0, Relaxed)),
        }
    }

    /// Stores the outcome of a priority request for the callback thread. Atomics only.
    pub fn store_priority(&self, granted: Result<i32, i32>) {
        let v = match granted {
            Ok(p) => i64::from(p),
            Err(e) => -i64::from(e.max(1)),
        };
        self.callback_priority.store(v, Relaxed);
    }

    #[inline]
    pub fn record_latency(&self, ns: u64) {
        self.latency_last_ns.store(ns, Relaxed);
        self.latency_min_ns.fetch_min(ns, Relaxed);
        self.latency_max_ns.fetch_max(ns, Relaxed);
        self.latency_sum_ns.fetch_add(ns, Relaxed);
        self.latency_count.fetch_add(1, Relaxed);
    }

    /// Records the last input callback's time and frame count (the count first: a reader that sees the
    /// new time sees the new count; a mismatched pair only ever lasts one callback after a change).
    #[inline]
    pub fn store_last_input(&self, now_ns: u64, frames: usize) {
        self.last_input_frames.store(frames as u64, Release);
        self.last_input_ns.store(now_ns, Release);
    }

    #[inline]
    pub fn last_input(&self) -> (u64, usize) {
        let t = self.last_input_ns.load(Acquire);
        (t, self.last_input_frames.load(Acquire) as usize)
    }

    pub fn snapshot(&self, late_results: u64, worker_cpu_s: f64) -> Stats {
        let rate = f64::from(self.rate_hz);
        let seconds = self.frames_out.load(Relaxed) as f64 / rate;
        let count = self.latency_count.load(Relaxed);
        let ms = |ns: u64| ns as f64 * 1e-6;
        let cpu_s = self.cpu_ns.load(Relaxed) as f64 * 1e-9 + worker_cpu_s;
        Stats {
            seconds,
            host_xruns: self.host_xruns.load(Relaxed),
            ring_underruns: self.ring_underruns.load(Relaxed),
            ring_overflows: self.ring_overflows.load(Relaxed),
            late_callbacks: self.late_callbacks.load(Relaxed),
            preempted_callbacks: self.preempted_callbacks.load(Relaxed),
            drift_slips: self.drift_slips.load(Relaxed),
            drift_repeats: self.drift_repeats.load(Relaxed),
            drift_ppm: f64::from_bits(self.drift_ppm_bits.load(Relaxed)),
            resampler_latency_ms: self.resampler_frames.load(Relaxed) as f64 * 1000.0 / rate,
            resyncs: self.resyncs.load(Relaxed),
            reprimes: self.reprimes.load(Relaxed),
            late_results,
            engine_errors: self.engine_errors.load(Relaxed),
            nonfinite_inputs: self.nonfinite_inputs.load(Relaxed),
            nonfinite_outputs: self.nonfinite_outputs.load(Relaxed),
            mutes: self.mutes.load(Relaxed),
            muted: MuteReason::from_code(self.mute_reason.load(Relaxed)),
            latency_ms: if count > 0 { ms(self.latency_sum_ns.load(Relaxed)) / count as f64 } else { 0.0 },
            latency_min_ms: if count > 0 { ms(self.latency_min_ns.load(Relaxed)) } else { 0.0 },
            latency_max_ms: ms(self.latency_max_ns.load(Relaxed)),
            latency_last_ms: ms(self.latency_last_ns.load(Relaxed)),
            engine_latency_ms: self.engine_latency_frames as f64 * 1000.0 / rate,
            mean_load_pct: if seconds > 0.0 { 100.0 * cpu_s / seconds } else { 0.0 },
            max_callback_pct: self.max_callback_ppm.load(Relaxed) as f64 * 1e-4,
            input_period_frames: self.in_period.load(Relaxed),
            output_period_frames: self.out_period.load(Relaxed),
            input_callbacks: self.callbacks_in.load(Relaxed),
            output_callbacks: self.callbacks_out.load(Relaxed),
            other_errors: self.other_errors.load(Relaxed),
            callback_times: self.callback_times.snapshot(),
            callback_priority: match self.callback_priority.load(Relaxed) {
                i64::MIN => None,
                p if p >= 0 => Some(Ok(p as i32)),
                e => Some(Err((-e) as i32)),
            },
        }
    }
}

/// A stream that makes no callback for this long, once running, is declared stalled.
const STALL_AFTER: std::time::Duration = std::time::Duration::from_secs(1);
/// Grace time after start before the watchdog looks.
const STALL_GRACE: std::time::Duration = std::time::Duration::from_secs(2);

/// The fault of a pair of cpal streams, input and output: one an error callback reported, or else a stream
/// whose callbacks stopped (`watch`, per direction, input first), recorded in `shared` as
/// [`Fault::Stalled`].
pub(crate) fn poll_stream_pair(shared: &BridgeCells, watch: &mut [Watchdog; 2]) -> Option<Fault> {
    if let Some(f) = shared.fault() {
        return Some(f);
    }
    let counts = [
        (shared.callbacks_in.load(Relaxed), crate::Direction::Input),
        (shared.callbacks_out.load(Relaxed), crate::Direction::Output),
    ];
    for (watch, (count, dir)) in watch.iter_mut().zip(counts) {
        if watch.stalled(count) {
            shared.set_fault(Fault::Stalled(dir));
            return shared.fault();
        }
    }
    None
}

/// Finds a stream whose callbacks stopped: its callback count has not moved for a second, two seconds or
/// more after the start. The control thread feeds it the count at each poll.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Watchdog {
    started: std::time::Instant,
    seen: u64,
    at: std::time::Instant,
}

impl Watchdog {
    pub(crate) fn new() -> Self {
        let now = std::time::Instant::now();
        Self { started: now, seen: 0, at: now }
    }

    /// Whether the stream is stalled, given its callback count now.
    pub(crate) fn stalled(&mut self, count: u64) -> bool {
        let now = std::time::Instant::now();
        if count != self.seen {
            self.seen = count;
            self.at = now;
            false
        } else {
            now.duration_since(self.started) > STALL_GRACE && now.duration_since(self.at) > STALL_AFTER
        }
    }
}
