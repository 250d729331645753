//! # partita-device
//!
//! Live audio through a Partita [`Engine`](partita_core::Engine), two ways:
//!
//! - **JACK** (feature `jack`): `JackDuplex`, one JACK client with input and output ports and the
//!   engine inside its process callback: no ring, no drift, an input-to-output latency that is exactly
//!   the engine's plus the connected ports' (registered with JACK through a latency callback). This is
//!   what `partita monitor --host jack` uses; see the `duplex` module's docs.
//! - **Room measurement on JACK** (feature `jack`): `JackCapture`, one client that plays a prepared
//!   signal and records an input in the same callback, so the loop delay is exact in frames; what
//!   `partita capture` uses; see the `capture` module's docs.
//! - **Room measurement on split devices** (any cpal host): `SplitCapture`, one stream playing and one
//!   recording, each on its own clock; the takes are aligned and the clock skew measured afterwards
//!   (`partita_room::align`); see the `split` module's docs.
//! - **Other hosts, through cpal**: an input stream and an output stream (cpal has no duplex stream)
//!   bridged by a `ringbuf` SPSC queue, the engine run in one of the two callbacks. Described below.
//!
//! Either way a [safety stage](safety) comes last in the chain, and run-time counters ([`Stats`]) tell
//! our own overruns (late results, callbacks over their period, ring under/overflows, engine errors)
//! apart from the host's xruns and from callbacks the scheduler preempted, with the engine callback's
//! time distribution (p50, p99, p99.9, max). `realtime` options ask SCHED_FIFO for the callback threads
//! ([`CALLBACK_PRIORITY`]).
//!
//! - [`LiveDevices::open`] picks the host (ALSA; JACK with the `jack` feature), the devices (by
//!   default, index or name), a configuration (channels, rate, PCM format, a fixed period where the
//!   host allows); [`LiveDevices::start`] builds the [`Bridge`] and starts both streams.
//! - The per-callback work is plain struct methods ([`CaptureSide::capture`],
//!   [`PlaybackSide::play`]) that never allocate, lock or wait, so tests drive them without a device.
//! - Any callback frame count works (split into chunks of the engine's `max_host_frames`); every PCM
//!   format converts to and from f32 ([`convert`]); device channels map to engine channels
//!   ([`ChannelMap`]); clock drift between separate devices is corrected by adaptive resampling ([`drift`]): the
//!   playback side reads the ring through a 32-tap windowed-sinc interpolator at a rate a PI loop on
//!   the ring level sets, so no frame is ever dropped or repeated (a 1 kHz tone at 100 ppm keeps every
//!   spur over 100 dB down). The resampler engages only once the level drifts, so devices on one clock
//!   are untouched. Once engaged it adds 16 frames (0.33 ms at 48 kHz), included in the reported
//!   latency (`Stats::resampler_latency_ms`; the correction is `Stats::drift_ppm`).
//!   `DriftMode::FrameSlip` keeps the old slip/repeat.
//! - Faults: error callbacks only set atomics. Host-reported xruns, our own overruns (ring underruns
//!   and overflows, callbacks slower than their period), drift corrections, late worker results,
//!   non-finite samples and mutes are counted separately ([`Stats`]); a lost device or a stopped
//!   server becomes a [`Fault`], and a watchdog catches streams that stop calling back.
//!
//! The whole chain runs offline, as the tests do:
//!
//! ```
//! use partita_core::{Engine, ImpulseResponse, Plan, Routing};
//! use partita_device::{Bridge, BridgeOptions, CallbackTime, SafetyOptions};
//!
//! let ir = ImpulseResponse::new(vec![vec![0.5, 0.25]], 48_000)?;
//! let engine = Engine::new(&Plan::uniform(64, ir.frames())?, &ir, Routing::Mono, 256)?;
//! let mut options = BridgeOptions::new(48_000, 1, 1);
//! options.safety = SafetyOptions { fade_in_ms: 0.0, ..SafetyOptions::default() };
//! let Bridge { mut capture, mut playback, handle } = Bridge::new(engine, &options)?;
//!
//! let mut input = vec![0.0f32; 64];
//! input[0] = 1.0;
//! let mut output = vec![0.0f32; 64];
//! let mut heard = Vec::new();
//! for k in 0..4u64 {
//!     let t = CallbackTime { now_ns: k * 1_333_333, device_delay_ns: 0 };
//!     capture.capture(&input, t);
//!     playback.play(&mut output, t);
//!     heard.extend_from_slice(&output);
//!     input[0] = 0.0;
//! }
//! // The impulse comes out after the engine's block latency of 64 frames.
//! assert_eq!((heard[64], heard[65]), (0.5, 0.25));
//! assert_eq!(handle.stats().overruns(), 0);
//! # Ok::<(), Box<dyn std::error::Error>>(())
//! ```
//!
//! ## Where the engine runs
//! [`EngineSide::Capture`] (default) runs the engine in the input callback and rings finished output
//! frames, so the output callback only copies and any jitter of the engine's time is absorbed by the
//! ring rather than by the output device's buffer. On a JACK server the two callbacks run in one cycle
//! and the choice made no difference beyond the noise of the measurement (the crate's `NOTES.md` has
//! the figures).
//!
//! ## Safety
//! See [`safety`]: a 250 ms fade-in, a -1 dBFS ceiling (a soft clipper without look-ahead), and a latched
//! mute on non-finite output or 400 ms of sustained full-scale output.
#![warn(missing_docs)]
#![deny(unsafe_op_in_unsafe_fn)]
// Only the modules that call C (`duplex` for jack-sys, `realtime` for pthreads) allow unsafe code, each
// for itself.
#![deny(unsafe_code)]

mod bridge;
#[cfg(feature = "jack")]
mod capture;
mod channels;
pub mod convert;
pub mod drift;
#[cfg(feature = "jack")]
mod duplex;
mod error;
mod host;
mod realtime;
pub mod safety;
mod split;
mod stats;
mod timing;

pub use bridge::{
    Bridge, BridgeHandle, BridgeOptions, CallbackTime, CaptureSide, EngineSide, PlaybackSide, MAX_ENGINE_CHANNELS,
};
#[cfg(feature = "jack")]
pub use capture::{Capture, CaptureInfo, CaptureOptions, CaptureStream, JackCapture, PortChoice, PortLatency};
pub use channels::ChannelMap;
pub use drift::{Correction, DriftMode, DriftOptions, DriftTracker, RateController};
#[cfg(feature = "jack")]
pub use duplex::{DuplexInfo, DuplexLatency, DuplexOptions, DuplexStream, JackDuplex, RebuildFn};
pub use error::{DeviceError, Direction};
pub use host::{
    host_by_name, host_names, jack_client_names, list_devices, ConfigInfo, DeviceInfo, DeviceOptions, DeviceSelector,
    LiveDevices, LiveInfo, LiveStream, SideInfo, StreamOptions,
};
pub use realtime::CALLBACK_PRIORITY;
pub use safety::{Ceiling, MuteReason, SafetyOptions, SafetyStage};
pub use split::{
    Recorder, SignalPlayer, SplitCapture, SplitHandle, SplitInfo, SplitOptions, SplitParts, SplitRecording,
    SplitStream, STOP_FADE_MS,
};
pub use stats::{Fault, Peaks, Stats};
pub use timing::CallbackTimes;

/// The caution `partita monitor` prints on start.
pub const CAUTION: &str = "\
CAUTION: live convolution can be loud. Start with the volume down and raise it slowly; prefer \
headphones. With an open microphone and speakers in one room, feedback can build within a second: \
the output mutes itself on sustained full-scale output or non-finite samples, but protect your ears \
and speakers first.";
