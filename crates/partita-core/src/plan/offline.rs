//! The offline plan policy: the plan to use when latency does not matter (files, bounces, batch work).
//! The offline render (`offline::render`) runs it; the `render` and `demo` commands choose their plans here.

use crate::error::PlanError;
use crate::plan::cost::Shape;
use crate::plan::planner::Planner;
use crate::plan::{Plan, Schedule};

/// Largest engine block [`offline_plan`] uses. A block sweep (`cargo bench --bench offline`, the block
/// table in docs/benchmarks/offline.md) found the best block holds the IR in about four partitions, and
/// that beyond 2^17 frames the FFTs leave the cache and the cost rises again.
pub const OFFLINE_MAX_BLOCK_FRAMES: usize = 1 << 17;

/// Smallest engine block [`offline_plan`] uses, so a short IR still renders in big blocks (an FFT pair
/// of 2048 points per 1024 frames costs about as much per frame as direct form for a 50-tap IR; the
/// per-block bookkeeping is then negligible). A judgement, not a measurement.
pub const OFFLINE_MIN_BLOCK_FRAMES: usize = 1024;

/// Largest level the offline planner may open (the optimal mode's `max_level_frames`).
pub const OFFLINE_MAX_LEVEL_FRAMES: usize = 1 << 17;

/// The engine block [`offline_plan`] picks for an IR of `ir_frames` taps: the power of two at or above a
/// quarter of the IR, between [`OFFLINE_MIN_BLOCK_FRAMES`] and [`OFFLINE_MAX_BLOCK_FRAMES`], so the IR
/// fits in about four partitions. Offline, latency costs nothing, and the multiply-accumulate over a
/// long frequency-domain delay line streams every partition from memory once per block, so fewer, larger
/// partitions win until the FFTs themselves leave the cache (measurements at
/// [`OFFLINE_MAX_BLOCK_FRAMES`]).
pub fn offline_block_frames(ir_frames: usize) -> usize {
    ir_frames.div_ceil(4).next_power_of_two().clamp(OFFLINE_MIN_BLOCK_FRAMES, OFFLINE_MAX_BLOCK_FRAMES)
}

/// The planner [`offline_plan`] uses: optimal layout, block [`offline_block_frames`], synchronous levels,
/// block latency (latency is irrelevant offline and the offline render removes it), levels up to
/// [`OFFLINE_MAX_LEVEL_FRAMES`]. Give it a measured [`CostModel`](crate::CostModel) with
/// [`Planner::cost_model`] to plan for this machine instead of the flop model.
pub fn offline_planner(ir_frames: usize) -> Planner {
    Planner::new()
        .block_frames(offline_block_frames(ir_frames))
        .zero_latency(false)
        .schedule(Schedule::Sync)
        .max_level_frames(OFFLINE_MAX_LEVEL_FRAMES)
}

/// The fastest plan we know for offline work on an IR of `ir_frames` taps and an engine of `shape`
/// (see [`offline_planner`]). Allocates (the plan's level list).
///
/// # Errors
/// [`PlanError::IrFramesZero`] when `ir_frames` is 0.
pub fn offline_plan(ir_frames: usize, shape: Shape) -> Result<Plan, PlanError> {
    offline_planner(ir_frames).shape(shape).plan(ir_frames)
}

/// [`offline_plan`], or with `block_frames` the same planner at that engine block (levels may then grow to
/// the block itself when it is above [`OFFLINE_MAX_LEVEL_FRAMES`]). Allocates (the plan's level list).
///
/// # Errors
/// [`PlanError`] for a zero block or IR length, or a block that is not a power of two.
pub fn offline_plan_with_block(ir_frames: usize, shape: Shape, block_frames: Option<usize>) -> Result<Plan, PlanError> {
    match block_frames {
        None => offline_plan(ir_frames, shape),
        Some(b) => offline_planner(ir_frames)
            .block_frames(b)
            .max_level_frames(OFFLINE_MAX_LEVEL_FRAMES.max(b))
            .shape(shape)
            .plan(ir_frames),
    }
}
