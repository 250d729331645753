//! Build-time options of an engine: plain data, chosen before anything is allocated.

use crate::engine::Mix;
use crate::kernel::Kernel;
use crate::level::workers::Lateness;

/// Build-time options of an [`Engine`](crate::Engine).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct EngineOptions {
    /// The largest frame count a host call may carry.
    pub max_host_frames: usize,
    /// Multiply-accumulate kernel; [`Kernel::detect`] by default.
    pub kernel: Kernel,
    /// Ask for rate-monotonic real-time priorities (SCHED_FIFO, smaller levels higher) for worker
    /// threads. Off by default: a spinning real-time thread can starve a small machine. When refused
    /// (no privilege), the workers run at normal priority; [`Engine::worker_priorities`](crate::Engine::worker_priorities) says what was
    /// granted.
    pub realtime_workers: bool,
    /// What to do when a worker result is late; [`Lateness::SpinThenDrop`] by default (real-time).
    pub lateness: Lateness,
    /// The longest pre-delay [`Command::PreDelayFrames`](crate::Command::PreDelayFrames) may ask for; 0 (none) by default. Costs
    /// 4 bytes per frame and output.
    pub max_predelay_frames: usize,
    /// For hosts that run faster than real time (an offline bounce, JACK freewheel, a batch job): worker
    /// results are waited for, whatever [`lateness`](Self::lateness) says, so nothing is dropped because
    /// calls come sooner than the wall clock would bring them. Off by default. Never on a live stream: a
    /// callback that waits for a worker can miss its deadline. (Plans without worker levels, which the
    /// offline render uses, need no waiting at all.)
    pub offline: bool,
    /// Frames per host call when the host calls with more than one engine block at a time (an audio
    /// driver's period, a game engine's mix buffer); `None` (the default) means calls of at most one
    /// block. Every `workers` level must be at least twice as long, or the engine refuses the plan: plan
    /// with the same figure ([`Planner::host_period_frames`](crate::Planner::host_period_frames)), which
    /// explains the rule. Calls longer than this make worker results late (counted in
    /// [`Monitor::late_results`](crate::Monitor::late_results)).
    pub host_period_frames: Option<usize>,
    /// The mix the stream starts with, without a ramp (wet 1, dry 0, 0 dB, no pre-delay, no bypass by
    /// default). Its pre-delay must be within `max_predelay_frames`.
    pub mix: Mix,
}

impl EngineOptions {
    /// The largest `max_host_frames` an engine takes: 2^20 frames (21.8 s at 48 kHz). The engine keeps
    /// buffers of this many frames per channel, so an absurd value (from a host or a C caller) is refused
    /// instead of exhausting memory.
    pub const MAX_HOST_FRAMES: usize = 1 << 20;
    /// The largest `max_predelay_frames` an engine takes: 2^22 frames (87 s at 48 kHz, 16 MiB per output).
    pub const MAX_PREDELAY_FRAMES: usize = 1 << 22;

    /// Defaults for a host calling with at most `max_host_frames` frames.
    pub fn new(max_host_frames: usize) -> Self {
        Self {
            max_host_frames,
            kernel: Kernel::detect(),
            realtime_workers: false,
            lateness: Lateness::default(),
            max_predelay_frames: 0,
            host_period_frames: None,
            offline: false,
            mix: Mix::default(),
        }
    }
}
