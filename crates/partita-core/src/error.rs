//! Set-up errors. Run-time conditions on the audio thread are counters, not errors (see [`crate::Monitor`]).

use std::fmt;

use crate::Routing;

/// Why an [`ImpulseResponse`](crate::ImpulseResponse) was refused.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum IrError {
    /// The channel list was empty.
    NoChannels,
    /// The channels hold no taps at all.
    Empty,
    /// Channels must all have the same number of taps.
    UnequalLengths {
        /// Index of the first channel whose length differs from channel 0.
        channel: usize,
        /// Its length in frames.
        frames: usize,
        /// Length of channel 0.
        expected: usize,
    },
    /// A tap is NaN or infinite.
    NonFinite {
        /// Channel of the first bad tap.
        channel: usize,
        /// Frame index of the first bad tap.
        frame: usize,
    },
    /// The sample rate was zero.
    SampleRateZero,
}

impl fmt::Display for IrError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::NoChannels => write!(f, "impulse response has no channels; give at least one"),
            Self::Empty => write!(f, "impulse response has 0 taps; give at least one tap per channel"),
            Self::UnequalLengths { channel, frames, expected } => write!(
                f,
                "impulse response channel {channel} has {frames} taps but channel 0 has {expected}; \
                 pad the channels to one length"
            ),
            Self::NonFinite { channel, frame } => {
                write!(f, "impulse response channel {channel} has a NaN or infinite tap at frame {frame}")
            }
            Self::SampleRateZero => write!(f, "impulse response sample rate is 0 Hz"),
        }
    }
}

impl std::error::Error for IrError {}

/// Why a [`Plan`](crate::Plan) cannot be built or run.
#[derive(Debug, Clone, PartialEq, Eq)]
#[non_exhaustive]
pub enum PlanError {
    /// The engine block size was zero.
    BlockFramesZero,
    /// A level list written as text (`--levels`) is not `NxP,NxP,...`.
    LevelsText {
        /// The level as written.
        level: String,
        /// What is wrong with it.
        problem: &'static str,
    },
    /// The IR length to plan for was zero.
    IrFramesZero,
    /// A level has no partitions.
    NoPartitions {
        /// Level index.
        level: usize,
    },
    /// A level's block is not a whole multiple of the engine block.
    LevelBlockNotMultiple {
        /// Level index.
        level: usize,
        /// The level's block size.
        level_block_frames: usize,
        /// The engine block size.
        block_frames: usize,
    },
    /// Levels must tile the IR without gaps or overlaps, starting where the direct-form head ends.
    Gap {
        /// Level index.
        level: usize,
        /// Where the level had to start.
        expected_offset_frames: usize,
        /// Where it starts.
        offset_frames: usize,
    },
    /// A level starts too early for its result to be ready in time.
    OffsetRule {
        /// Level index.
        level: usize,
        /// The level's offset.
        offset_frames: usize,
        /// The smallest offset the rule allows.
        required_frames: usize,
        /// The rule in words, for example `s >= N - B + D`.
        rule: &'static str,
    },
    /// The head and levels cover fewer taps than the IR has.
    TooShort {
        /// Taps covered by the plan.
        covered_frames: usize,
        /// Taps in the IR.
        ir_frames: usize,
    },
    /// The plan would cover more taps than [`Plan::MAX_COVERED_FRAMES`](crate::Plan::MAX_COVERED_FRAMES)
    /// (or its sizes overflow).
    TooLong {
        /// Taps the plan or its IR would reach (saturated at `usize::MAX`).
        frames: usize,
        /// The limit.
        limit_frames: usize,
    },
    /// The optimal planner's search grows with the IR's length in blocks; this IR has more blocks than
    /// [`Planner::MAX_OPTIMAL_BLOCKS`](crate::Planner::MAX_OPTIMAL_BLOCKS).
    TooManyBlocks {
        /// Taps in the IR.
        ir_frames: usize,
        /// The engine block.
        block_frames: usize,
        /// The limit in blocks.
        limit_blocks: usize,
    },
    /// No layout satisfies the request (for example a latency budget below one block).
    Infeasible {
        /// What could not be met.
        reason: String,
    },
}

impl fmt::Display for PlanError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::BlockFramesZero => write!(f, "block size is 0 frames; use at least 1"),
            Self::LevelsText { level, problem } => write!(
                f,
                "level `{level}`: {problem}; write levels as block x partitions in IR order, e.g. 64x15,512x14"
            ),
            Self::IrFramesZero => write!(f, "impulse response length is 0 frames; nothing to plan"),
            Self::NoPartitions { level } => write!(f, "level {level} has 0 partitions; give at least 1"),
            Self::LevelBlockNotMultiple { level, level_block_frames, block_frames } => write!(
                f,
                "level {level} block of {level_block_frames} frames is not a multiple of the engine \
                 block of {block_frames} frames"
            ),
            Self::Gap { level, expected_offset_frames, offset_frames } => write!(
                f,
                "level {level} starts at frame {offset_frames} but the previous part of the plan ends \
                 at frame {expected_offset_frames}; levels must tile the impulse response"
            ),
            Self::OffsetRule { level, offset_frames, required_frames, rule } => write!(
                f,
                "level {level} starts at frame {offset_frames}, before frame {required_frames} where \
                 the offset rule {rule} lets it start; its result would be late"
            ),
            Self::TooShort { covered_frames, ir_frames } => {
                write!(f, "plan covers {covered_frames} taps but the impulse response has {ir_frames}; add partitions")
            }
            Self::TooLong { frames, limit_frames } => write!(
                f,
                "the plan would reach tap {frames}, over the limit of {limit_frames} taps; use a shorter impulse \
                 response or fewer partitions"
            ),
            Self::TooManyBlocks { ir_frames, block_frames, limit_blocks } => write!(
                f,
                "an impulse response of {ir_frames} taps is more than {limit_blocks} blocks of {block_frames} \
                 frames, too many for the optimal planner; use a block of at least {} frames or a uniform plan",
                ir_frames.div_ceil(*limit_blocks)
            ),
            Self::Infeasible { reason } => write!(f, "no plan fits: {reason}"),
        }
    }
}

impl std::error::Error for PlanError {}

/// Why a routing does not fit an impulse response or an input, or none could be chosen.
#[derive(Debug, Clone, PartialEq, Eq)]
#[non_exhaustive]
pub enum RoutingError {
    /// The routing needs a different number of IR channels.
    ChannelCount {
        /// The routing, in words.
        routing: String,
        /// IR channel counts the routing accepts.
        expected: &'static str,
        /// IR channels given.
        got: usize,
    },
    /// A matrix needs at least one input and one output.
    EmptyMatrix,
    /// A matrix has more inputs or outputs than [`Routing::MAX_SIDE`](crate::Routing::MAX_SIDE).
    MatrixTooLarge {
        /// Its inputs.
        inputs: usize,
        /// Its outputs.
        outputs: usize,
        /// The limit for each.
        max_side: usize,
    },
    /// No routing was given and none follows from the IR's channel count (only 1, 2 and 4 have a default).
    NoDefault {
        /// IR channels.
        ir_channels: usize,
    },
    /// The routing (given, or the IR's default) does not take an input of this many channels.
    InputChannels {
        /// The routing of the impulse response.
        routing: Routing,
        /// IR channels.
        ir_channels: usize,
        /// Channels of the input.
        input_channels: usize,
    },
}

impl fmt::Display for RoutingError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::ChannelCount { routing, expected, got } => {
                write!(f, "{routing} routing needs an impulse response with {expected} channel(s), got {got}")
            }
            Self::EmptyMatrix => write!(f, "a routing matrix needs at least 1 input and 1 output"),
            Self::MatrixTooLarge { inputs, outputs, max_side } => write!(
                f,
                "a routing matrix of {inputs} inputs and {outputs} outputs is larger than the {max_side} of each \
                 a routing may have"
            ),
            Self::NoDefault { ir_channels } => write!(
                f,
                "no default routing for a {ir_channels}-channel impulse response (1 is mono, 2 stereo, 4 true \
                 stereo); give the routing explicitly, e.g. --routing matrix:MxN with M x N = {ir_channels}"
            ),
            Self::InputChannels { routing, ir_channels, input_channels } => write!(
                f,
                "a {input_channels}-channel input does not fit the {routing} routing of a {ir_channels}-channel \
                 impulse response, which takes {}; give such an input or another --routing",
                routing.takes()
            ),
        }
    }
}

impl std::error::Error for RoutingError {}

/// Text that names no routing (see [`Routing`]'s `FromStr`).
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RoutingParseError {
    /// The text given.
    pub given: String,
}

impl fmt::Display for RoutingParseError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        write!(
            f,
            "unknown routing \"{}\"; use mono, mono-to-stereo, stereo, true-stereo or matrix:MxN (M inputs, N \
             outputs, both from 1 to 1024)",
            self.given
        )
    }
}

impl std::error::Error for RoutingParseError {}

/// Why an [`Engine`](crate::Engine) could not be built.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum EngineError {
    /// The plan is invalid.
    Plan(PlanError),
    /// The routing does not fit the IR.
    Routing(RoutingError),
    /// The IR is longer than the plan covers.
    IrLongerThanPlan {
        /// Taps in the IR.
        ir_frames: usize,
        /// Taps the plan covers.
        plan_frames: usize,
    },
    /// `max_host_frames` was zero.
    MaxHostFramesZero,
    /// A size option is larger than the engine takes ([`EngineOptions::MAX_HOST_FRAMES`](crate::EngineOptions::MAX_HOST_FRAMES),
    /// [`EngineOptions::MAX_PREDELAY_FRAMES`](crate::EngineOptions::MAX_PREDELAY_FRAMES)).
    OptionTooLarge {
        /// The option's name.
        what: &'static str,
        /// Its value.
        frames: usize,
        /// The limit.
        limit_frames: usize,
    },
    /// A worker thread could not be started.
    Spawn(String),
    /// The IR could not be prepared.
    Control(ControlError),
    /// The initial mix does not fit the engine.
    Mix(MixError),
    /// A `workers` level is shorter than twice the host period: a job released in one host call could be
    /// due in the same call, and always be late.
    WorkerLevelTooShort {
        /// The level's block N.
        level_frames: usize,
        /// The host period the engine was told (or one block).
        host_period_frames: usize,
    },
}

impl fmt::Display for EngineError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Plan(e) => write!(f, "invalid plan: {e}"),
            Self::Routing(e) => write!(f, "invalid routing: {e}"),
            Self::IrLongerThanPlan { ir_frames, plan_frames } => write!(
                f,
                "impulse response has {ir_frames} taps but the plan covers {plan_frames}; \
                 plan for at least {ir_frames} frames"
            ),
            Self::MaxHostFramesZero => write!(f, "max_host_frames is 0; hosts call with at least 1 frame"),
            Self::OptionTooLarge { what, frames, limit_frames } => {
                write!(f, "{what} is {frames} frames, over the limit of {limit_frames}; ask for fewer frames")
            }
            Self::Spawn(e) => write!(f, "could not start a worker thread: {e}"),
            Self::Control(e) => write!(f, "{e}"),
            Self::Mix(e) => write!(f, "invalid mix: {e}"),
            Self::WorkerLevelTooShort { level_frames, host_period_frames } => write!(
                f,
                "a workers level of {level_frames} frames is shorter than twice the host period of \
                 {host_period_frames} frames, so its results would be late; plan with the same host period \
                 (Planner::host_period_frames), which keeps such levels in the callback"
            ),
        }
    }
}

impl std::error::Error for EngineError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            Self::Plan(e) => Some(e),
            Self::Routing(e) => Some(e),
            Self::Control(e) => Some(e),
            Self::Mix(e) => Some(e),
            _ => None,
        }
    }
}

impl From<PlanError> for EngineError {
    fn from(e: PlanError) -> Self {
        Self::Plan(e)
    }
}

impl From<MixError> for EngineError {
    fn from(e: MixError) -> Self {
        Self::Mix(e)
    }
}

impl From<RoutingError> for EngineError {
    fn from(e: RoutingError) -> Self {
        Self::Routing(e)
    }
}

/// A `process()` call the engine could not honour. `Copy`, no heap: safe to return on the audio thread.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum ProcessError {
    /// The number of input or output buffers differs from the routing.
    ChannelMismatch {
        /// Input buffers the routing needs.
        inputs_expected: usize,
        /// Output buffers the routing needs.
        outputs_expected: usize,
        /// Input buffers given.
        inputs_got: usize,
        /// Output buffers given.
        outputs_got: usize,
    },
    /// Buffers of one call have different lengths.
    UnequalBuffers,
    /// The call is longer than `max_host_frames`.
    TooManyFrames {
        /// The engine's limit.
        max_host_frames: usize,
        /// Frames in this call.
        got: usize,
    },
}

impl fmt::Display for ProcessError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::ChannelMismatch { inputs_expected, outputs_expected, inputs_got, outputs_got } => write!(
                f,
                "engine needs {inputs_expected} input and {outputs_expected} output buffers, \
                 got {inputs_got} and {outputs_got}"
            ),
            Self::UnequalBuffers => write!(f, "all buffers of one call must have the same length"),
            Self::TooManyFrames { max_host_frames, got } => {
                write!(f, "call has {got} frames but the engine was built for at most {max_host_frames}")
            }
        }
    }
}

impl std::error::Error for ProcessError {}

/// Why the control side refused an IR or a parameter.
#[derive(Debug, Clone, PartialEq, Eq)]
#[non_exhaustive]
pub enum ControlError {
    /// The IR has another channel count than the engine's, so its routing would differ.
    RoutingMismatch {
        /// IR channels the engine's routing uses.
        expected: usize,
        /// IR channels given.
        got: usize,
    },
    /// The IR's sample rate differs from the engine's (resample it first).
    RateMismatch {
        /// The engine's rate in Hz.
        expected: u32,
        /// The IR's rate in Hz.
        got: u32,
    },
    /// The IR is longer than the engine's plan covers.
    IrTooLong {
        /// Taps in the IR.
        ir_frames: usize,
        /// Taps the plan covers.
        max_frames: usize,
    },
}

impl fmt::Display for ControlError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::RoutingMismatch { expected, got } => write!(
                f,
                "impulse response has {got} channels but the running engine's routing uses {expected}; \
                 a swap keeps the routing, so build a new engine for another layout"
            ),
            Self::RateMismatch { expected, got } => {
                write!(f, "impulse response is at {got} Hz but the engine runs at {expected} Hz; resample it first")
            }
            Self::IrTooLong { ir_frames, max_frames } => write!(
                f,
                "impulse response has {ir_frames} taps but the engine's plan covers {max_frames}; \
                 build the engine with a plan for the longest IR you will swap in"
            ),
        }
    }
}

impl std::error::Error for ControlError {}

/// Why a [`Mix`](crate::Mix) does not fit an engine.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
#[non_exhaustive]
pub enum MixError {
    /// A gain is NaN or infinite (or the output gain in dB overflows).
    NotFinite {
        /// Which parameter: `wet`, `dry` or `output gain`.
        parameter: &'static str,
    },
    /// The pre-delay is longer than the engine was built for.
    PreDelayTooLong {
        /// Pre-delay asked for.
        predelay_frames: usize,
        /// The engine's bound (`EngineOptions::max_predelay_frames`).
        max_predelay_frames: usize,
    },
    /// A dry signal or bypass on a shape without a dry path (M > 1 inputs to N != M outputs).
    NoDryPath {
        /// Engine inputs.
        inputs: usize,
        /// Engine outputs.
        outputs: usize,
    },
}

impl fmt::Display for MixError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::NotFinite { parameter } => write!(f, "the {parameter} is not a finite number; give a finite gain"),
            Self::PreDelayTooLong { predelay_frames, max_predelay_frames } => write!(
                f,
                "a pre-delay of {predelay_frames} frames is longer than the engine's maximum of \
                 {max_predelay_frames}; build it with a larger max_predelay_frames"
            ),
            Self::NoDryPath { inputs, outputs } => write!(
                f,
                "{inputs} inputs to {outputs} outputs have no dry signal (it needs as many inputs as outputs, \
                 or one input); use dry 0 and no bypass"
            ),
        }
    }
}

impl std::error::Error for MixError {}

/// Why [`Control::send`](crate::Control::send) did not queue a command.
#[derive(Debug, Clone, Copy, PartialEq)]
#[non_exhaustive]
pub enum SendError {
    /// The command queue is full (is the engine's audio thread running?); the command comes back.
    QueueFull(crate::Command),
    /// The command does not fit the engine; nothing was queued.
    Invalid {
        /// The command.
        command: crate::Command,
        /// What is wrong with it.
        reason: MixError,
    },
}

impl SendError {
    /// The command that was not queued.
    pub fn command(&self) -> crate::Command {
        match self {
            Self::QueueFull(c) | Self::Invalid { command: c, .. } => *c,
        }
    }
}

impl fmt::Display for SendError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::QueueFull(_) => {
                write!(f, "the engine's command queue is full (is its audio thread running?); try again later")
            }
            Self::Invalid { command, reason } => write!(f, "{command:?} refused: {reason}"),
        }
    }
}

impl std::error::Error for SendError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            Self::Invalid { reason, .. } => Some(reason),
            Self::QueueFull(_) => None,
        }
    }
}
