//! The `sliced` schedule: a level's whole job (forward FFTs, multiply-accumulates, inverse FFTs) cut into
//! small steps spread evenly over the callbacks of its own period, with no threads (Hurchalla, AES 2010
//! describes time-distributing the large partitions). The FFTs are split by their structure
//! ([`crate::fourstep`]), the multiply-accumulates by partition and bin range. The job released when an
//! input block completes runs over the next N/B boundaries and delivers before its due boundary (D = N).

use realfft::num_complex::Complex32;
use rustfft::FftPlanner;

use crate::kernel::Kernel;
use crate::level::fdl::{LevelIo, LevelIr, LevelRunner, SlotMask};
use crate::level::fourstep::FourStep;
use crate::ring::{prefaulted, TimeRing};

/// Samples copied or bins split per step.
const CHUNK: usize = 2048;
/// Bins multiplied per step (per partition).
const MAC_CHUNK: usize = 2048;

#[derive(Debug, Clone, Copy, PartialEq, Eq)]
enum Step {
    /// Start of a job: advance the delay line.
    Begin,
    /// Copy input `i`'s window samples `[lo, lo + CHUNK)` from the ring into the packed buffer.
    Copy { i: usize, lo: usize },
    /// Four-step row `a` of input `i` (forward) or output (inverse).
    Row { a: usize, inverse: bool },
    /// Four-step column `b`.
    Column { b: usize, inverse: bool },
    /// Split the packed forward spectrum of input `i`, bins `[lo, lo + CHUNK)`, into the delay line.
    Split { i: usize, lo: usize },
    /// Clear the accumulator.
    ClearAcc,
    /// Multiply-accumulate partition `p`, bins `[lo, lo + MAC_CHUNK)` of output `w`, IR slot `slot`.
    Mac { slot: usize, w: usize, p: usize, lo: usize },
    /// Inverse pre-pass, packed bins `[lo, lo + CHUNK)`.
    Merge { lo: usize },
    /// Unpack samples `[lo, lo + CHUNK)` of the kept half into output `w`'s result for IR slot `slot`.
    Unpack { slot: usize, w: usize, lo: usize },
    /// Add every output's result samples `[lo, lo + CHUNK)` into the output rings (in chunks, so that no
    /// boundary adds a whole level block at once).
    Deliver { lo: usize },
}

/// A level run in slices on the audio thread.
pub(crate) struct SlicedLevel {
    runner: LevelRunner,
    fs: FourStep,
    /// Each step with its cost and the IR slot it belongs to (`SHARED` for the input side).
    steps: Vec<(Step, u64, u8)>,
    /// Per step: the index of the first later step with another tag, so that a job skips an IR slot's
    /// steps it does not compute in one jump.
    run_end: Vec<usize>,
    /// Cost of a job for one IR slot.
    total_cost: u64,
    /// Cost of the job running now (its IR slots).
    job_cost_now: u64,
    /// IR slots the running job computes.
    mask: SlotMask,
    /// Packed complex samples (N) of the current input or output.
    packed: Vec<Complex32>,
    /// Four-step work matrix (N).
    work: Vec<Complex32>,
    /// Four-step output (N).
    done: Vec<Complex32>,
    /// Split spectrum (N + 1) before storing.
    spec: Vec<Complex32>,
    /// Real samples read from the input ring before packing.
    chunk: Vec<f32>,
    cursor: usize,
    spent: u64,
    /// Boundaries into the current job (0 at release).
    slice: u64,
    running: bool,
    job_now: i64,
    job_emit: i64,
    /// Cost units done at the last boundary (for tests and benches that count per-callback work).
    pub(crate) last_cost: u64,
    kernel: Kernel,
}

impl std::fmt::Debug for SlicedLevel {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("SlicedLevel")
            .field("runner", &self.runner)
            .field("steps", &self.steps.len())
            .field("total_cost", &self.total_cost)
            .finish_non_exhaustive()
    }
}

/// Cost units of a transform of `m` points: m log2(m) butterflies plus m moves (counted, not timed).
fn fft_cost(m: usize) -> u64 {
    let m = m.max(1) as f64;
    (m * m.log2().max(1.0) + m) as u64
}

impl SlicedLevel {
    /// Allocates every buffer and the step list. Allocates.
    pub(crate) fn new(runner: LevelRunner, planner: &mut FftPlanner<f32>, kernel: Kernel) -> Self {
        let n = runner.n();
        let fs = FourStep::new(n, planner);
        let inputs = runner.inputs().len();
        let outputs = runner.output_count();
        let parts = runner.partitions();
        let terms_max = (0..outputs).map(|w| runner.terms(w)).max().unwrap_or(1) as u64;
        let mut steps = vec![(Step::Begin, 1, SHARED)];
        let chunks = |len: usize, step: usize| (0..len).step_by(step);
        for i in 0..inputs {
            for lo in chunks(2 * n, 2 * CHUNK) {
                steps.push((Step::Copy { i, lo }, (2 * CHUNK).min(2 * n - lo) as u64, SHARED));
            }
            for a in 0..fs.n1 {
                steps.push((Step::Row { a, inverse: false }, fft_cost(fs.n2) + fs.n2 as u64, SHARED));
            }
            for b in 0..fs.n2 {
                steps.push((Step::Column { b, inverse: false }, fft_cost(fs.n1), SHARED));
            }
            for lo in chunks(n + 1, CHUNK) {
                steps.push((Step::Split { i, lo }, 4 * CHUNK.min(n + 1 - lo) as u64, SHARED));
            }
        }
        // The output side once per IR slot: both run while a swap crossfades.
        for slot in 0..2 {
            let tag = slot as u8;
            for w in 0..outputs {
                steps.push((Step::ClearAcc, (n + 1) as u64 / 4 + 1, tag));
                for p in 0..parts {
                    for lo in chunks(n + 1, MAC_CHUNK) {
                        let cost = 4 * terms_max * MAC_CHUNK.min(n + 1 - lo) as u64;
                        steps.push((Step::Mac { slot, w, p, lo }, cost, tag));
                    }
                }
                for lo in chunks(n, CHUNK) {
                    steps.push((Step::Merge { lo }, 4 * CHUNK.min(n - lo) as u64, tag));
                }
                for a in 0..fs.n1 {
                    steps.push((Step::Row { a, inverse: true }, fft_cost(fs.n2) + fs.n2 as u64, tag));
                }
                for b in 0..fs.n2 {
                    steps.push((Step::Column { b, inverse: true }, fft_cost(fs.n1), tag));
                }
                for lo in chunks(n, CHUNK) {
                    steps.push((Step::Unpack { slot, w, lo }, CHUNK.min(n - lo) as u64, tag));
                }
            }
        }
        for lo in chunks(n, CHUNK) {
            steps.push((Step::Deliver { lo }, (outputs * CHUNK.min(n - lo)) as u64, SHARED));
        }
        let total_cost = job_cost(&steps, 1);
        let run_end = run_ends(&steps);
        Self {
            runner,
            fs,
            steps,
            run_end,
            total_cost,
            job_cost_now: total_cost,
            mask: 1,
            packed: prefaulted(n),
            work: prefaulted(n),
            done: prefaulted(n),
            spec: prefaulted(n + 1),
            chunk: prefaulted(2 * CHUNK),
            cursor: 0,
            spent: 0,
            slice: 0,
            running: false,
            job_now: 0,
            job_emit: 0,
            last_cost: 0,
            kernel,
        }
    }

    pub(crate) fn due_at(&self, block: u64) -> bool {
        self.runner.due_at(block)
    }

    /// Runs this boundary's share of the current job, and starts a new job for the IR slots `mask` when
    /// its input block has just completed (`release`). `irs` holds every slot a running job uses.
    pub(crate) fn at_boundary(&mut self, io: LevelIo<'_>, irs: [Option<&LevelIr>; 2], release: Option<SlotMask>) {
        self.last_cost = 0;
        if let Some(mask) = release {
            // The previous job finished at the boundary before this one (its last slice), by construction.
            self.running = true;
            self.cursor = 0;
            self.spent = 0;
            self.slice = 0;
            self.job_now = io.now;
            self.job_emit = io.emit;
            self.mask = mask;
            self.job_cost_now = job_cost(&self.steps, mask);
        }
        if !self.running {
            return;
        }
        let period = self.runner.period_blocks;
        self.slice += 1;
        // Even share: after slice c of S, (c / S) of the job's cost is done; the last slice finishes it.
        let total = self.job_cost_now;
        let target = if self.slice >= period { total } else { total * self.slice / period };
        while self.cursor < self.steps.len() && self.spent < target {
            let (step, cost, tag) = self.steps[self.cursor];
            if tag != SHARED && self.mask & (1 << tag) == 0 {
                self.cursor = self.run_end[self.cursor];
                continue;
            }
            self.cursor += 1;
            self.run_step(step, io.inputs, io.outputs, irs);
            self.spent += cost;
            self.last_cost += cost;
        }
        // Skip trailing steps of slots this job does not compute.
        while self.cursor < self.steps.len() {
            let tag = self.steps[self.cursor].2;
            if tag == SHARED || self.mask & (1 << tag) != 0 {
                break;
            }
            self.cursor = self.run_end[self.cursor];
        }
        if self.cursor == self.steps.len() {
            self.running = false;
        }
    }

    fn run_step(
        &mut self,
        step: Step,
        inputs: &[TimeRing],
        outputs: &mut [Vec<TimeRing>; 2],
        irs: [Option<&LevelIr>; 2],
    ) {
        let n = self.fs.n;
        match step {
            Step::Begin => self.runner.advance(),
            Step::Copy { i, lo } => {
                // Read interleaved real samples into the packed complex buffer: z[m] = x[2m] + i x[2m+1].
                let start = self.runner.window_start(self.job_now);
                let input = self.runner.inputs()[i];
                let len = (2 * CHUNK).min(2 * n - lo);
                let chunk = &mut self.chunk[..len];
                inputs[input].read(start + lo as i64, chunk);
                for (z, pair) in self.packed[lo / 2..(lo + len) / 2].iter_mut().zip(chunk.chunks_exact(2)) {
                    *z = Complex32::new(pair[0], pair[1]);
                }
            }
            Step::Row { a, inverse } => self.fs.row(a, &self.packed, &mut self.work, inverse),
            Step::Column { b, inverse } => self.fs.column(b, &self.work, &mut self.done, inverse),
            Step::Split { i, lo } => {
                let hi = (lo + CHUNK).min(n + 1);
                self.fs.split_forward(&self.done, lo..hi, &mut self.spec);
                self.runner.store_spectrum_range(i, lo, &self.spec[lo..hi]);
            }
            Step::ClearAcc => self.runner.clear_acc(),
            Step::Mac { slot, w, p, lo } => {
                let hi = (lo + MAC_CHUNK).min(n + 1);
                if let Some(ir) = irs[slot] {
                    self.runner.mac_range(w, self.kernel, p..p + 1, lo..hi, ir);
                }
            }
            Step::Merge { lo } => {
                let hi = (lo + CHUNK).min(n);
                let (re, im) = self.runner.acc();
                // Real signals have real DC and Nyquist bins; the merge reads im[0] and im[N] as given,
                // and the accumulated values there are exact zeros already (products of real bins).
                self.fs.merge_inverse(re, im, lo..hi, &mut self.packed);
            }
            Step::Unpack { slot, w, lo } => {
                // Keep the second half of the 2N output: samples N..2N are packed pairs N/2..N (N even),
                // or straddle a pair when N is odd.
                let len = CHUNK.min(n - lo);
                let result = self.runner.result_mut(slot, w);
                for (j, r) in result[lo..lo + len].iter_mut().enumerate() {
                    let t = n + lo + j;
                    let c = self.done[t / 2];
                    *r = if t.is_multiple_of(2) { c.re } else { c.im };
                }
            }
            Step::Deliver { lo } => {
                let hi = (lo + CHUNK).min(n);
                self.runner.deliver_range(outputs, self.job_emit + n as i64, self.mask, lo..hi);
            }
        }
    }

    pub(crate) fn clear(&mut self) {
        self.runner.clear();
        self.running = false;
        self.cursor = 0;
    }

    /// Abandons the running job and zeroes up to `budget` samples of state; see [`crate::fdl::sweep`].
    pub(crate) fn sweep(&mut self, pos: usize, budget: usize) -> Option<usize> {
        self.running = false;
        self.cursor = 0;
        self.runner.sweep(pos, budget)
    }

    /// True while a running job still needs IR slot `slot`.
    pub(crate) fn holds(&self, slot: usize) -> bool {
        self.running && self.mask & (1 << slot) != 0
    }

    /// Frames between the next output to emit at a release and the first frame of that job's result.
    pub(crate) fn lead(&self) -> usize {
        self.runner.lead
    }

    /// Level block N.
    pub(crate) fn n(&self) -> usize {
        self.runner.n()
    }

    #[cfg(feature = "test-hooks")]
    /// Overwrites scratch with garbage. While a job runs, its buffers carry state from slice to slice,
    /// so only the transform scratch and the copy buffer are scratch then.
    pub(crate) fn dirty(&mut self, value: f32) {
        self.fs.dirty(value);
        self.chunk.fill(value);
        if !self.running {
            self.runner.dirty(value);
            let g = Complex32::new(value, -value);
            self.packed.fill(g);
            self.work.fill(g);
            self.done.fill(g);
            self.spec.fill(g);
        }
    }

    pub(crate) fn memory_bytes(&self) -> usize {
        self.runner.memory_bytes() + 8 * (self.packed.len() + self.work.len() + self.done.len() + self.spec.len())
    }

    #[cfg(feature = "test-hooks")]
    /// Level period in engine blocks.
    pub(crate) fn period_blocks(&self) -> u64 {
        self.runner.period_blocks
    }

    #[cfg(feature = "test-hooks")]
    /// Cost units of one whole job (one IR slot).
    pub(crate) fn job_cost(&self) -> u64 {
        self.total_cost
    }
}

/// Tag of steps every job runs, whatever its IR slots.
const SHARED: u8 = u8::MAX;

/// For each step, the index of the first later step whose tag differs (the step count at the end).
fn run_ends(steps: &[(Step, u64, u8)]) -> Vec<usize> {
    let mut ends = vec![steps.len(); steps.len()];
    for i in (0..steps.len().saturating_sub(1)).rev() {
        ends[i] = if steps[i + 1].2 == steps[i].2 { ends[i + 1] } else { i + 1 };
    }
    ends
}

/// Cost of the steps a job for IR slots `mask` runs.
fn job_cost(steps: &[(Step, u64, u8)], mask: SlotMask) -> u64 {
    steps.iter().filter(|s| s.2 == SHARED || mask & (1 << s.2) != 0).map(|s| s.1).sum()
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn run_ends_point_past_each_run_of_one_tag() {
        let tags = [SHARED, SHARED, 0, 0, 0, 1, 1, SHARED];
        let steps: Vec<(Step, u64, u8)> = tags.iter().map(|&t| (Step::Begin, 1, t)).collect();
        assert_eq!(run_ends(&steps), vec![2, 2, 5, 5, 5, 7, 7, 8]);
        assert!(run_ends(&[]).is_empty());
    }
}
