//! The slot layout: which level runs for which routing group, on which block phase, reading its input
//! how far back. Plain data computed from a plan and a routing before anything is allocated for audio;
//! the engine builds one level runner per slot, and [`crate::prepared`] one set of spectra per slot.
//!
//! - A `sync` level runs once per routing group (plain stereo: L->L and R->R are two groups), and the
//!   groups are staggered to different block phases so big levels of L and R never share a callback.
//! - A `workers` or `sliced` level runs every group in one job: one wake-up (or one step list) per
//!   release instead of one per group. Their hand-offs are chunked and their work spread, so they need no
//!   stagger between groups. Measured side by side on S1: about 10% less paced load for both schedules
//!   (docs/benchmarks/log.md, 2 December 2026).
//! - Groups without a path (an unused input or output of a matrix) get no slot.

use crate::level::fdl::{LevelShape, OutputTerms};
use crate::plan::{slot_phase_blocks, Plan, Schedule};
use crate::routing::RouteMap;

/// One level runner to build: a plan level for one routing group (or all of them).
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct SlotSpec {
    /// Index of the plan level.
    pub(crate) level: usize,
    /// Engine inputs the slot reads, ascending.
    pub(crate) inputs: Vec<usize>,
    /// Engine outputs the slot writes, each with its (index into `inputs`, index into `ir_channels`) terms.
    pub(crate) outputs: Vec<OutputTerms>,
    /// Distinct IR channels the slot transforms, in first-use order.
    pub(crate) ir_channels: Vec<usize>,
    /// Block, partitions, input delay, result lead, period and phase in engine blocks.
    pub(crate) shape: LevelShape,
    /// The level's first IR frame.
    pub(crate) offset_frames: usize,
    /// Its schedule.
    pub(crate) schedule: Schedule,
}

/// Every slot of an engine, and how much history its rings must keep.
#[derive(Debug, Clone, PartialEq, Eq)]
pub(crate) struct SlotLayout {
    pub(crate) slots: Vec<SlotSpec>,
    /// Frames each input ring must hold.
    pub(crate) input_reach: usize,
    /// Frames each output accumulator ring must hold.
    pub(crate) output_reach: usize,
}

impl SlotLayout {
    /// The layout for `plan` on `routes`. Allocates (small lists only); the plan must be valid.
    pub(crate) fn new(plan: &Plan, routes: &RouteMap) -> Self {
        let b = plan.block_frames;
        let latency = plan.latency_frames();
        let groups = routes.groups();
        let merged = vec![groups.iter().filter(|(gi, go)| !gi.is_empty() && !go.is_empty()).fold(
            (Vec::new(), Vec::new()),
            |(mut i, mut o), (gi, go)| {
                i.extend_from_slice(gi);
                o.extend_from_slice(go);
                (i, o)
            },
        )];
        let mut slots = Vec::new();
        let mut input_reach = latency + plan.head_frames + b;
        let mut output_reach = b;
        for (li, level) in plan.levels.iter().enumerate() {
            let level_groups = if level.schedule == Schedule::Sync { &groups } else { &merged };
            let group_count = level_groups.len();
            for (gi, (g_inputs, g_outputs)) in level_groups.iter().enumerate() {
                if g_inputs.is_empty() || g_outputs.is_empty() {
                    continue; // the phases still count it, as they always have
                }
                let mut ir_channels: Vec<usize> = Vec::new();
                let outputs = g_outputs
                    .iter()
                    .map(|&o| OutputTerms {
                        output: o,
                        terms: routes
                            .paths
                            .iter()
                            .filter(|p| p.output == o)
                            .map(|p| {
                                let local_in = g_inputs.iter().position(|&i| i == p.input).unwrap_or(0);
                                let c = match ir_channels.iter().position(|&c| c == p.ir_channel) {
                                    Some(c) => c,
                                    None => {
                                        ir_channels.push(p.ir_channel);
                                        ir_channels.len() - 1
                                    }
                                };
                                (local_in, c)
                            })
                            .collect(),
                    })
                    .collect();
                let n = level.block_frames;
                let due = level.schedule.due_frames(n);
                // d = s - N + latency - D: read the input as late as the level's result allows, so the
                // result lands at the next frame to emit plus D. The offset rule guarantees d >= 0.
                let delay = level.offset_frames + latency - n - due;
                // Sliced jobs read their window during the whole period that follows.
                input_reach = input_reach.max(delay + 3 * n + b);
                output_reach = output_reach.max(due + n + b);
                let period_blocks = (n / b) as u64;
                // Stagger: level li of group gi completes its input at a different block phase from its
                // neighbours, so big levels of different groups do not share a callback.
                let phase_blocks = slot_phase_blocks(li, gi, group_count, period_blocks);
                slots.push(SlotSpec {
                    level: li,
                    inputs: g_inputs.clone(),
                    outputs,
                    ir_channels,
                    shape: LevelShape {
                        n,
                        partitions: level.partitions,
                        delay,
                        lead: due,
                        period_blocks,
                        phase_blocks,
                    },
                    offset_frames: level.offset_frames,
                    schedule: level.schedule,
                });
            }
        }
        Self { slots, input_reach, output_reach }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plan::Level;
    use crate::routing::Routing;

    fn level(n: usize, p: usize, s: usize, schedule: Schedule) -> Level {
        Level { block_frames: n, partitions: p, offset_frames: s, schedule }
    }

    fn plan(levels: Vec<Level>) -> Plan {
        let ir_frames = levels.last().map_or(0, Level::end_frames);
        let plan = Plan { block_frames: 64, head_frames: 0, zero_latency: false, levels, ir_frames };
        plan.validate().expect("hand-made plan is valid");
        plan
    }

    fn terms(output: usize, terms: &[(usize, usize)]) -> OutputTerms {
        OutputTerms { output, terms: terms.to_vec() }
    }

    #[test]
    fn mono_sync_levels_read_as_late_as_their_offset_allows() {
        // Block 64 (latency 64): level 0 = 64 x 4 at 0, level 1 = 256 x 2 at 256.
        let p = plan(vec![level(64, 4, 0, Schedule::Sync), level(256, 2, 256, Schedule::Sync)]);
        let layout = SlotLayout::new(&p, &Routing::Mono.resolve(1).unwrap());
        assert_eq!(layout.slots.len(), 2);
        let (a, b) = (&layout.slots[0], &layout.slots[1]);
        assert_eq!((a.level, &a.inputs[..], &a.ir_channels[..]), (0, &[0][..], &[0][..]));
        assert_eq!(a.outputs, vec![terms(0, &[(0, 0)])]);
        // d = s - N + latency - D = 0 - 64 + 64 - 0 = 0; period 1 block, phase 0.
        assert_eq!(a.shape, LevelShape { n: 64, partitions: 4, delay: 0, lead: 0, period_blocks: 1, phase_blocks: 0 });
        // d = 256 - 256 + 64 - 0 = 64; period 4 blocks; phase (1 x 1 + 0) % 4 = 1.
        assert_eq!(
            b.shape,
            LevelShape { n: 256, partitions: 2, delay: 64, lead: 0, period_blocks: 4, phase_blocks: 1 }
        );
        // Input reach: max(latency + head + B = 128, d + 3N + B = 64 + 768 + 64 = 896); output: N + B = 320.
        assert_eq!((layout.input_reach, layout.output_reach), (896, 320));
    }

    #[test]
    fn stereo_sync_levels_run_per_group_on_staggered_phases() {
        let p = plan(vec![level(64, 4, 0, Schedule::Sync), level(256, 3, 256, Schedule::Sync)]);
        // A 2-channel stereo IR: channel 0 left to left, channel 1 right to right.
        let layout = SlotLayout::new(&p, &Routing::Stereo.resolve(2).unwrap());
        let got: Vec<(usize, Vec<usize>, Vec<usize>, u64)> = layout
            .slots
            .iter()
            .map(|s| (s.level, s.inputs.clone(), s.outputs.iter().map(|o| o.output).collect(), s.shape.phase_blocks))
            .collect();
        // Phase (level x groups + group) % period: level 0 period 1 -> 0, 0; level 1 period 4 -> 2, 3.
        assert_eq!(
            got,
            vec![
                (0, vec![0], vec![0], 0),
                (0, vec![1], vec![1], 0),
                (1, vec![0], vec![0], 2),
                (1, vec![1], vec![1], 3),
            ]
        );
        // Each group reads its own IR channel, as group-local channel 0.
        assert_eq!(layout.slots[1].ir_channels, vec![1]);
        assert_eq!(layout.slots[1].outputs, vec![terms(1, &[(0, 0)])]);
    }

    #[test]
    fn a_mono_ir_on_stereo_serves_both_groups_with_channel_0() {
        let p = plan(vec![level(64, 2, 0, Schedule::Sync)]);
        let layout = SlotLayout::new(&p, &Routing::Stereo.resolve(1).unwrap());
        assert_eq!(layout.slots.len(), 2);
        assert!(layout.slots.iter().all(|s| s.ir_channels == vec![0]));
    }

    #[test]
    fn true_stereo_is_one_group_with_four_terms() {
        let p = plan(vec![level(64, 2, 0, Schedule::Sync)]);
        let layout = SlotLayout::new(&p, &Routing::TrueStereo.resolve(4).unwrap());
        assert_eq!(layout.slots.len(), 1);
        let s = &layout.slots[0];
        assert_eq!(s.inputs, vec![0, 1]);
        // Paths ordered by output then input; channels LL=0, LR=1, RL=2, RR=3 (input-major).
        // Output 0 sums L*LL + R*RL; output 1 sums L*LR + R*RR. Local IR channels in first-use order.
        assert_eq!(s.ir_channels, vec![0, 2, 1, 3]);
        assert_eq!(s.outputs, vec![terms(0, &[(0, 0), (1, 1)]), terms(1, &[(0, 2), (1, 3)])]);
    }

    #[test]
    fn worker_and_sliced_levels_merge_the_stereo_groups() {
        // Level 1 on a worker (D = N): offset >= N - B + N = 448 for N = 256.
        let p = plan(vec![
            level(64, 8, 0, Schedule::Sync),
            level(256, 6, 512, Schedule::Workers),
            level(1024, 2, 2048, Schedule::Sliced),
        ]);
        let layout = SlotLayout::new(&p, &Routing::Stereo.resolve(2).unwrap());
        let levels: Vec<usize> = layout.slots.iter().map(|s| s.level).collect();
        assert_eq!(levels, vec![0, 0, 1, 2], "sync per group, workers and sliced merged");
        for merged in &layout.slots[2..] {
            assert_eq!(merged.inputs, vec![0, 1]);
            assert_eq!(merged.ir_channels, vec![0, 1]);
            assert_eq!(merged.outputs, vec![terms(0, &[(0, 0)]), terms(1, &[(1, 1)])]);
        }
        // Workers: D = N = 256, d = 512 - 256 + 64 - 256 = 64, lead = D; phase (1 x 1 + 0) % 4 = 1.
        let w = &layout.slots[2].shape;
        assert_eq!((w.delay, w.lead, w.period_blocks, w.phase_blocks), (64, 256, 4, 1));
        // Sliced: s = 2048, d = 2048 - 1024 + 64 - 1024 = 64; period 16, phase 2.
        let s = &layout.slots[3].shape;
        assert_eq!((s.delay, s.lead, s.period_blocks, s.phase_blocks), (64, 1024, 16, 2));
        // Output reach covers the sliced result: D + N + B = 1024 + 1024 + 64.
        assert_eq!(layout.output_reach, 2112);
    }

    #[test]
    fn groups_without_a_path_get_no_slot() {
        // A 2x2 matrix is one group; a stereo routing of two groups keeps both. Build a route map with an
        // unused output by hand: one input feeding output 0 only, output 1 idle.
        let routes = RouteMap {
            inputs: 1,
            outputs: 2,
            paths: vec![crate::routing::Path { input: 0, output: 0, ir_channel: 0 }],
        };
        let p = plan(vec![level(64, 8, 0, Schedule::Sync), level(256, 2, 512, Schedule::Workers)]);
        let layout = SlotLayout::new(&p, &routes);
        assert_eq!(layout.slots.len(), 2);
        assert!(layout.slots.iter().all(|s| s.outputs.iter().map(|o| o.output).eq([0])));
    }
}
