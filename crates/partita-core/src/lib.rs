//! # partita-core
//!
//! Partitioned overlap-save FFT convolution for real-time audio: a direct-form oracle, validated impulse
//! responses, routings (mono, stereo, true stereo, general matrices), partition plans and the streaming
//! [`Engine`] whose [`process`](Engine::process) never allocates, locks or waits.
//!
//! ```
//! use partita_core::{naive, Engine, ImpulseResponse, Plan, Routing};
//!
//! let taps = partita_core::synth::decaying_noise(1000, 400.0, 7);
//! let ir = ImpulseResponse::new(vec![taps.clone()], 48_000)?;
//! let plan = Plan::uniform(64, ir.frames())?;
//! let mut engine = Engine::new(&plan, &ir, Routing::Mono, 256)?;
//!
//! let x = partita_core::synth::Noise::new(1).vec(2000);
//! let mut y = vec![0.0f32; x.len()];
//! for (xc, yc) in x.chunks(100).zip(y.chunks_mut(100)) {
//!     engine.process(&[xc], &mut [yc])?;
//! }
//! // Output is the convolution delayed by the block latency.
//! let want = naive::convolve(&x, &taps);
//! let lat = engine.latency_frames();
//! assert!((y[1500] as f64 - want[1500 - lat]).abs() < 1e-4);
//! # Ok::<(), Box<dyn std::error::Error>>(())
//! ```
#![warn(missing_docs)]
#![deny(unsafe_op_in_unsafe_fn)]

pub mod control;
mod denormal;
mod engine;
mod error;
mod head;
#[cfg(feature = "test-hooks")]
pub mod hooks;
mod ir;
pub mod kernel;
mod level;
pub mod naive;
pub mod offline;
mod plan;
mod platform;
mod prepared;
mod ring;
mod routing;
pub mod synth;

pub use control::{Command, Control, Event, FadeState, Monitor, Refused, Status, SwapReport};
pub use engine::{Engine, EngineOptions, Mix};
pub use error::{
    ControlError, EngineError, IrError, MixError, PlanError, ProcessError, RoutingError, RoutingParseError, SendError,
};
pub use ir::ImpulseResponse;
pub use kernel::Kernel;
pub use level::workers::{live_worker_threads, Lateness, LATE_SPIN};
pub use plan::cost::{
    CostModel, MachineCosts, Shape, CALL_SECONDS, COPY_SECONDS_PER_SAMPLE, PACED_FACTOR_LARGE, PACED_FACTOR_SMALL,
    PACED_LARGE_FRAMES, PACED_SMALL_FRAMES, SLICED_MEAN_OVERHEAD, SLICED_OVERHEAD, SLICE_SECONDS, WAKE_SECONDS,
};
pub use plan::planner::{PlanMode, Planner, DEFAULT_HEADROOM_PCT, WORKER_SLACK_SECONDS};
pub use plan::{Level, Plan, Schedule};
pub use platform::{process_cpu_seconds, thread_cpu_seconds, try_realtime_priority};
#[cfg(feature = "test-hooks")]
pub use prepared::PrepareSplit;
pub use prepared::PreparedIr;
pub use ring::{prefault_stack, INPUT_LIMIT};
pub use routing::{Path, RouteMap, Routing};
