//! The optimal planner against exhaustive search, the uniform plan and the doubling plan.

use partita_core::{
    CostModel, Level, MachineCosts, Plan, PlanError, PlanMode, Planner, Schedule, Shape, DEFAULT_HEADROOM_PCT,
    WORKER_SLACK_SECONDS,
};

/// Candidate sizes in blocks, as the planner documents them: 2^k and 3 * 2^k up to `cap`.
fn sizes(cap: usize) -> Vec<usize> {
    let mut v: Vec<usize> = (0..8).flat_map(|k| [1usize << k, 3 << k]).filter(|&m| m <= cap).collect();
    v.sort_unstable();
    v.dedup();
    v
}

struct Search<'a> {
    b: usize,
    zero: bool,
    schedule: Schedule,
    model: &'a CostModel,
    sizes: Vec<usize>,
    target: usize,
    best: f64,
    layouts: u64,
}

impl Search<'_> {
    /// Exhaustive branch and bound over every valid layout: any size after any other (not only growing),
    /// any partition count, each level checked against its offset rule. Costs are positive, so pruning a
    /// branch already dearer than the best complete layout loses nothing.
    fn go(&mut self, offset: usize, prev: Option<usize>, cost: f64) {
        if offset >= self.target {
            self.layouts += 1;
            self.best = self.best.min(cost);
            return;
        }
        if cost >= self.best {
            return;
        }
        for m in self.sizes.clone() {
            if Some(m) == prev {
                continue; // the same size again is more partitions of the previous level
            }
            let n = m * self.b;
            // As the planner documents: level-0 blocks are sync, and so are sliced levels below
            // `min_sliced_frames` and worker levels below `min_worker_frames` (both set to MIN_SLICED
            // below).
            let schedule = match self.schedule {
                _ if m == 1 => Schedule::Sync,
                Schedule::Sliced | Schedule::Workers if n < MIN_SLICED => Schedule::Sync,
                s => s,
            };
            let probe = Level { block_frames: n, partitions: 1, offset_frames: offset * self.b, schedule };
            if offset * self.b < probe.min_offset_frames(self.b, self.zero) {
                continue;
            }
            let open = self.model.level_cost(n, Shape::MONO);
            let part = self.model.partition_cost(n, Shape::MONO);
            let mut p = 1;
            loop {
                let end = offset + m * p;
                self.go(end, Some(m), cost + open + part * p as f64);
                if end >= self.target {
                    break;
                }
                p += 1;
            }
        }
    }
}

/// `min_sliced_frames` and `min_worker_frames` for the exhaustive comparison: with B = 4, levels of 8
/// frames stay sync.
const MIN_SLICED: usize = 12;

fn measured_model() -> CostModel {
    // A made-up machine whose big FFTs are relatively dear (cache misses): tests the DP under a model
    // other than the flop count. Invented numbers, for this test only.
    CostModel::Measured(MachineCosts {
        fft_pair_seconds: (0..10).map(|k| (4usize << k, 1e-8 * (4u64 << k) as f64 * (1.0 + 0.3 * k as f64))).collect(),
        mac_seconds_per_bin: 2e-10,
        mac_streamed_seconds_per_bin: 1e-9,
        cache_bytes: 1 << 16,
        head_seconds_per_tap: 1e-10,
        kernel: "test".into(),
    })
}

#[test]
fn optimal_equals_exhaustive_search_on_small_problems() {
    let b = 4;
    let mut compared = 0;
    for model in [CostModel::default(), measured_model()] {
        for (zero, schedule) in
            [(false, Schedule::Sync), (true, Schedule::Sync), (false, Schedule::Workers), (true, Schedule::Sliced)]
        {
            for blocks in [1usize, 2, 3, 5, 8, 13, 21, 32] {
                let ir_frames = blocks * b - 1;
                let cap = 16;
                let planner = Planner::new()
                    .block_frames(b)
                    .zero_latency(zero)
                    .schedule(schedule)
                    .cost_model(model.clone())
                    .max_level_frames(cap * b)
                    .min_sliced_frames(MIN_SLICED)
                    .min_worker_frames(MIN_SLICED);
                let plan = planner.plan(ir_frames).unwrap();
                plan.validate().unwrap();
                let dp = model.plan_cost(&plan, Shape::MONO);
                let head_blocks = plan.head_frames / b;
                let head_cost = model.plan_cost(&Plan { levels: vec![], ..plan.clone() }, Shape::MONO);
                let mut search = Search {
                    b,
                    zero,
                    schedule,
                    model: &model,
                    sizes: sizes(cap.min(ir_frames.div_ceil(b).next_power_of_two())),
                    target: ir_frames.div_ceil(b),
                    best: f64::INFINITY,
                    layouts: 0,
                };
                if plan.head_frames >= ir_frames {
                    assert!(plan.levels.is_empty());
                    continue;
                }
                search.go(head_blocks, None, head_cost);
                assert!(search.layouts > 0);
                assert!(
                    (dp - search.best).abs() <= 1e-9 * search.best.abs(),
                    "zero={zero} {schedule} blocks={blocks}: DP {dp} vs exhaustive {} ({:?})",
                    search.best,
                    plan.levels
                );
                compared += 1;
            }
        }
    }
    assert!(compared >= 50);
}

/// Gardner's doubling layout: each size twice (B, B, 2B, 2B, 4B, 4B, ...), synchronous, block latency.
fn doubling_plan(b: usize, ir_frames: usize) -> Plan {
    let mut levels = Vec::new();
    let mut offset = 0;
    let mut n = b;
    while offset < ir_frames {
        let p = 2.min((ir_frames - offset).div_ceil(n));
        levels.push(Level { block_frames: n, partitions: p, offset_frames: offset, schedule: Schedule::Sync });
        offset += n * p;
        n *= 2;
    }
    Plan { block_frames: b, zero_latency: false, head_frames: 0, levels, ir_frames }
}

#[test]
fn optimal_never_costs_more_than_uniform_or_doubling() {
    for model in [CostModel::default(), measured_model()] {
        for b in [16usize, 32, 64, 128, 256] {
            for ir_frames in [1000usize, 24_000, 100_003, 480_000] {
                let planner = Planner::new().block_frames(b).schedule(Schedule::Sync).cost_model(model.clone());
                let plan = planner.plan(ir_frames).unwrap();
                plan.validate().unwrap();
                let uniform = planner.clone().mode(PlanMode::Uniform).plan(ir_frames).unwrap();
                let doubling = doubling_plan(b, ir_frames);
                doubling.validate().unwrap();
                let c = |p: &Plan| model.plan_cost(p, Shape::MONO);
                assert!(c(&plan) <= c(&uniform) * (1.0 + 1e-12), "B={b} L={ir_frames}");
                assert!(c(&plan) <= c(&doubling) * (1.0 + 1e-12), "B={b} L={ir_frames}");
            }
        }
    }
}

#[test]
fn every_emitted_plan_is_valid() {
    for b in [1usize, 7, 16, 48, 64, 1000] {
        for ir_frames in [1usize, 2, b, b + 1, 5 * b + 3, 77_777] {
            for zero in [false, true] {
                for schedule in [Schedule::Sync, Schedule::Workers, Schedule::Sliced] {
                    for mode in [PlanMode::Uniform, PlanMode::Optimal] {
                        let plan = Planner::new()
                            .block_frames(b)
                            .zero_latency(zero)
                            .schedule(schedule)
                            .mode(mode)
                            .plan(ir_frames)
                            .unwrap();
                        plan.validate().unwrap();
                        assert!(plan.covered_frames() >= ir_frames);
                        assert_eq!(plan.latency_frames(), if zero { 0 } else { b });
                    }
                }
            }
        }
    }
}

#[test]
fn s1_plan_is_within_1_5x_of_the_published_flop_optimum() {
    // DESIGN.md: the flop-model optimum for 480k taps at B = 64 is about 914 flops/sample
    // (64x15 + 512x14 + 4096x14 + 32768x13), against about 61,000 for uniform partitions.
    let plan = Planner::new().block_frames(64).schedule(Schedule::Sync).plan(480_000).unwrap();
    let f = plan.flops_per_sample();
    assert!(f <= 1.5 * 914.0, "{f}");
    let uniform = Planner::new().block_frames(64).mode(PlanMode::Uniform).plan(480_000).unwrap();
    let fu = uniform.flops_per_sample();
    assert!((fu - (10.0 * 128f64.log2() + 8.0 * 7500.0 * 65.0 / 64.0)).abs() < 1.0, "{fu}");
    // T11: cost at 480k taps within 2.5x of the cost at 24k taps (uniform grows ~20x).
    let small = Planner::new().block_frames(64).schedule(Schedule::Sync).plan(24_000).unwrap().flops_per_sample();
    assert!(f <= 2.5 * small, "{f} vs {small}");
}

#[test]
fn offline_latency_budget_picks_the_cheapest_plan_that_fits() {
    // Offline no call has a deadline, so the heaviest call does not matter and the cheapest plan wins.
    let planner = Planner::new().schedule(Schedule::Sync).offline(true);
    let (plan, why) = planner.plan_for_latency(300, 480_000).unwrap();
    assert!(plan.latency_frames() <= 300, "{why}");
    assert!(!why.is_empty());
    for b in [16usize, 32, 64, 128, 256] {
        let other = planner.clone().block_frames(b).plan(480_000).unwrap();
        assert!(plan.flops_per_sample() <= other.flops_per_sample() + 1e-9, "B={b}: {why}");
    }
    let (tiny, why) = planner.plan_for_latency(4, 48_000).unwrap();
    assert!(tiny.zero_latency, "{why}");
}

#[test]
fn plans_round_trip_through_json() {
    let plan = Planner::new().block_frames(32).zero_latency(true).schedule(Schedule::Workers).plan(50_000).unwrap();
    let json = serde_json::to_string(&plan).unwrap();
    assert!(json.contains("\"schedule\":\"workers\""), "{json}");
    let back: Plan = serde_json::from_str(&json).unwrap();
    assert_eq!(back, plan);
}

#[test]
fn small_levels_stay_in_the_callback_under_workers() {
    // S1 shape: 10 s at 48 kHz, block 64.
    for (min, zero) in [(1024usize, false), (1024, true), (0, false), (4096, false)] {
        let plan = Planner::new()
            .block_frames(64)
            .zero_latency(zero)
            .schedule(Schedule::Workers)
            .min_worker_frames(min)
            .plan(480_000)
            .unwrap();
        plan.validate().unwrap();
        for (k, l) in plan.levels.iter().enumerate() {
            let want = if k == 0 || l.block_frames < min { Schedule::Sync } else { Schedule::Workers };
            assert_eq!(l.schedule, want, "min {min}: {:?}", plan.levels);
        }
        assert!(plan.levels.iter().any(|l| l.schedule == Schedule::Workers), "min {min}: {:?}", plan.levels);
    }
    // The default is the host period plus WORKER_SLACK_SECONDS: 64 + 960 = 1024 frames at 48 kHz.
    let planner = Planner::new().block_frames(64).schedule(Schedule::Workers);
    assert_eq!(planner.worker_floor_frames(), 1024);
    assert_eq!(planner.clone().sample_rate_hz(96_000).worker_floor_frames(), 64 + 1920);
    assert_eq!(planner.clone().host_period_frames(256).worker_floor_frames(), 256 + 960);
    let default = planner.plan(480_000).unwrap();
    let explicit =
        Planner::new().block_frames(64).schedule(Schedule::Workers).min_worker_frames(1024).plan(480_000).unwrap();
    assert_eq!(default, explicit);
}

/// The host period keeps short levels off the workers: with calls of 1024 frames at block 64, every
/// `workers` level is at least 2048 frames and the shorter ones run `sync` (a job released in one call
/// must be collected at least two calls later). Without a host period (one block) and with every level
/// allowed on a worker, the S1 plan keeps worker levels shorter than that. The engine refuses a plan that breaks the rule for the period it is told,
/// and says what to do.
#[test]
fn the_host_period_keeps_short_levels_off_the_workers() {
    use partita_core::{Engine, EngineError, EngineOptions, ImpulseResponse, Routing};
    let planner = Planner::new().block_frames(64).schedule(Schedule::Workers).min_worker_frames(0);
    let per_block = planner.clone().plan(480_000).unwrap();
    let workers = |p: &Plan| -> Vec<usize> {
        p.levels.iter().filter(|l| l.schedule == Schedule::Workers).map(|l| l.block_frames).collect()
    };
    assert!(workers(&per_block).iter().any(|&n| n < 2048), "{:?}", per_block.levels);
    let long_calls = planner.host_period_frames(1024).plan(480_000).unwrap();
    assert!(
        !workers(&long_calls).is_empty() && workers(&long_calls).iter().all(|&n| n >= 2048),
        "{:?}",
        long_calls.levels
    );
    assert!(
        long_calls.levels.iter().any(|l| l.schedule == Schedule::Sync && l.block_frames > 64),
        "{:?}",
        long_calls.levels
    );

    let ir = ImpulseResponse::new(vec![vec![0.5; 48_000]], 48_000).unwrap();
    let plan = Planner::new().block_frames(64).schedule(Schedule::Workers).min_worker_frames(0).plan(48_000).unwrap();
    let smallest = *workers(&plan).iter().min().unwrap();
    let options = EngineOptions { host_period_frames: Some(smallest), ..EngineOptions::new(smallest) };
    let err = Engine::with_options(&plan, &ir, Routing::Mono, options).unwrap_err();
    assert_eq!(err, EngineError::WorkerLevelTooShort { level_frames: smallest, host_period_frames: smallest });
    assert!(err.to_string().contains("host_period_frames"), "{err}");
    let options = EngineOptions { host_period_frames: Some(smallest / 2), ..EngineOptions::new(smallest) };
    assert!(Engine::with_options(&plan, &ir, Routing::Mono, options).is_ok(), "exactly twice the period is enough");
}

/// `Planner::auto(headroom)`: with room to spare it keeps every level in the callback (the cheapest mean);
/// with no room it takes the plan with the lightest predicted heaviest call; in between it never picks a
/// plan whose predicted heaviest call exceeds the headroom when one of the single-schedule plans fits, and
/// costs no more on the mean than any of them that fits. The same inputs give the same plan.
#[test]
fn auto_picks_the_cheapest_plan_within_the_headroom() {
    let stereo = Shape { inputs: 2, outputs: 2, paths: 2 };
    let base = Planner::new().block_frames(64).shape(stereo);
    let model = base.model().clone();
    let worst = |p: &Plan| model.heaviest_call_pct(p, stereo, stereo.groups(), 48_000.0, 64);
    let mean = |p: &Plan| model.scheduled_plan_cost(p, stereo);
    // The workers plan keeps levels under 1024 frames in the callback, as auto does (64 frames of host
    // period plus WORKER_SLACK_SECONDS at 48 kHz).
    let floor = 64 + (WORKER_SLACK_SECONDS * 48_000.0).ceil() as usize;
    assert_eq!(floor, 1024);
    let singles: Vec<Plan> = [Schedule::Sync, Schedule::Sliced, Schedule::Workers]
        .map(|s| base.clone().schedule(s).min_worker_frames(floor).plan(480_000).unwrap())
        .into();

    let roomy = base.clone().auto(1e9).plan(480_000).unwrap();
    assert_eq!(roomy, singles[0], "with room to spare every level stays in the callback");

    let none = base.clone().auto(0.0).plan(480_000).unwrap();
    assert!(singles.iter().all(|p| worst(&none) <= worst(p)), "no room: the lightest heaviest call");

    for headroom in [2.0, 8.0, 30.0] {
        let auto = base.clone().auto(headroom).plan(480_000).unwrap();
        assert_eq!(auto, base.clone().auto(headroom).plan(480_000).unwrap(), "deterministic");
        let fitting: Vec<&Plan> = singles.iter().filter(|p| worst(p) <= headroom).collect();
        if !fitting.is_empty() {
            assert!(worst(&auto) <= headroom, "{headroom}%: predicted {} with a fitting single plan", worst(&auto));
            assert!(fitting.iter().all(|p| mean(&auto) <= mean(p) + 1e-9), "{headroom}%: not the cheapest that fits");
        }
    }
}

/// A latency budget under `auto`: the chosen block's plan has its predicted heaviest call within the
/// headroom, and the reason says so; with no room at all, the reason says that nothing fits and the plan
/// is the lightest.
#[test]
fn latency_budget_under_auto_keeps_the_heaviest_call_within_the_headroom() {
    let stereo = Shape { inputs: 2, outputs: 2, paths: 2 };
    let planner = Planner::new().shape(stereo).auto(8.0);
    let (plan, why) = planner.plan_for_latency(144, 480_000).unwrap();
    let host = plan.block_frames;
    let worst = planner.model().heaviest_call_pct(&plan, stereo, stereo.groups(), 48_000.0, host);
    assert!(worst <= 8.0, "{worst}% for {:?}", plan.levels);
    assert!(plan.latency_frames() <= 144 && why.contains("8% headroom"), "{why}");
    let (_, why) = Planner::new().shape(stereo).auto(0.0).plan_for_latency(144, 480_000).unwrap();
    assert!(why.contains("no plan's predicted heaviest call fits"), "{why}");
}

/// The default planner is the automatic one with the default headroom, on the flop model at 48 kHz; a
/// fixed schedule replaces it. For S1 (10 s stereo, block 64) it keeps the predicted heaviest call within
/// 8%, which the all-sync plan does not.
#[test]
fn the_default_planner_chooses_its_schedules() {
    assert_eq!(Planner::new().auto_headroom_pct(), Some(DEFAULT_HEADROOM_PCT));
    assert_eq!(Planner::new(), Planner::new().auto(DEFAULT_HEADROOM_PCT));
    assert_eq!(Planner::new().schedule(Schedule::Sync).auto_headroom_pct(), None);
    let stereo = Shape { inputs: 2, outputs: 2, paths: 2 };
    let model = CostModel::default();
    let worst = |p: &Plan| model.heaviest_call_pct(p, stereo, stereo.groups(), 48_000.0, 64);
    let default = Planner::new().shape(stereo).plan(480_000).unwrap();
    let sync = Planner::new().shape(stereo).schedule(Schedule::Sync).plan(480_000).unwrap();
    assert!(worst(&sync) > DEFAULT_HEADROOM_PCT, "all-sync S1 predicted {}%: the test needs it over", worst(&sync));
    assert!(worst(&default) <= DEFAULT_HEADROOM_PCT, "{}% for {:?}", worst(&default), default.levels);
    assert!(default.levels.iter().any(|l| l.schedule != Schedule::Sync), "{:?}", default.levels);
}

/// Auto never gives a worker less than `WORKER_SLACK_SECONDS` beyond one host period, whatever the
/// machine: here a model 100 times slower than the flop model's, which pushes every level it can off the
/// callback.
#[test]
fn auto_keeps_short_levels_off_the_workers() {
    let slow = CostModel::Flops { flops_per_second: 24e7 };
    for rate in [44_100u32, 96_000] {
        for host in [64usize, 1024] {
            let plan = Planner::new()
                .block_frames(64)
                .cost_model(slow.clone())
                .sample_rate_hz(rate)
                .host_period_frames(host)
                .plan(5 * rate as usize)
                .unwrap();
            let floor = host as f64 + WORKER_SLACK_SECONDS * f64::from(rate);
            for l in plan.levels.iter().filter(|l| l.schedule == Schedule::Workers) {
                assert!(l.block_frames as f64 >= floor, "{rate} Hz, host {host}: {:?}", plan.levels);
            }
            assert!(plan.levels.iter().any(|l| l.schedule != Schedule::Sync), "{rate} Hz, host {host}");
        }
    }
}

/// Offline, the automatic schedule uses no workers and takes the cheapest mean cost among its candidates,
/// whatever their heaviest call: never more than the all-sync plan.
#[test]
fn offline_auto_has_no_workers_and_the_lowest_mean_cost() {
    let stereo = Shape { inputs: 2, outputs: 2, paths: 2 };
    for b in [32usize, 64, 256] {
        let planner = Planner::new().block_frames(b).shape(stereo).offline(true);
        let plan = planner.plan(480_000).unwrap();
        assert!(plan.levels.iter().all(|l| l.schedule != Schedule::Workers), "B={b}: {:?}", plan.levels);
        let model = planner.model();
        for s in [Schedule::Sync, Schedule::Sliced] {
            let other = planner.clone().schedule(s).plan(480_000).unwrap();
            let (mine, theirs) = (model.scheduled_plan_cost(&plan, stereo), model.scheduled_plan_cost(&other, stereo));
            assert!(mine <= theirs + 1e-9, "B={b} vs {s}");
        }
    }
}

/// Without workers (`allow_workers(false)`, the plugin's default), the automatic schedule chooses among
/// plans that start no thread, on a machine slow enough that the default planner does use workers.
#[test]
fn auto_without_workers_starts_no_thread() {
    let stereo = Shape { inputs: 2, outputs: 2, paths: 4 };
    // A machine 100 times slower than the flop model's (as the core tests' `auto_plan`).
    let slow = CostModel::Flops { flops_per_second: 24e7 };
    let with = Planner::new().shape(stereo).cost_model(slow.clone()).plan(480_000).unwrap();
    assert!(with.levels.iter().any(|l| l.schedule == Schedule::Workers), "needs workers by default: {:?}", with.levels);
    let plan = Planner::new().shape(stereo).cost_model(slow).allow_workers(false).plan(480_000).unwrap();
    assert!(plan.levels.iter().all(|l| l.schedule != Schedule::Workers), "{:?}", plan.levels);
    assert!(plan.levels.iter().any(|l| l.schedule == Schedule::Sliced), "needs sliced levels: {:?}", plan.levels);
}

/// `--latency-ms` judges blocks by the heaviest call under a fixed schedule too: S1 all-sync within 3 ms
/// fits no block's 8% headroom, so the chosen block has the lightest predicted heaviest call of every
/// candidate and the reason says that none fits.
#[test]
fn latency_budget_under_a_fixed_schedule_takes_the_lightest_heaviest_call() {
    let stereo = Shape { inputs: 2, outputs: 2, paths: 2 };
    let planner = Planner::new().shape(stereo).schedule(Schedule::Sync);
    let (plan, why) = planner.plan_for_latency(144, 480_000).unwrap();
    let model = planner.model().clone();
    let worst = |p: &Plan| model.heaviest_call_pct(p, stereo, stereo.groups(), 48_000.0, p.block_frames);
    assert!(why.contains("no plan's predicted heaviest call fits the 8% headroom"), "{why}");
    let mut candidates: Vec<Plan> =
        [16usize, 32, 64, 128].iter().map(|&b| planner.clone().block_frames(b).plan(480_000).unwrap()).collect();
    candidates.extend((4..=9).map(|k| planner.clone().block_frames(1 << k).zero_latency(true).plan(480_000).unwrap()));
    for c in &candidates {
        assert!(
            worst(&plan) <= worst(c) + 1e-9,
            "chose {:?} at {}%, but {:?} has {}%",
            plan.levels,
            worst(&plan),
            c.levels,
            worst(c)
        );
    }
}

/// Found by fuzzing (fuzz/regressions/plan): level text whose sizes overflow, and IR lengths the planner's
/// search cannot hold, are refused with a `PlanError` rather than a panic or an allocation abort.
#[test]
fn level_text_and_lengths_past_the_limits_are_refused() {
    let levels = Planner::parse_levels("64x3, 256x2").unwrap();
    assert_eq!(levels, vec![(64, 3), (256, 2)]);
    for bad in ["64x", "x3", "64*3", "64x-1", "", "64x3,,256x2"] {
        let err = Planner::parse_levels(bad).unwrap_err();
        assert!(matches!(err, PlanError::LevelsText { .. }), "{bad:?}: {err:?}");
        assert!(err.to_string().contains("e.g. 64x15,512x14"), "{err}");
    }
    let huge = Planner::parse_levels("64x3,64x18446744073709551615").unwrap();
    let err = Planner::new().block_frames(64).schedule(Schedule::Sync).custom(&huge, 1000).unwrap_err();
    assert!(matches!(err, PlanError::TooLong { .. }), "{err:?}");
    let err = Planner::new().plan(Plan::MAX_COVERED_FRAMES + 1).unwrap_err();
    assert!(matches!(err, PlanError::TooLong { .. }), "{err:?}");
    let err =
        Planner::new().block_frames(1).schedule(Schedule::Sync).plan(Planner::MAX_OPTIMAL_BLOCKS + 1).unwrap_err();
    assert!(matches!(err, PlanError::TooManyBlocks { limit_blocks: Planner::MAX_OPTIMAL_BLOCKS, .. }), "{err:?}");
    assert!(err.to_string().contains("use a block of at least 2 frames"), "{err}");
    // A uniform plan has no search: the same IR is planned.
    let uniform = Planner::new().block_frames(1).mode(PlanMode::Uniform).schedule(Schedule::Sync);
    assert!(uniform.plan(Planner::MAX_OPTIMAL_BLOCKS + 1).is_ok());
}
