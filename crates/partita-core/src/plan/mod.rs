//! Partition plans: plain data describing how an impulse response is cut into a direct-form head and
//! FFT levels. The [`Planner`](crate::Planner) makes them; tests and benches may also write them by hand.

use serde::{Deserialize, Serialize};

use crate::error::PlanError;

pub(crate) mod cost;

/// The block phase (0..period) at which slot `group` of level `level_index` completes its input, when the
/// level runs as `groups` separate slots: levels and groups are staggered so that big levels of different
/// groups do not complete in the same callback. The engine's slot layout and the worst-call model use it.
pub(crate) fn slot_phase_blocks(level_index: usize, group: usize, groups: usize, period_blocks: u64) -> u64 {
    ((level_index * groups + group) as u64) % period_blocks.max(1)
}
pub(crate) mod offline;
pub(crate) mod planner;

/// Where and when a level's work runs.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash, Serialize, Deserialize)]
#[serde(rename_all = "lowercase")]
pub enum Schedule {
    /// Computed inside the callback that completes the level's input block (result due at once, D = 0).
    Sync,
    /// A periodic job on a worker thread, due one level period after its input completes (D = N).
    Workers,
    /// Time-distributed across the callbacks of its own period, no threads (D = N).
    Sliced,
}

impl Schedule {
    /// How many frames after its input block completes the level's result may arrive (the `D` of the
    /// offset rule) for a level of `level_block_frames`.
    pub fn due_frames(self, level_block_frames: usize) -> usize {
        match self {
            Self::Sync => 0,
            Self::Workers | Self::Sliced => level_block_frames,
        }
    }

    /// The name used by the CLI, JSON and CSV.
    pub fn as_str(self) -> &'static str {
        match self {
            Self::Sync => "sync",
            Self::Workers => "workers",
            Self::Sliced => "sliced",
        }
    }
}

impl std::fmt::Display for Schedule {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(self.as_str())
    }
}

impl std::str::FromStr for Schedule {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        match s {
            "sync" => Ok(Self::Sync),
            "workers" => Ok(Self::Workers),
            "sliced" => Ok(Self::Sliced),
            _ => Err(format!("unknown schedule `{s}`; use sync, workers or sliced")),
        }
    }
}

/// One FFT level: `partitions` consecutive pieces of `block_frames` taps starting at IR frame
/// `offset_frames`, computed with FFTs of `2 * block_frames` points.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Level {
    /// The level's block size N (a multiple of the engine block B).
    pub block_frames: usize,
    /// Number of partitions P.
    pub partitions: usize,
    /// First IR tap the level covers, s.
    pub offset_frames: usize,
    /// When its work runs.
    pub schedule: Schedule,
}

impl Level {
    /// One past the last IR tap the level covers.
    pub fn end_frames(&self) -> usize {
        self.offset_frames + self.block_frames * self.partitions
    }

    /// The smallest offset the level may have: `N - B + D` with block latency, `N + D` at zero latency.
    pub fn min_offset_frames(&self, block_frames: usize, zero_latency: bool) -> usize {
        let due = self.schedule.due_frames(self.block_frames);
        if zero_latency {
            self.block_frames + due
        } else {
            self.block_frames + due - block_frames.min(self.block_frames)
        }
    }

    /// Flop-model cost of this level per output sample of one (input, IR) pair: a forward and an
    /// inverse real FFT of 2N points (~10 log2(2N) flops per sample, the split-radix estimate
    /// 2 x 2.5 x 2N log2(2N) per N samples) plus 8 flops per complex bin per partition
    /// (one complex multiply-add; N + 1 bins per N samples). Wefers 2015, ch. 5.
    pub fn flops_per_sample(&self) -> f64 {
        let n = self.block_frames as f64;
        10.0 * (2.0 * n).log2() + 8.0 * self.partitions as f64 * (n + 1.0) / n
    }
}

/// A complete partition plan for one engine.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct Plan {
    /// Engine block size B: the granularity of the FFT clock and, without zero latency, the latency.
    pub block_frames: usize,
    /// True when a direct-form head makes the output sample-accurate with latency 0.
    pub zero_latency: bool,
    /// Taps `[0, head_frames)` computed in direct form, sample by sample.
    pub head_frames: usize,
    /// The FFT levels, in IR order.
    pub levels: Vec<Level>,
    /// Taps of the IR the plan was made for.
    pub ir_frames: usize,
}

impl Plan {
    /// The most taps a plan may cover, head and levels: 2^25 = 33,554,432 (11.6 minutes at 48 kHz), twice
    /// the longest IR partita-io loads, so a plan for any such IR fits with room for its last level. An
    /// engine keeps about 32 bytes per covered tap per (input, IR channel) pair, so this bounds an engine's
    /// memory for any plan it accepts, however the plan was written.
    pub const MAX_COVERED_FRAMES: usize = 1 << 25;

    /// A uniformly partitioned plan: one level of block `block_frames` covering `ir_frames` taps,
    /// computed synchronously, latency `block_frames`.
    ///
    /// # Errors
    /// [`PlanError::BlockFramesZero`] or [`PlanError::IrFramesZero`].
    pub fn uniform(block_frames: usize, ir_frames: usize) -> Result<Self, PlanError> {
        if block_frames == 0 {
            return Err(PlanError::BlockFramesZero);
        }
        if ir_frames == 0 {
            return Err(PlanError::IrFramesZero);
        }
        let plan = Self {
            block_frames,
            zero_latency: false,
            head_frames: 0,
            levels: vec![Level {
                block_frames,
                partitions: ir_frames.div_ceil(block_frames),
                offset_frames: 0,
                schedule: Schedule::Sync,
            }],
            ir_frames,
        };
        plan.validate()?;
        Ok(plan)
    }

    /// Algorithmic latency in frames: where an impulse at input frame 0 appears in the output.
    pub fn latency_frames(&self) -> usize {
        if self.zero_latency {
            0
        } else {
            self.block_frames
        }
    }

    /// Taps covered by the head and the levels (at least `ir_frames` in a valid plan).
    pub fn covered_frames(&self) -> usize {
        self.levels.last().map_or(self.head_frames, Level::end_frames)
    }

    /// Largest level block, or the engine block when there is no level.
    pub fn max_level_frames(&self) -> usize {
        self.levels.iter().map(|l| l.block_frames).max().unwrap_or(self.block_frames)
    }

    /// Flop-model cost per output sample of one (input, IR) pair (the mono cost): 2 flops per head tap
    /// plus each level's [`Level::flops_per_sample`].
    pub fn flops_per_sample(&self) -> f64 {
        2.0 * self.head_frames as f64 + self.levels.iter().map(Level::flops_per_sample).sum::<f64>()
    }

    /// Bytes of spectra held per (input, IR channel) pair: the IR's partition spectra plus the input's
    /// frequency-domain delay line, 8 bytes per complex bin each.
    pub fn spectra_bytes_per_pair(&self) -> usize {
        self.levels.iter().map(|l| 2 * 8 * l.partitions * (l.block_frames + 1)).sum()
    }

    /// Checks that the plan can run: positive sizes, level blocks multiples of the engine block, levels
    /// tiling the IR from the end of the head, each level obeying its offset rule, and enough coverage.
    ///
    /// # Errors
    /// The first rule broken, as a [`PlanError`] naming the level.
    pub fn validate(&self) -> Result<(), PlanError> {
        let b = self.block_frames;
        if b == 0 {
            return Err(PlanError::BlockFramesZero);
        }
        if self.ir_frames == 0 {
            return Err(PlanError::IrFramesZero);
        }
        let too_long = |frames| PlanError::TooLong { frames, limit_frames: Self::MAX_COVERED_FRAMES };
        if self.ir_frames > Self::MAX_COVERED_FRAMES || self.head_frames > Self::MAX_COVERED_FRAMES {
            return Err(too_long(self.ir_frames.max(self.head_frames)));
        }
        let mut expected = self.head_frames;
        for (index, level) in self.levels.iter().enumerate() {
            if level.partitions == 0 {
                return Err(PlanError::NoPartitions { level: index });
            }
            // Checked before any sum below, so a written plan's sizes cannot overflow them.
            let end = level.block_frames.checked_mul(level.partitions).and_then(|l| l.checked_add(level.offset_frames));
            match end {
                Some(end) if end <= Self::MAX_COVERED_FRAMES => {}
                _ => return Err(too_long(end.unwrap_or(usize::MAX))),
            }
            if level.block_frames == 0 || level.block_frames % b != 0 {
                return Err(PlanError::LevelBlockNotMultiple {
                    level: index,
                    level_block_frames: level.block_frames,
                    block_frames: b,
                });
            }
            if level.offset_frames != expected {
                return Err(PlanError::Gap {
                    level: index,
                    expected_offset_frames: expected,
                    offset_frames: level.offset_frames,
                });
            }
            let required = level.min_offset_frames(b, self.zero_latency);
            if level.offset_frames < required {
                let rule = match (self.zero_latency, level.schedule) {
                    (false, Schedule::Sync) => "s >= N - B (sync, block latency)",
                    (false, _) => "s >= 2N - B (result due one level period later, block latency)",
                    (true, Schedule::Sync) => "s >= N (sync, zero latency)",
                    (true, _) => "s >= 2N (result due one level period later, zero latency)",
                };
                return Err(PlanError::OffsetRule {
                    level: index,
                    offset_frames: level.offset_frames,
                    required_frames: required,
                    rule,
                });
            }
            expected = level.end_frames();
        }
        if self.covered_frames() < self.ir_frames {
            return Err(PlanError::TooShort { covered_frames: self.covered_frames(), ir_frames: self.ir_frames });
        }
        Ok(())
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn level(n: usize, p: usize, s: usize) -> Level {
        Level { block_frames: n, partitions: p, offset_frames: s, schedule: Schedule::Sync }
    }

    #[test]
    fn uniform_plan_covers_the_ir() {
        let plan = Plan::uniform(64, 1000).unwrap();
        assert_eq!(plan.levels[0].partitions, 16);
        assert_eq!(plan.latency_frames(), 64);
        assert!(plan.covered_frames() >= 1000);
    }

    #[test]
    fn offset_rule_is_enforced() {
        // A 256 level may start at 256 - 64 = 192 when sync, block latency.
        let ok = Plan {
            block_frames: 64,
            zero_latency: false,
            head_frames: 0,
            levels: vec![level(64, 3, 0), level(256, 2, 192)],
            ir_frames: 704,
        };
        ok.validate().unwrap();
        let early = Plan { levels: vec![level(64, 2, 0), level(256, 2, 128)], ..ok.clone() };
        assert!(matches!(early.validate(), Err(PlanError::OffsetRule { level: 1, required_frames: 192, .. })));
        let mut late = ok.clone();
        late.levels[1].schedule = Schedule::Workers;
        let err = late.validate().unwrap_err();
        assert!(err.to_string().contains("2N - B"), "{err}");
        let gap = Plan { levels: vec![level(64, 3, 0), level(256, 2, 256)], ..ok.clone() };
        assert!(matches!(gap.validate(), Err(PlanError::Gap { .. })));
        let short = Plan { ir_frames: 5000, ..ok };
        assert!(matches!(short.validate(), Err(PlanError::TooShort { .. })));
    }

    #[test]
    fn sizes_past_the_limit_or_overflowing_are_refused() {
        let plan =
            |levels, ir_frames| Plan { block_frames: 64, zero_latency: false, head_frames: 0, levels, ir_frames };
        let limit = Plan::MAX_COVERED_FRAMES;
        plan(vec![level(64, limit / 64, 0)], 1000).validate().unwrap();
        let over = plan(vec![level(64, limit / 64 + 1, 0)], 1000).validate();
        assert_eq!(over, Err(PlanError::TooLong { frames: limit + 64, limit_frames: limit }));
        // From plan JSON, sizes whose product or sum overflows: refused, not wrapped or panicking.
        let product = plan(vec![level(64, usize::MAX / 32, 0)], 1000).validate();
        assert_eq!(product, Err(PlanError::TooLong { frames: usize::MAX, limit_frames: limit }));
        let sum = plan(vec![level(64, 1, usize::MAX - 10)], 1000).validate();
        assert!(matches!(sum, Err(PlanError::TooLong { .. })), "{sum:?}");
        assert!(matches!(plan(vec![level(64, 1, 0)], limit + 1).validate(), Err(PlanError::TooLong { .. })));
    }

    #[test]
    fn zero_latency_needs_a_head() {
        let plan = Plan {
            block_frames: 64,
            zero_latency: true,
            head_frames: 0,
            levels: vec![level(64, 4, 0)],
            ir_frames: 256,
        };
        assert!(matches!(plan.validate(), Err(PlanError::OffsetRule { required_frames: 64, .. })));
        let fixed = Plan { head_frames: 64, levels: vec![level(64, 3, 64)], ..plan };
        fixed.validate().unwrap();
    }

    #[test]
    fn flop_model_matches_the_published_example() {
        // DESIGN.md section 3: 64x15 + 512x14 + 4096x14 + 32768x13 at B = 64 costs about 914 flops/sample
        // (flop model of Wefers 2015; the value is quoted, not re-derived from the thesis).
        let plan = Plan {
            block_frames: 64,
            zero_latency: false,
            head_frames: 0,
            levels: vec![level(64, 15, 0), level(512, 14, 960), level(4096, 14, 8128), level(32768, 13, 65472)],
            ir_frames: 480_000,
        };
        plan.validate().unwrap();
        let f = plan.flops_per_sample();
        assert!((f - 914.0).abs() < 15.0, "{f}");
    }
}
