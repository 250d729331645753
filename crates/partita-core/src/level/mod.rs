//! The FFT levels of a plan, each run by its schedule. [`fdl`] is one level's arithmetic (overlap-save with
//! a frequency-domain delay line); [`workers`] and [`sliced`] are the two ways of running a level's work
//! away from the callback that completes its input; [`LevelSlot`] is the one place that dispatches over
//! the three schedules.
//!
//! The audio thread touches everything here; a `workers` level's job also runs on its own worker thread.

use crate::kernel::Kernel;

pub(crate) mod fdl;
mod fourstep;
pub(crate) mod sliced;
pub(crate) mod workers;

use fdl::{LevelIo, LevelIr, LevelRunner, SlotMask};
use sliced::SlicedLevel;
use workers::WorkerLevel;

/// A level of one routing group (or of every group, for `workers` and `sliced`), run by its schedule.
#[derive(Debug)]
pub(crate) enum LevelSlot {
    Sync(LevelRunner),
    Workers(WorkerLevel),
    Sliced(Box<SlicedLevel>),
}

/// What the worker levels of an engine have counted.
#[derive(Debug, Clone, Copy, Default)]
pub(crate) struct WorkerCounts {
    pub(crate) late: u64,
    pub(crate) refused: u64,
    pub(crate) cpu_seconds: f64,
}

impl LevelSlot {
    /// Level block N and the lead of its results (frames from the next output to emit at a release to
    /// the first frame the result covers).
    pub(crate) fn geometry(&self) -> (usize, usize) {
        match self {
            Self::Sync(l) => (l.n(), l.lead),
            Self::Workers(w) => (w.n(), w.lead()),
            Self::Sliced(s) => (s.n(), s.lead()),
        }
    }

    /// True when the level's input block completes at engine block `block` (a release).
    pub(crate) fn due_at(&self, block: u64) -> bool {
        match self {
            Self::Sync(l) => l.due_at(block),
            Self::Workers(w) => w.due_at(block),
            Self::Sliced(s) => s.due_at(block),
        }
    }

    /// The level's work at the boundary that ends engine block `block`: a release computes the IR slots
    /// in `release`; otherwise a `workers` level moves its hand-off chunks and a `sliced` level runs its
    /// share of the current job.
    pub(crate) fn at_boundary(
        &mut self,
        io: LevelIo<'_>,
        irs: [Option<&LevelIr>; 2],
        release: Option<SlotMask>,
        block: u64,
        kernel: Kernel,
    ) {
        match self {
            Self::Sync(l) => {
                if let Some(mask) = release {
                    l.run_sync(io, irs, mask, kernel);
                }
            }
            Self::Workers(w) => {
                if release.is_some() || w.active_at(block) {
                    w.at_boundary(io, irs, release);
                }
            }
            Self::Sliced(s) => s.at_boundary(io, irs, release),
        }
    }

    /// True while work in flight still reads IR slot `slot`.
    pub(crate) fn holds(&self, slot: usize) -> bool {
        match self {
            Self::Sync(_) => false,
            Self::Workers(w) => w.holds(slot),
            Self::Sliced(s) => s.holds(slot),
        }
    }

    /// Zeroes up to `budget` samples of the level's state from `pos`; the position to go on from, or
    /// `None` when done. A worker level zeroes its own state before its next job, so it is done at once
    /// (after [`forget_work`](Self::forget_work)).
    pub(crate) fn sweep(&mut self, pos: usize, budget: usize) -> Option<usize> {
        match self {
            Self::Sync(l) => l.sweep(pos, budget),
            Self::Sliced(s) => s.sweep(pos, budget),
            Self::Workers(_) => None,
        }
    }

    /// Forgets work in flight (a `workers` level tells its worker to clear its delay line before its next
    /// job); the other schedules have none.
    pub(crate) fn forget_work(&mut self) {
        if let Self::Workers(w) = self {
            w.reset();
        }
    }

    /// Zeroes the whole state at once.
    pub(crate) fn clear(&mut self) {
        match self {
            Self::Sync(l) => l.clear(),
            Self::Workers(w) => w.reset(),
            Self::Sliced(s) => s.clear(),
        }
    }

    /// Bytes of level state (delay lines, accumulators, hand-off slots, scratch).
    pub(crate) fn memory_bytes(&self) -> usize {
        match self {
            Self::Sync(l) => l.memory_bytes(),
            Self::Workers(w) => w.memory_bytes(),
            Self::Sliced(s) => s.memory_bytes(),
        }
    }

    /// Adds this level's worker counters to `counts` (nothing for the other schedules).
    pub(crate) fn add_worker_counts(&self, counts: &mut WorkerCounts) {
        if let Self::Workers(w) = self {
            counts.late += w.late();
            counts.refused += w.refused();
            counts.cpu_seconds += w.cpu_seconds();
        }
    }

    /// For a worker level, the real-time priority its thread was granted (see
    /// [`Engine::worker_priorities`](crate::Engine::worker_priorities)); `None` for the other schedules.
    pub(crate) fn worker_priority(&self) -> Option<Option<Result<i32, i32>>> {
        match self {
            Self::Workers(w) => Some(w.priority()),
            _ => None,
        }
    }

    /// Test hook: whether a worker level's thread flushes subnormals (`None` for other schedules).
    #[cfg(feature = "test-hooks")]
    pub(crate) fn worker_flushing(&self) -> Option<bool> {
        match self {
            Self::Workers(w) => Some(w.flushing()),
            _ => None,
        }
    }

    /// Test hook: a worker level's jobs take `delay` longer.
    #[cfg(feature = "test-hooks")]
    pub(crate) fn set_worker_test_delay(&self, delay: std::time::Duration) {
        if let Self::Workers(w) = self {
            w.set_test_delay(delay);
        }
    }

    /// Test hook: cost units a sliced level did at the last boundary, and one whole job's with its period.
    #[cfg(feature = "test-hooks")]
    pub(crate) fn sliced_costs(&self) -> Option<(u64, u64, u64)> {
        match self {
            Self::Sliced(s) => Some((s.last_cost, s.job_cost(), s.period_blocks())),
            _ => None,
        }
    }

    /// Test hook: fills scratch buffers with `value` (worker buffers belong to the worker thread).
    #[cfg(feature = "test-hooks")]
    pub(crate) fn dirty(&mut self, value: f32) {
        match self {
            Self::Sync(l) => l.dirty(value),
            Self::Workers(_) => {}
            Self::Sliced(s) => s.dirty(value),
        }
    }
}
