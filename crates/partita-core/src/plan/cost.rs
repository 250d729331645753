//! Cost models for partition planning: a flop model, and per-operation costs measured on the running
//! machine ([`MachineCosts::calibrate`]). Core does no file I/O: a caller that wants to cache the
//! calibration stores the [`MachineCosts`] (serde) itself.

use std::time::Instant;

use realfft::RealFftPlanner;
use serde::{Deserialize, Serialize};

use crate::kernel::Kernel;
use crate::level::workers::transfer_chunk;
use crate::plan::{Plan, Schedule};

/// How many inputs, outputs and (input, IR) paths an engine has; costs scale with them (forward FFTs per
/// input, inverse FFTs per output, multiply-accumulates and head taps per path).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Serialize, Deserialize)]
pub struct Shape {
    /// Engine inputs.
    pub inputs: usize,
    /// Engine outputs.
    pub outputs: usize,
    /// (input, output) paths.
    pub paths: usize,
}

impl Shape {
    /// One input, one output, one path: the "mono cost" of DESIGN.md section 4.
    pub const MONO: Self = Self { inputs: 1, outputs: 1, paths: 1 };

    /// Independent routing groups of the usual routings: a diagonal (as many paths as inputs and outputs:
    /// mono, plain stereo) has one group per input; anything else (mono to stereo, true stereo, a full
    /// matrix) is one group. The engine staggers groups to different phases.
    pub fn groups(&self) -> usize {
        if self.paths == self.inputs && self.inputs == self.outputs {
            self.inputs.max(1)
        } else {
            1
        }
    }

    /// The shape of a resolved routing.
    pub fn of(map: &crate::RouteMap) -> Self {
        Self { inputs: map.inputs, outputs: map.outputs, paths: map.paths.len() }
    }
}

/// Per-operation costs measured on one machine, in seconds.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub struct MachineCosts {
    /// (level block N, seconds for one forward plus one inverse real FFT of 2N points, including the
    /// copies around them).
    pub fft_pair_seconds: Vec<(usize, f64)>,
    /// Seconds per complex bin of multiply-accumulate when the spectra are cache-resident.
    pub mac_seconds_per_bin: f64,
    /// Seconds per complex bin when the spectra stream from main memory (levels whose spectra exceed
    /// `cache_bytes`).
    pub mac_streamed_seconds_per_bin: f64,
    /// Spectra bytes per level above which the streamed cost applies.
    pub cache_bytes: usize,
    /// Seconds per direct-form tap per output sample.
    pub head_seconds_per_tap: f64,
    /// Name of the kernel measured.
    pub kernel: String,
}

// The paced-call constants below were fitted together on two runs of the deadline bench (`cargo bench
// --bench deadline`, parts 1 and 3: blocks 32-256, stereo IRs of 0.5-10 s and a 20 s true-stereo one, every
// schedule, heaviest-phase medians of paced runs; 88 cells) against a calibration made by the least-of-batches
// method, on the project's 2-vCPU AMD EPYC VM, 2 December 2026: predicted / measured 0.99-3.1 over those
// cells. The fit and the check on a later run are in docs/benchmarks/deadline.md. They are judgements for other machines: `partita plan --measure` shows the
// prediction beside the measured figure.

/// How much more a small level's job (up to [`PACED_SMALL_FRAMES`]) costs in a live, paced callback than in
/// calibration's back-to-back loop with warm caches: between callbacks the engine's data, code and
/// translations leave the caches, and a small job is all misses. Fitted (see above).
pub const PACED_FACTOR_SMALL: f64 = 8.0;

/// The paced factor of a large level's job (from [`PACED_LARGE_FRAMES`] on): its data does not stay in
/// cache even back to back, so going cold costs it relatively less. Between the two sizes the factor falls
/// log-linearly. Fitted (see above).
pub const PACED_FACTOR_LARGE: f64 = 2.5;

/// Level size up to which [`PACED_FACTOR_SMALL`] applies.
pub const PACED_SMALL_FRAMES: usize = 4096;

/// Level size from which [`PACED_FACTOR_LARGE`] applies.
pub const PACED_LARGE_FRAMES: usize = 16384;

/// What a `sliced` level's share of work costs a paced callback against the same work in one piece back to
/// back (no paced factor on top): its FFTs are four-step sub-transforms, every step is bookkept, and each
/// step finds its data cold. Fitted (see above).
pub const SLICED_OVERHEAD: f64 = 12.0;

/// What a `sliced` level costs on the mean against the same level run whole: the automatic schedule ranks
/// plans by [`CostModel::plan_cost`] with `sliced` levels counted this much dearer. From the deadline
/// bench's part 1 (2 December 2026): plans with the same levels measured 1.33% sliced against 1.01% with
/// workers (S1) and 1.51% against 1.29% (20 s true stereo at block 128), 1.25 to 1.55 times the sliced
/// levels' share by the model's split.
pub const SLICED_MEAN_OVERHEAD: f64 = 1.4;

/// What waking a worker thread costs the callback that releases its job (a futex wake through
/// `Thread::unpark`), paced. Fitted (see above).
pub const WAKE_SECONDS: f64 = 6e-6;

/// What a `sliced` level costs the callback at each boundary beyond its share of the work, paced (its
/// step list is cold). Fitted (see above).
pub const SLICE_SECONDS: f64 = 0.5e-6;

/// What moving one sample between the audio thread's rings and a worker's hand-off slot costs the
/// callback, paced. Fitted (see above).
pub const COPY_SECONDS_PER_SAMPLE: f64 = 0.5e-9;

/// What every host call costs whatever its plan: entering the engine, the output stage and the status
/// counters, paced. Fitted (see above).
pub const CALL_SECONDS: f64 = 8e-6;

/// The paced-call constants of [`CostModel::heaviest_call_pct`] in one place (a fit varies them).
#[derive(Debug, Clone, Copy, PartialEq)]
pub(crate) struct CallCosts {
    pub paced_small: f64,
    pub paced_large: f64,
    pub small_frames: usize,
    pub large_frames: usize,
    pub sliced_overhead: f64,
    pub slice_seconds: f64,
    pub wake_seconds: f64,
    pub copy_seconds_per_sample: f64,
    pub call_seconds: f64,
}

impl CallCosts {
    pub const DEFAULT: Self = Self {
        paced_small: PACED_FACTOR_SMALL,
        paced_large: PACED_FACTOR_LARGE,
        small_frames: PACED_SMALL_FRAMES,
        large_frames: PACED_LARGE_FRAMES,
        sliced_overhead: SLICED_OVERHEAD,
        slice_seconds: SLICE_SECONDS,
        wake_seconds: WAKE_SECONDS,
        copy_seconds_per_sample: COPY_SECONDS_PER_SAMPLE,
        call_seconds: CALL_SECONDS,
    };

    /// The paced factor of a job on a level of `n` frames: `paced_small` up to `small_frames`,
    /// `paced_large` from `large_frames`, log-linear between.
    pub fn paced_factor(&self, n: usize) -> f64 {
        if n <= self.small_frames || self.large_frames <= self.small_frames {
            self.paced_small
        } else if n >= self.large_frames {
            self.paced_large
        } else {
            let t =
                (n as f64 / self.small_frames as f64).ln() / (self.large_frames as f64 / self.small_frames as f64).ln();
            self.paced_small + t * (self.paced_large - self.paced_small)
        }
    }
}

/// Least common multiple (periods in blocks).
fn lcm(a: u64, b: u64) -> u64 {
    let (mut x, mut y) = (a, b);
    while y != 0 {
        (x, y) = (y, x % y);
    }
    a / x.max(1) * b
}

/// What the planner minimises.
#[derive(Debug, Clone, PartialEq, Serialize, Deserialize)]
pub enum CostModel {
    /// The flop model: a forward and an inverse FFT of 2N points cost 10 log2(2N) flops per sample
    /// together, a partition 8 (N + 1) / N, a head tap 2 (Wefers 2015, ch. 5). `flops_per_second` turns
    /// flops into load; the default 24 GFLOP/s is the effective rate implied by DESIGN.md's "0.36% for
    /// S1", not a measurement of this machine.
    Flops {
        /// Effective throughput assumed when predicting load.
        flops_per_second: f64,
    },
    /// Costs measured on the running machine.
    Measured(MachineCosts),
}

impl Default for CostModel {
    fn default() -> Self {
        Self::Flops { flops_per_second: 24e9 }
    }
}

impl CostModel {
    /// Seconds (measured model) or flops (flop model) per output frame for the FFT pair of a level of
    /// block `n` (forward per input, inverse per output).
    fn fft_per_frame(&self, n: usize, shape: Shape) -> f64 {
        let io = (shape.inputs + shape.outputs) as f64;
        match self {
            Self::Flops { .. } => 5.0 * (2.0 * n as f64).log2() * io,
            Self::Measured(m) => m.fft_pair_at(n) / n as f64 * io / 2.0,
        }
    }

    fn partition_per_frame(&self, n: usize, shape: Shape) -> f64 {
        let bins_per_frame = (n + 1) as f64 / n as f64;
        let unit = match self {
            Self::Flops { .. } => 8.0,
            // One partition's input and IR spectra: 16 bytes per bin. A level is cache-resident when a
            // few partitions of it fit; big levels stream (their working set is megabytes).
            Self::Measured(m) if 16 * 8 * (n + 1) > m.cache_bytes => m.mac_streamed_seconds_per_bin,
            Self::Measured(m) => m.mac_seconds_per_bin,
        };
        unit * bins_per_frame * shape.paths as f64
    }

    fn head_tap_per_frame(&self, shape: Shape) -> f64 {
        let unit = match self {
            Self::Flops { .. } => 2.0,
            Self::Measured(m) => m.head_seconds_per_tap,
        };
        unit * shape.paths as f64
    }

    /// Cost of opening a level of block `n` (its FFTs), per output frame, in the model's unit.
    pub fn level_cost(&self, n: usize, shape: Shape) -> f64 {
        self.fft_per_frame(n, shape)
    }

    /// Cost of one partition of block `n`, per output frame, in the model's unit.
    pub fn partition_cost(&self, n: usize, shape: Shape) -> f64 {
        self.partition_per_frame(n, shape)
    }

    /// Cost of a plan per output frame in the model's unit (flops or seconds).
    pub fn plan_cost(&self, plan: &Plan, shape: Shape) -> f64 {
        self.head_tap_per_frame(shape) * plan.head_frames as f64
            + plan
                .levels
                .iter()
                .map(|l| {
                    self.level_cost(l.block_frames, shape)
                        + l.partitions as f64 * self.partition_cost(l.block_frames, shape)
                })
                .sum::<f64>()
    }

    /// [`plan_cost`](Self::plan_cost) with `sliced` levels counted [`SLICED_MEAN_OVERHEAD`] times dearer: the
    /// mean cost the automatic schedule ranks plans by.
    pub fn scheduled_plan_cost(&self, plan: &Plan, shape: Shape) -> f64 {
        let sliced: f64 = plan
            .levels
            .iter()
            .filter(|l| l.schedule == Schedule::Sliced)
            .map(|l| {
                self.level_cost(l.block_frames, shape)
                    + l.partitions as f64 * self.partition_cost(l.block_frames, shape)
            })
            .sum();
        self.plan_cost(plan, shape) + (SLICED_MEAN_OVERHEAD - 1.0) * sliced
    }

    /// Seconds per unit of this model: 1 for the measured model, `1 / flops_per_second` for the flop model.
    fn seconds_per_unit(&self) -> f64 {
        match self {
            Self::Flops { flops_per_second } => 1.0 / flops_per_second,
            Self::Measured(_) => 1.0,
        }
    }

    /// The predicted heaviest host call of `plan`, with calls of `host_frames` frames on a routing of
    /// `groups` independent groups (plain stereo 2, true stereo 1; see [`RouteMap::groups`]), in percent
    /// of the call's deadline (`host_frames / sample_rate_hz`) as a paced, live host sees it. Built from
    /// the per-operation costs of [`load_pct`](Self::load_pct), for every position of the call on the
    /// engine's block grid:
    ///
    /// - a call crosses `ceil(H / B)` consecutive block boundaries (one more when `H` is not a multiple of
    ///   `B`);
    /// - a `sync` level runs one job per routing group, each at its staggered phase (the engine's slot
    ///   layout), costing its FFT pair and multiply-accumulates;
    /// - a `sliced` level does `1 / period` of its job at every boundary, at [`SLICED_OVERHEAD`] times the
    ///   cost of the same work in one piece, plus [`SLICE_SECONDS`] per boundary and its input-window copy
    ///   at its release;
    /// - a `workers` level costs the callback a wake-up of its thread at each release
    ///   ([`WAKE_SECONDS`]) and its hand-off copies ([`COPY_SECONDS_PER_SAMPLE`]);
    /// - the direct-form head costs its taps on every frame;
    /// - compute is multiplied by a paced factor that falls with the level's size, from
    ///   [`PACED_FACTOR_SMALL`] to [`PACED_FACTOR_LARGE`]: calibrated costs come from back-to-back runs with
    ///   warm caches, a live callback finds them cold after the gap since the previous one;
    /// - every call costs [`CALL_SECONDS`] besides.
    ///
    /// The heaviest position is the maximum over one hyperperiod of the levels' periods.
    ///
    /// [`RouteMap::groups`]: crate::RouteMap::groups
    pub fn heaviest_call_pct(
        &self,
        plan: &Plan,
        shape: Shape,
        groups: usize,
        sample_rate_hz: f64,
        host_frames: usize,
    ) -> f64 {
        self.heaviest_call_pct_with(&CallCosts::DEFAULT, plan, shape, groups, sample_rate_hz, host_frames)
    }

    /// [`heaviest_call_pct`](Self::heaviest_call_pct) with the paced-call constants given (for fitting them).
    pub(crate) fn heaviest_call_pct_with(
        &self,
        k: &CallCosts,
        plan: &Plan,
        shape: Shape,
        groups: usize,
        sample_rate_hz: f64,
        host_frames: usize,
    ) -> f64 {
        let b = plan.block_frames.max(1);
        let h = host_frames.max(1);
        let boundaries = (h.div_ceil(b) + usize::from(!h.is_multiple_of(b))) as u64;
        let groups = groups.max(1);
        // A job's compute, paced: its back-to-back cost times the paced factor of its size.
        let job = |n: usize, p: usize| {
            k.paced_factor(n) * n as f64 * (self.level_cost(n, shape) + p as f64 * self.partition_cost(n, shape))
        };
        // Work every call carries whatever its position: the head, and the sliced levels' even shares.
        let mut steady = k.paced_factor(b) * self.head_tap_per_frame(shape) * plan.head_frames as f64 * h as f64;
        // Work at given phases: (period in blocks, phase, compute in model units, fixed seconds).
        let mut phased: Vec<(u64, u64, f64, f64)> = Vec::new();
        for (li, level) in plan.levels.iter().enumerate() {
            let period = (level.block_frames / b).max(1) as u64;
            match level.schedule {
                Schedule::Sync => {
                    let per_group = job(level.block_frames, level.partitions) / groups as f64;
                    for g in 0..groups {
                        phased.push((period, super::slot_phase_blocks(li, g, groups, period), per_group, 0.0));
                    }
                }
                Schedule::Sliced => {
                    let plain = level.block_frames as f64
                        * (self.level_cost(level.block_frames, shape)
                            + level.partitions as f64 * self.partition_cost(level.block_frames, shape));
                    steady += k.sliced_overhead * plain * boundaries as f64 / period as f64;
                    // Its state is cold at every boundary: a fixed cost per boundary. (Its window copies and
                    // result deliveries are steps of the job, in chunks of at most 2048 samples, so they are
                    // in the even share.)
                    phased.push((1, 0, 0.0, k.slice_seconds));
                }
                Schedule::Workers => {
                    let phase = super::slot_phase_blocks(li, 0, 1, period);
                    phased.push((period, phase, 0.0, k.wake_seconds));
                    // Hand-off copies at the end of each transfer chunk: a chunk of input in, one of the
                    // result out (per input and output).
                    let chunk = transfer_chunk(level.block_frames, b);
                    let chunk_blocks = (chunk / b).max(1) as u64;
                    let samples = (chunk * (shape.inputs + shape.outputs)) as f64;
                    phased.push((chunk_blocks, phase % chunk_blocks, 0.0, samples * k.copy_seconds_per_sample));
                }
            }
        }
        let hyper = phased.iter().fold(1u64, |l, &(p, ..)| lcm(l, p));
        let mut worst = 0.0f64;
        for start in 0..hyper {
            let (mut units, mut seconds) = (0.0, 0.0);
            for &(period, phase, cost, fixed) in &phased {
                // Boundaries start..start + boundaries at which this slot completes.
                let first = (phase + period - start % period) % period;
                let hits = if first < boundaries { (boundaries - 1 - first) / period + 1 } else { 0 };
                units += hits as f64 * cost;
                seconds += hits as f64 * fixed;
            }
            worst = worst.max(units + seconds / self.seconds_per_unit());
        }
        let deadline = h as f64 / sample_rate_hz;
        100.0 * ((worst + steady) * self.seconds_per_unit() + k.call_seconds) / deadline
    }

    /// Predicted load in percent of one core at `sample_rate_hz`.
    pub fn load_pct(&self, plan: &Plan, shape: Shape, sample_rate_hz: f64) -> f64 {
        100.0 * self.plan_cost(plan, shape) * self.seconds_per_unit() * sample_rate_hz
    }
}

impl MachineCosts {
    /// FFT-pair seconds for block `n`: measured, or scaled from the nearest measured size by N log N.
    pub fn fft_pair_at(&self, n: usize) -> f64 {
        let nearest = self
            .fft_pair_seconds
            .iter()
            .min_by(|a, b| (a.0 as f64 / n as f64).ln().abs().total_cmp(&(b.0 as f64 / n as f64).ln().abs()));
        match nearest {
            Some(&(m, s)) if m == n => s,
            Some(&(m, s)) => s * (n as f64 * (2.0 * n as f64).log2()) / (m as f64 * (2.0 * m as f64).log2()),
            None => 0.0,
        }
    }

    /// Measures FFT pairs for each block in `sizes`, the multiply-accumulate cost per bin and the head
    /// cost per tap on this machine, with `kernel`. Takes well under a second for sizes up to 65536.
    /// Allocates; never call it on the audio thread.
    pub fn calibrate(sizes: &[usize], kernel: Kernel) -> Self {
        let mut planner = RealFftPlanner::<f32>::new();
        let mut fft_pair_seconds = Vec::with_capacity(sizes.len());
        for &n in sizes {
            let fwd = planner.plan_fft_forward(2 * n);
            let inv = planner.plan_fft_inverse(2 * n);
            let mut time = vec![0.1f32; 2 * n];
            let mut spec = fwd.make_output_vec();
            let mut scratch = vec![Default::default(); fwd.get_scratch_len().max(inv.get_scratch_len())];
            let reps = (1 << 19) / n.max(1);
            let reps = reps.clamp(3, 2000);
            let run = |time: &mut Vec<f32>, spec: &mut Vec<_>, scratch: &mut Vec<_>| {
                let _ = fwd.process_with_scratch(time, spec, scratch);
                spec[0] = realfft::num_complex::Complex32::new(spec[0].re, 0.0);
                let last = spec.len() - 1;
                spec[last].im = 0.0;
                let _ = inv.process_with_scratch(spec, time, scratch);
                for t in time.iter_mut() {
                    *t *= 0.5; // keep values bounded; also stands for the copies around a level
                }
            };
            run(&mut time, &mut spec, &mut scratch);
            let seconds = least_of_batches(reps, || run(&mut time, &mut spec, &mut scratch));
            fft_pair_seconds.push((n, seconds));
        }
        let mac_seconds_per_bin = time_mac(kernel, 1025, 64, 20); // about 1 MB of spectra
        let mac_streamed_seconds_per_bin = time_mac(kernel, 16_385, 256, CALIBRATION_BATCHES); // about 64 MB, beyond any cache
                                                                                               // Head: a 256-tap dot product per sample.
        let taps = 256;
        let frames = 4096;
        let sig: Vec<f32> = (0..frames + taps).map(|i| (i % 13) as f32 * 1e-2).collect();
        let hh: Vec<f32> = (0..taps).map(|i| (i % 5) as f32 * 1e-2).collect();
        let mut sink = 0.0f32;
        let head_seconds_per_tap = least_of_batches(CALIBRATION_BATCHES, || {
            for j in 0..frames {
                sink += crate::head::dot(&hh, &sig[j..j + taps]);
            }
        }) / (frames * taps) as f64;
        std::hint::black_box(sink);
        Self {
            fft_pair_seconds,
            mac_seconds_per_bin,
            mac_streamed_seconds_per_bin,
            head_seconds_per_tap,
            cache_bytes: 1 << 20,
            kernel: kernel.name().to_string(),
        }
    }
}

/// Seconds per bin of `kernel` over `parts` partitions of `bins` bins (input and IR spectra apart).
fn time_mac(kernel: Kernel, bins: usize, parts: usize, reps: usize) -> f64 {
    let x: Vec<f32> = (0..bins * parts).map(|i| (i % 7) as f32 * 1e-3).collect();
    let h: Vec<f32> = (0..bins * parts).map(|i| (i % 5) as f32 * 1e-3).collect();
    let (xi, hi) = (x.clone(), h.clone());
    let mut acc_re = vec![0.0f32; bins];
    let mut acc_im = vec![0.0f32; bins];
    let mut pass = || {
        for p in 0..parts {
            let r = p * bins..(p + 1) * bins;
            kernel.mac(&mut acc_re, &mut acc_im, &x[r.clone()], &xi[r.clone()], &h[r.clone()], &hi[r]);
        }
    };
    pass(); // warm up (and fault in the pages)
    let s = least_of_batches(reps, &mut pass) / (parts * bins) as f64;
    std::hint::black_box(&acc_re);
    s
}

/// Calibration runs each measurement in this many batches and keeps the fastest batch's mean.
const CALIBRATION_BATCHES: usize = 5;

/// Seconds per call of `f`, from `reps` calls cut into [`CALIBRATION_BATCHES`] batches (at least one call
/// each): the least of the batch means. On a shared machine a batch that another process interrupted
/// reads long; the least is the code's own cost (common benchmarking practice). One batch mean over all
/// calls let single interruptions into the cache: a calibration on the development VM read the 128-frame
/// FFT pair three times dearer than the 256-frame one.
fn least_of_batches(reps: usize, mut f: impl FnMut()) -> f64 {
    let per_batch = reps.div_ceil(CALIBRATION_BATCHES).max(1);
    (0..CALIBRATION_BATCHES)
        .map(|_| {
            let t0 = Instant::now();
            for _ in 0..per_batch {
                f();
            }
            t0.elapsed().as_secs_f64() / per_batch as f64
        })
        .fold(f64::INFINITY, f64::min)
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::plan::Level;

    const RATE: f64 = 48_000.0;

    /// A uniform plan of 64 x 10 under the flop model, by hand: FFT pair 5 log2(128) x (1 + 1) = 70 flops per
    /// frame, a partition 8 x 65 / 64 = 8.125, so one block's job is 64 x (70 + 81.25) = 9680 flops, eight
    /// times that paced (a small level), at 24 GFLOP/s: 3.227 us, plus the call's 8 us, against a 1.3333 ms
    /// deadline: 0.842%.
    #[test]
    fn heaviest_call_of_a_uniform_plan_by_hand() {
        let model = CostModel::default();
        let plan = Plan::uniform(64, 640).unwrap();
        let one = 100.0 * (PACED_FACTOR_SMALL * 9680.0 / 24e9 + CALL_SECONDS) / (64.0 / RATE);
        assert!((one - 0.842).abs() < 1e-3, "{one}");
        let got = model.heaviest_call_pct(&plan, Shape::MONO, 1, RATE, 64);
        assert!((got - one).abs() < 1e-9 * one.max(1.0), "{got} against {one}");
        // Calls of 4 blocks cross 4 boundaries: 4 jobs and one call's fixed cost in 4 times the deadline.
        let four = 100.0 * (4.0 * PACED_FACTOR_SMALL * 9680.0 / 24e9 + CALL_SECONDS) / (256.0 / RATE);
        assert!((model.heaviest_call_pct(&plan, Shape::MONO, 1, RATE, 256) - four).abs() < 1e-9);
        // 100 frames (not a multiple of 64) can cross 3 boundaries: 3 jobs in 100 frames.
        let hundred = 100.0 * (PACED_FACTOR_SMALL * 3.0 * 9680.0 / 24e9 + CALL_SECONDS) / (100.0 / RATE);
        assert!((model.heaviest_call_pct(&plan, Shape::MONO, 1, RATE, 100) - hundred).abs() < 1e-9);
    }

    /// A big level costs the callback its whole job when `sync`, about 1/period of it (with overheads)
    /// when `sliced`, and only a wake-up and hand-off copies when on a worker; and with two routing groups
    /// the engine staggers them, so a call carries one group's job, not both.
    #[test]
    fn heaviest_call_follows_the_schedule_and_the_stagger() {
        let model = CostModel::default();
        let plan = |schedule| Plan {
            block_frames: 64,
            zero_latency: false,
            head_frames: 0,
            levels: vec![
                Level { block_frames: 64, partitions: 64, offset_frames: 0, schedule: Schedule::Sync },
                Level { block_frames: 4096, partitions: 8, offset_frames: 4096, schedule },
            ],
            ir_frames: 4096 * 9,
        };
        let stereo = Shape { inputs: 2, outputs: 2, paths: 2 };
        let [sync, sliced, workers] = [Schedule::Sync, Schedule::Sliced, Schedule::Workers]
            .map(|s| model.heaviest_call_pct(&plan(s), stereo, 2, RATE, 64));
        assert!(sync > 2.0 * sliced && sliced > workers, "sync {sync}, sliced {sliced}, workers {workers}");
        // One group per call: the two-group figure is about half the one-group figure for the big level.
        let one_group = model.heaviest_call_pct(&plan(Schedule::Sync), stereo, 1, RATE, 64);
        assert!(one_group > 1.6 * sync && one_group < 2.0 * sync, "{one_group} against {sync}");
    }
}
