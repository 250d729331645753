//! The partition planner: uniform, optimal (dynamic programme over offset and level size) and custom
//! layouts, each checked against the offset rule of its schedule.

use crate::error::PlanError;
use crate::plan::cost::{CostModel, Shape};
use crate::plan::{Level, Plan, Schedule};

/// Which layout the planner produces.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum PlanMode {
    /// One level of the engine block size (UPOLS).
    Uniform,
    /// The cheapest layout under the cost model (NUPOLS, Gardner 1995; Garcia 2002; Wefers 2015).
    #[default]
    Optimal,
}

/// Plans partitions for an IR length.
///
/// ```
/// use partita_core::{Planner, PlanMode};
/// let plan = Planner::new().block_frames(64).plan(480_000).unwrap();
/// assert!(plan.levels.len() > 1);
/// let uniform = Planner::new().block_frames(64).mode(PlanMode::Uniform).plan(480_000).unwrap();
/// assert!(plan.flops_per_sample() < uniform.flops_per_sample() / 20.0);
/// ```
#[derive(Debug, Clone, PartialEq)]
#[must_use = "a planner does nothing until `plan` is called"]
pub struct Planner {
    block_frames: usize,
    zero_latency: bool,
    schedule: Schedule,
    mode: PlanMode,
    model: CostModel,
    shape: Shape,
    max_level_frames: usize,
    min_sliced_frames: usize,
    /// `None`: the slack floor ([`WORKER_SLACK_SECONDS`]).
    min_worker_frames: Option<usize>,
    host_period_frames: Option<usize>,
    /// `Some(headroom %)`: choose the schedules ([`auto`](Planner::auto)); the default.
    auto_headroom_pct: Option<f64>,
    sample_rate_hz: f64,
    offline: bool,
    /// Under `sliced`, levels from this size on go to workers instead (the automatic schedule's mixed
    /// candidates; the worker rules still apply).
    workers_from_frames: Option<usize>,
    /// The automatic schedule also tries the mixed sliced-then-workers candidates (off while
    /// [`plan_for_latency`](Planner::plan_for_latency) scans block sizes, on for its final plan).
    auto_mixed: bool,
    /// The automatic schedule may put levels on worker threads ([`allow_workers`](Planner::allow_workers)).
    allow_workers: bool,
}

/// The share of a host call's deadline, in percent, that the automatic schedule lets the predicted
/// heaviest call take ([`Planner::auto`]). 8% leaves the rest of the callback to the host and absorbs
/// the model's error (predicted over measured is 0.9-2 on the benchmarked grid, docs/benchmarks/latency.md).
pub const DEFAULT_HEADROOM_PCT: f64 = 8.0;

/// The planner puts a level on a worker (the automatic schedule, and `workers` unless
/// [`Planner::min_worker_frames`] says otherwise) only when the worker has at least this long beyond one
/// host period to deliver (N - H >= 20 ms of audio; N >= 1024 frames at 48 kHz with one-block calls of 64).
/// A worker is an ordinary thread, and an OS, or a virtual machine's host, can hold one off for
/// milliseconds; a worker level of a few blocks misses its result whenever that happens. Seen here: the
/// paced test (tests/paced.rs, one-block calls at block 64, a 2-core VM busy compiling) counted a late
/// result from an automatic plan with a 256-frame worker level (5.3 ms period) before this floor, and the
/// deadline bench's all-`workers` plans with levels from 256 frames had 1-16 late results in 20 s paced
/// runs (docs/benchmarks/deadline.md).
pub const WORKER_SLACK_SECONDS: f64 = 0.020;

impl Default for Planner {
    fn default() -> Self {
        Self::new()
    }
}

/// The smallest `workers` level for host calls of `host_period_frames` (one block when `None`): `2H`, so a
/// job released in one call is collected at least two calls later (see [`Planner::host_period_frames`]).
pub(crate) fn min_worker_level_frames(block_frames: usize, host_period_frames: Option<usize>) -> usize {
    2 * host_period_frames.unwrap_or(block_frames).max(block_frames)
}

impl Planner {
    /// The longest IR, in engine blocks, the optimal planner takes: 2^18. Its search holds about 32 bytes
    /// per block per candidate level size (up to about 40), so this keeps it under 400 MB; a 2^24-tap IR
    /// (partita-io's limit) needs a block of 64 frames or more, or a uniform plan.
    pub const MAX_OPTIMAL_BLOCKS: usize = 1 << 18;

    /// Block 64, block latency, the automatic schedule with [`DEFAULT_HEADROOM_PCT`] at 48 kHz and host
    /// calls of one block, optimal layout, flop model, mono cost, levels of at most 65,536 frames.
    /// [`schedule`](Self::schedule) fixes one schedule instead.
    pub fn new() -> Self {
        Self {
            block_frames: 64,
            zero_latency: false,
            schedule: Schedule::Sync,
            mode: PlanMode::Optimal,
            model: CostModel::default(),
            shape: Shape::MONO,
            max_level_frames: 1 << 16,
            min_sliced_frames: 2048,
            min_worker_frames: None,
            host_period_frames: None,
            auto_headroom_pct: Some(DEFAULT_HEADROOM_PCT),
            sample_rate_hz: 48_000.0,
            offline: false,
            workers_from_frames: None,
            auto_mixed: true,
            allow_workers: true,
        }
    }

    /// Engine block size B.
    #[must_use = "a builder method returns the changed planner"]
    pub fn block_frames(mut self, block_frames: usize) -> Self {
        self.block_frames = block_frames;
        self
    }

    /// Zero latency (a direct-form head) or block latency.
    #[must_use = "a builder method returns the changed planner"]
    pub fn zero_latency(mut self, zero_latency: bool) -> Self {
        self.zero_latency = zero_latency;
        self
    }

    /// One schedule for every level larger than the engine block, instead of the automatic choice
    /// (level-0 blocks are always `sync`; with `sliced`, so are levels below
    /// [`min_sliced_frames`](Self::min_sliced_frames), and with `workers`, levels below
    /// [`min_worker_frames`](Self::min_worker_frames)). Layouts given to [`custom`](Self::custom) take this
    /// schedule (`sync` unless set) whether or not the planner is automatic.
    #[must_use = "a builder method returns the changed planner"]
    pub fn schedule(mut self, schedule: Schedule) -> Self {
        self.schedule = schedule;
        self.auto_headroom_pct = None;
        self.workers_from_frames = None;
        self
    }

    /// Uniform or optimal.
    #[must_use = "a builder method returns the changed planner"]
    pub fn mode(mut self, mode: PlanMode) -> Self {
        self.mode = mode;
        self
    }

    /// The cost model the optimal mode minimises.
    #[must_use = "a builder method returns the changed planner"]
    pub fn cost_model(mut self, model: CostModel) -> Self {
        self.model = model;
        self
    }

    /// The engine shape costs are counted for (default mono).
    #[must_use = "a builder method returns the changed planner"]
    pub fn shape(mut self, shape: Shape) -> Self {
        self.shape = shape;
        self
    }

    /// Largest level block the optimal mode may use.
    #[must_use = "a builder method returns the changed planner"]
    pub fn max_level_frames(mut self, frames: usize) -> Self {
        self.max_level_frames = frames;
        self
    }

    /// With the `sliced` schedule, levels smaller than this stay `sync`: their whole job is cheaper
    /// than the slicing overhead and well inside one callback (default 2,048 frames).
    #[must_use = "a builder method returns the changed planner"]
    pub fn min_sliced_frames(mut self, frames: usize) -> Self {
        self.min_sliced_frames = frames;
        self
    }

    /// With the `workers` schedule, levels smaller than this stay `sync`. Default: the host period plus
    /// [`WORKER_SLACK_SECONDS`] of audio (1024 frames at 48 kHz with calls of 64), so no worker level is
    /// short enough for an ordinary OS delay to make it late; 0 puts every level above the block on a
    /// worker (as tests do on purpose). Keeping small levels in the callback also saves a worker wake-up
    /// per level period and the larger offset a worker level needs (s >= 2N - B instead of N - B), which
    /// costs extra partitions below it, so the mean load drops; but every callback that completes such a
    /// level carries its whole job, so the callback-time tail grows. The measured trade-off (S1, paced,
    /// `partita plan --min-worker-frames`) is in docs/benchmarks/log.md. Levels shorter than twice the host
    /// period never go to a worker ([`host_period_frames`](Self::host_period_frames)).
    #[must_use = "a builder method returns the changed planner"]
    pub fn min_worker_frames(mut self, frames: usize) -> Self {
        self.min_worker_frames = Some(frames);
        self
    }

    /// The smallest level the `workers` schedule puts on a worker: [`min_worker_frames`](Self::min_worker_frames)
    /// or its default, the host period plus [`WORKER_SLACK_SECONDS`] of audio.
    pub fn worker_floor_frames(&self) -> usize {
        let host = self.host_period_frames.unwrap_or(self.block_frames).max(self.block_frames);
        self.min_worker_frames.unwrap_or(host + (WORKER_SLACK_SECONDS * self.sample_rate_hz).ceil() as usize)
    }

    /// The number of frames the host passes per call (its period), when it is more than one engine block:
    /// an audio driver's period, a game engine's mix buffer. Default: one engine block.
    ///
    /// A `workers` level's job is released at the block boundary that completes its input and collected
    /// at the boundary N frames later. When one host call spans several blocks, both can fall inside the
    /// same call, microseconds apart, and the job is late whatever the worker does. With calls of H frames
    /// arriving every H frames of real time, a job released in one call is collected at least
    /// `floor(N / H)` calls later, so the worker has at least `floor(N / H) x H >= N - H + 1` frames of
    /// real time; the planner therefore keeps levels with `N < 2H` off the workers (they run `sync`),
    /// which leaves every worker at least half its period. [`Engine`](crate::Engine) refuses a plan that
    /// breaks this rule for the host period it is told ([`EngineOptions::host_period_frames`]).
    ///
    /// [`EngineOptions::host_period_frames`]: crate::EngineOptions::host_period_frames
    #[must_use = "a builder method returns the changed planner"]
    pub fn host_period_frames(mut self, frames: usize) -> Self {
        self.host_period_frames = Some(frames);
        self
    }

    /// Chooses the schedules itself: among plans with every level in the callback (`sync`), plans that put
    /// the levels from a size on up on `sliced` or on `workers` (each power-of-two multiple of the block the
    /// optimal mode may use), and plans with `sliced` levels from one size and `workers` from a larger one,
    /// the one with the lowest mean cost whose predicted heaviest host call
    /// ([`CostModel::heaviest_call_pct`]) stays within `headroom_pct` percent of the call's deadline; when
    /// none does, the one with the lightest heaviest call. The host period and the sample rate set the
    /// deadline ([`host_period_frames`](Self::host_period_frames), [`sample_rate_hz`](Self::sample_rate_hz)).
    /// Deterministic: the same inputs give the same plan. The default, with [`DEFAULT_HEADROOM_PCT`];
    /// with [`offline`](Self::offline), the cheapest plan without workers, whatever its heaviest call.
    #[must_use = "a builder method returns the changed planner"]
    pub fn auto(mut self, headroom_pct: f64) -> Self {
        self.auto_headroom_pct = Some(headroom_pct);
        self
    }

    /// Plans for a host that calls faster than real time (an offline bounce, JACK freewheel, a batch job):
    /// no call has a deadline, so [`auto`](Self::auto) ignores the heaviest call and picks the plan with
    /// the lowest mean cost among those without worker threads (workers would only be waited for). A
    /// fixed [`schedule`](Self::schedule) is kept as given; build the engine with
    /// [`EngineOptions::offline`](crate::EngineOptions::offline) so a `workers` plan drops nothing.
    #[must_use = "a builder method returns the changed planner"]
    pub fn offline(mut self, offline: bool) -> Self {
        self.offline = offline;
        self
    }

    /// Whether the automatic schedule ([`auto`](Self::auto)) may put levels on worker threads (on by
    /// default). Off, it chooses among the plans without workers (`sync` and `sliced` levels), so the
    /// engine starts no thread: for a host that runs many engines at once (a plugin instance per track),
    /// where a thread per engine would multiply. A fixed [`schedule`](Self::schedule) is kept as given.
    #[must_use = "a builder method returns the changed planner"]
    pub fn allow_workers(mut self, allow: bool) -> Self {
        self.allow_workers = allow;
        self
    }

    /// The automatic schedule's headroom in percent of a call's deadline, or `None` for a fixed schedule.
    pub fn auto_headroom_pct(&self) -> Option<f64> {
        self.auto_headroom_pct
    }

    /// The stream's sample rate, for the deadlines [`auto`](Self::auto) plans against (default 48 kHz).
    #[must_use = "a builder method returns the changed planner"]
    pub fn sample_rate_hz(mut self, hz: u32) -> Self {
        self.sample_rate_hz = f64::from(hz);
        self
    }

    /// The cost model in use.
    pub fn model(&self) -> &CostModel {
        &self.model
    }

    fn schedule_for(&self, level_block_frames: usize) -> Schedule {
        match self.schedule {
            _ if level_block_frames == self.block_frames => Schedule::Sync,
            Schedule::Sliced
                if self.workers_from_frames.is_some_and(|w| level_block_frames >= w)
                    && level_block_frames >= self.worker_floor_frames()
                    && level_block_frames >= min_worker_level_frames(self.block_frames, self.host_period_frames) =>
            {
                Schedule::Workers
            }
            Schedule::Sliced if level_block_frames < self.min_sliced_frames => Schedule::Sync,
            Schedule::Workers
                if level_block_frames < self.worker_floor_frames()
                    || level_block_frames < min_worker_level_frames(self.block_frames, self.host_period_frames) =>
            {
                Schedule::Sync
            }
            s => s,
        }
    }

    fn head_frames(&self, ir_frames: usize) -> usize {
        if self.zero_latency {
            self.block_frames.min(ir_frames)
        } else {
            0
        }
    }

    /// Makes a plan for an IR of `ir_frames` taps.
    ///
    /// # Errors
    /// [`PlanError`] for a zero block or IR length.
    pub fn plan(&self, ir_frames: usize) -> Result<Plan, PlanError> {
        match self.auto_headroom_pct {
            Some(headroom) => self.plan_auto(ir_frames, headroom),
            None => self.plan_fixed(ir_frames),
        }
    }

    /// [`auto`](Self::auto): every candidate schedule set, judged by mean cost under the worst-call bound.
    fn plan_auto(&self, ir_frames: usize, headroom_pct: f64) -> Result<Plan, PlanError> {
        let fixed = Self { auto_headroom_pct: None, ..self.clone() };
        let host = self.host_period_frames.unwrap_or(self.block_frames).max(1);
        let mut candidates = vec![fixed.clone().schedule(Schedule::Sync)];
        let worker_floor = Self { min_worker_frames: None, ..self.clone() }.worker_floor_frames();
        let sizes: Vec<usize> = std::iter::successors(Some(2 * self.block_frames), |s| Some(s * 2))
            .take_while(|&s| s <= self.max_level_frames)
            .collect();
        for &size in &sizes {
            candidates.push(fixed.clone().schedule(Schedule::Sliced).min_sliced_frames(size));
            if !self.offline && self.allow_workers && size >= worker_floor {
                candidates.push(fixed.clone().schedule(Schedule::Workers).min_worker_frames(size));
                // Mixed: sliced from a smaller size on, workers from this one.
                for &sliced in sizes.iter().filter(|&&s| self.auto_mixed && s < size) {
                    let mixed = fixed.clone().schedule(Schedule::Sliced).min_sliced_frames(sliced);
                    candidates.push(Self { workers_from_frames: Some(size), ..mixed.min_worker_frames(size) });
                }
            }
        }
        // Offline, no call has a deadline: every candidate fits.
        let headroom_pct = if self.offline { f64::INFINITY } else { headroom_pct };
        let mut within: Option<(f64, Plan)> = None;
        let mut lightest: Option<(f64, Plan)> = None;
        for planner in candidates {
            let plan = planner.plan_fixed(ir_frames)?;
            let mean = self.model.scheduled_plan_cost(&plan, self.shape);
            let worst = self.model.heaviest_call_pct(&plan, self.shape, self.shape.groups(), self.sample_rate_hz, host);
            if worst <= headroom_pct && within.as_ref().is_none_or(|(m, _)| mean < *m) {
                within = Some((mean, plan.clone()));
            }
            if lightest.as_ref().is_none_or(|(w, _)| worst < *w) {
                lightest = Some((worst, plan));
            }
        }
        within.or(lightest).map(|(_, plan)| plan).ok_or(PlanError::IrFramesZero)
    }

    fn plan_fixed(&self, ir_frames: usize) -> Result<Plan, PlanError> {
        let b = self.block_frames;
        if b == 0 {
            return Err(PlanError::BlockFramesZero);
        }
        if ir_frames == 0 {
            return Err(PlanError::IrFramesZero);
        }
        if ir_frames > Plan::MAX_COVERED_FRAMES {
            return Err(PlanError::TooLong { frames: ir_frames, limit_frames: Plan::MAX_COVERED_FRAMES });
        }
        if self.mode == PlanMode::Optimal && ir_frames.div_ceil(b) > Self::MAX_OPTIMAL_BLOCKS {
            return Err(PlanError::TooManyBlocks {
                ir_frames,
                block_frames: b,
                limit_blocks: Self::MAX_OPTIMAL_BLOCKS,
            });
        }
        let head = self.head_frames(ir_frames);
        let levels = if head >= ir_frames {
            Vec::new()
        } else {
            match self.mode {
                PlanMode::Uniform => vec![Level {
                    block_frames: b,
                    partitions: (ir_frames - head).div_ceil(b),
                    offset_frames: head,
                    schedule: Schedule::Sync,
                }],
                PlanMode::Optimal => self.optimal_levels(head, ir_frames),
            }
        };
        let plan = Plan { block_frames: b, zero_latency: self.zero_latency, head_frames: head, levels, ir_frames };
        plan.validate()?;
        Ok(plan)
    }

    /// Reads a level list written as text, `NxP` (block frames x partitions) separated by commas in IR
    /// order, e.g. `64x15,512x14,4096x14`, for [`custom`](Self::custom). Spaces around a level are
    /// ignored. Allocates the list.
    ///
    /// # Errors
    /// [`PlanError::LevelsText`] naming the first level that is not two unsigned integers joined by `x`.
    pub fn parse_levels(text: &str) -> Result<Vec<(usize, usize)>, PlanError> {
        text.split(',')
            .map(|part| {
                let bad = |problem| PlanError::LevelsText { level: part.trim().to_string(), problem };
                let (n, p) = part.trim().split_once('x').ok_or_else(|| bad("needs the form NxP"))?;
                let n = n.parse().map_err(|_| bad("the block size is not an unsigned integer"))?;
                let p = p.parse().map_err(|_| bad("the partition count is not an unsigned integer"))?;
                Ok((n, p))
            })
            .collect()
    }

    /// A plan from the caller's levels, `(block_frames, partitions)` in IR order; offsets follow from the
    /// head and the sizes. Levels of the engine block are `sync`, others get the planner's schedule.
    ///
    /// # Errors
    /// The first rule the layout breaks ([`PlanError`]), e.g. a level that starts too early for its
    /// schedule's offset rule, a block that is not a multiple of B, or too few taps.
    pub fn custom(&self, levels: &[(usize, usize)], ir_frames: usize) -> Result<Plan, PlanError> {
        let head = self.head_frames(ir_frames);
        let mut offset = head;
        let levels = levels
            .iter()
            .map(|&(n, p)| {
                let l = Level { block_frames: n, partitions: p, offset_frames: offset, schedule: self.schedule_for(n) };
                // Saturated: validation refuses a level this far out (PlanError::TooLong).
                offset = offset.saturating_add(n.saturating_mul(p));
                l
            })
            .collect();
        let plan = Plan {
            block_frames: self.block_frames,
            zero_latency: self.zero_latency,
            head_frames: head,
            levels,
            ir_frames,
        };
        plan.validate()?;
        Ok(plan)
    }

    /// Candidate level sizes in units of B: 2^k and 3 * 2^k, up to `max_level_frames` and not far past
    /// the IR length.
    fn candidates(&self, ir_blocks: usize) -> Vec<usize> {
        let b = self.block_frames;
        let cap = (self.max_level_frames / b).max(1).min(ir_blocks.next_power_of_two().max(1));
        let mut sizes: Vec<usize> = (0..)
            .map(|k| 1usize << k)
            .take_while(|&m| m <= cap)
            .flat_map(|m| [m, 3 * m])
            .filter(|&m| m <= cap)
            .collect();
        sizes.sort_unstable();
        sizes.dedup();
        sizes
    }

    /// The dynamic programme. State: (offset in blocks, size of the current level). From a state, either
    /// add a partition of the current size, or open a level of another size when the offset rule of its
    /// schedule allows. Offsets only grow, so one pass in offset order finds the cheapest layout.
    fn optimal_levels(&self, head: usize, ir_frames: usize) -> Vec<Level> {
        let b = self.block_frames;
        let start = head / b; // head is 0 or B (or the whole IR, handled by the caller)
        let target = start + (ir_frames - head).div_ceil(b);
        let sizes = self.candidates(target - start);
        let max_m = *sizes.last().unwrap_or(&1);
        let len = target + max_m + 1;
        let z = sizes.len();
        let idx = |o: usize, s: usize| o * z + s;
        let mut best = vec![f64::INFINITY; len * z];
        let mut from: Vec<(usize, usize, bool)> = vec![(usize::MAX, usize::MAX, false); len * z];
        let min_offset: Vec<usize> = sizes
            .iter()
            .map(|&m| {
                let probe =
                    Level { block_frames: m * b, partitions: 1, offset_frames: 0, schedule: self.schedule_for(m * b) };
                probe.min_offset_frames(b, self.zero_latency)
            })
            .collect();
        let level_cost: Vec<f64> = sizes.iter().map(|&m| self.model.level_cost(m * b, self.shape)).collect();
        let part_cost: Vec<f64> = sizes.iter().map(|&m| self.model.partition_cost(m * b, self.shape)).collect();
        // Openings from the start state (no level yet).
        for (s, &m) in sizes.iter().enumerate() {
            if start * b >= min_offset[s] && start + m < len {
                let c = level_cost[s] + part_cost[s];
                if c < best[idx(start + m, s)] {
                    best[idx(start + m, s)] = c;
                    from[idx(start + m, s)] = (start, usize::MAX, true);
                }
            }
        }
        for o in start..target {
            for s in 0..z {
                let here = best[idx(o, s)];
                if !here.is_finite() {
                    continue;
                }
                let m = sizes[s];
                // Another partition of the current level.
                if o + m < len && here + part_cost[s] < best[idx(o + m, s)] {
                    best[idx(o + m, s)] = here + part_cost[s];
                    from[idx(o + m, s)] = (o, s, false);
                }
                // A new level of another size.
                for s2 in 0..z {
                    let m2 = sizes[s2];
                    if s2 == s || o * b < min_offset[s2] || o + m2 >= len {
                        continue;
                    }
                    let c = here + level_cost[s2] + part_cost[s2];
                    if c < best[idx(o + m2, s2)] {
                        best[idx(o + m2, s2)] = c;
                        from[idx(o + m2, s2)] = (o, s, true);
                    }
                }
            }
        }
        // Cheapest terminal state.
        let mut end = (usize::MAX, usize::MAX);
        let mut end_cost = f64::INFINITY;
        for o in target..len {
            for s in 0..z {
                if best[idx(o, s)] < end_cost {
                    end_cost = best[idx(o, s)];
                    end = (o, s);
                }
            }
        }
        // Walk back, collecting (size, partitions) runs.
        let mut runs: Vec<(usize, usize)> = Vec::new();
        let (mut o, mut s) = end;
        let mut parts = 0;
        loop {
            let (po, ps, opened) = from[idx(o, s)];
            parts += 1;
            if opened {
                runs.push((sizes[s] * b, parts));
                parts = 0;
            }
            o = po;
            s = ps;
            if s == usize::MAX {
                break;
            }
        }
        runs.reverse();
        let mut offset = head;
        runs.into_iter()
            .map(|(n, p)| {
                let l = Level { block_frames: n, partitions: p, offset_frames: offset, schedule: self.schedule_for(n) };
                offset += n * p;
                l
            })
            .collect()
    }

    /// Chooses a block size and latency mode for a latency budget: every power-of-two block from 16 to
    /// 8192 frames whose block latency fits the budget, and zero-latency plans at blocks 16 to 512, are
    /// planned with this planner's schedule choice. Plans whose predicted heaviest call fits the headroom
    /// (the automatic schedule's, or [`DEFAULT_HEADROOM_PCT`] under a fixed schedule) come first, and the
    /// cheapest of them wins; when none fits, the one with the lightest heaviest call. Offline
    /// ([`offline`](Self::offline)) no call has a deadline and the cheapest wins. Returns the plan and a
    /// one-line reason.
    ///
    /// # Errors
    /// [`PlanError`] when the IR length is zero.
    pub fn plan_for_latency(&self, budget_frames: usize, ir_frames: usize) -> Result<(Plan, String), PlanError> {
        // (fits the headroom, rank: mean cost when it fits, heaviest call when it does not, heaviest, plan)
        let mut best: Option<(bool, f64, f64, Plan)> = None;
        let headroom = self.auto_headroom_pct.unwrap_or(DEFAULT_HEADROOM_PCT);
        // Every block is judged by its plan without the mixed candidates (each costs a planning pass); the
        // winner is then planned with them too (below), which can only make it cheaper within the headroom.
        let scan = Self { auto_mixed: false, ..self.clone() };
        let mut consider = |planner: Planner| -> Result<(), PlanError> {
            let plan = planner.plan(ir_frames)?;
            let cost = planner.model.scheduled_plan_cost(&plan, planner.shape);
            let host = planner.host_period_frames.unwrap_or(plan.block_frames);
            let worst = planner.model.heaviest_call_pct(
                &plan,
                planner.shape,
                planner.shape.groups(),
                planner.sample_rate_hz,
                host,
            );
            let fits = planner.offline || worst <= headroom;
            let rank = if fits { cost } else { worst };
            let better = match &best {
                None => true,
                Some((f, r, ..)) => (fits && !f) || (fits == *f && rank < *r),
            };
            if better {
                best = Some((fits, rank, worst, plan));
            }
            Ok(())
        };
        for k in 4..=13 {
            let b = 1usize << k;
            if b <= budget_frames {
                consider(scan.clone().block_frames(b).zero_latency(false))?;
            }
        }
        for k in 4..=9 {
            consider(scan.clone().block_frames(1 << k).zero_latency(true))?;
        }
        let (fits, _, mut worst, mut plan) = best.ok_or(PlanError::IrFramesZero)?;
        if self.auto_headroom_pct.is_some() && fits {
            let full = self.clone().block_frames(plan.block_frames).zero_latency(plan.zero_latency).plan(ir_frames)?;
            let host = self.host_period_frames.unwrap_or(full.block_frames);
            let full_worst =
                self.model.heaviest_call_pct(&full, self.shape, self.shape.groups(), self.sample_rate_hz, host);
            if self.offline || full_worst <= headroom {
                (plan, worst) = (full, full_worst);
            }
        }
        let mut reason = if plan.zero_latency {
            format!(
                "zero latency at block {}: no block-latency plan within {budget_frames} frames costs less",
                plan.block_frames
            )
        } else {
            format!(
                "block {} (latency {} frames) is the cheapest plan whose latency fits {budget_frames} frames",
                plan.block_frames,
                plan.latency_frames()
            )
        };
        if !self.offline {
            reason = if fits {
                format!("{reason} and whose predicted heaviest call ({worst:.1}%) fits the {headroom}% headroom")
            } else {
                format!(
                    "no plan's predicted heaviest call fits the {headroom}% headroom; block {} has the lightest \
                     ({worst:.1}% of its deadline)",
                    plan.block_frames
                )
            };
        }
        Ok((plan, reason))
    }
}
