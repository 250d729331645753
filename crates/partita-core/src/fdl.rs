//! One FFT level of one routing group: uniformly partitioned overlap-save with a frequency-domain delay
//! line (Kulp 1988; Soo & Pang 1990; Wefers 2015, ch. 5).
//!
//! Every `N` frames the level transforms the last `2N` input frames (read `delay` frames back from the
//! newest input), pushes the spectrum into a ring of the last `P` input spectra, accumulates
//! `sum_p X[k - p] * H[p]` per output, transforms back and keeps the last `N` samples. The work is split
//! into [`forward`](LevelRunner::forward), [`accumulate`](LevelRunner::accumulate) and
//! [`inverse`](LevelRunner::inverse) so a schedule can run the steps wherever it likes without changing
//! the arithmetic.

use std::sync::Arc;

use realfft::num_complex::Complex32;
use realfft::{ComplexToReal, RealFftPlanner, RealToComplex};

use crate::kernel::Kernel;
use crate::ring::{prefaulted, TimeRing};

/// Bins per accumulation tile: 256 bins of re + im accumulators stay in L1 while partitions stream by.
const TILE_BINS: usize = 256;

/// Split real/imaginary spectra, `slots` of `bins` each.
#[derive(Debug, Clone)]
pub(crate) struct Spectra {
    re: Vec<f32>,
    im: Vec<f32>,
    bins: usize,
}

impl Spectra {
    fn new(slots: usize, bins: usize) -> Self {
        Self { re: prefaulted(slots * bins), im: prefaulted(slots * bins), bins }
    }

    fn slot(&self, s: usize) -> (&[f32], &[f32]) {
        let r = s * self.bins..(s + 1) * self.bins;
        (&self.re[r.clone()], &self.im[r])
    }

    fn store(&mut self, s: usize, spec: &[Complex32]) {
        let r = s * self.bins..(s + 1) * self.bins;
        for ((re, im), c) in self.re[r.clone()].iter_mut().zip(&mut self.im[r]).zip(spec) {
            *re = c.re;
            *im = c.im;
        }
    }

    fn clear(&mut self) {
        self.re.fill(0.0);
        self.im.fill(0.0);
    }

    fn bytes(&self) -> usize {
        4 * (self.re.len() + self.im.len())
    }
}

/// What one output of a group sums: (index into the group's inputs, index into the group's IR spectra).
#[derive(Debug, Clone)]
pub(crate) struct OutputTerms {
    pub(crate) output: usize,
    pub(crate) terms: Vec<(usize, usize)>,
}

/// The IR spectra of one level: per IR channel, `P` partition spectra pre-scaled by 1 / (2N).
#[derive(Debug, Clone)]
pub(crate) struct LevelIr {
    spectra: Vec<Spectra>,
}

impl LevelIr {
    /// Transforms `[offset, offset + P N)` of each channel (zero-padded past its end). Allocates.
    pub(crate) fn new(channels: &[&[f32]], n: usize, partitions: usize, offset: usize) -> Self {
        let mut planner = RealFftPlanner::<f32>::new();
        let fwd = planner.plan_fft_forward(2 * n);
        let mut time = fwd.make_input_vec();
        let mut spec = fwd.make_output_vec();
        let mut scratch = fwd.make_scratch_vec();
        let scale = 1.0 / (2 * n) as f32;
        let spectra = channels
            .iter()
            .map(|taps| {
                let mut s = Spectra::new(partitions, n + 1);
                for p in 0..partitions {
                    time.fill(0.0);
                    let start = (offset + p * n).min(taps.len());
                    let end = (offset + (p + 1) * n).min(taps.len());
                    for (t, &h) in time.iter_mut().zip(&taps[start..end]) {
                        *t = h * scale;
                    }
                    fwd.process_with_scratch(&mut time, &mut spec, &mut scratch)
                        .expect("buffer sizes come from the same FFT plan");
                    s.store(p, &spec);
                }
                s
            })
            .collect();
        Self { spectra }
    }
}

/// The run-time state of one level for one routing group.
pub(crate) struct LevelRunner {
    n: usize,
    partitions: usize,
    /// Frames between the newest input and the end of the window the level transforms.
    pub(crate) delay: usize,
    /// Frames between the next output to emit and the first frame this level's result covers.
    pub(crate) lead: usize,
    /// Level period in engine blocks, and the block phase at which its input block completes.
    pub(crate) period_blocks: u64,
    pub(crate) phase_blocks: u64,
    fwd: Arc<dyn RealToComplex<f32>>,
    inv: Arc<dyn ComplexToReal<f32>>,
    time: Vec<f32>,
    spec: Vec<Complex32>,
    scratch: Vec<Complex32>,
    inputs: Vec<usize>,
    fdl: Vec<Spectra>,
    newest: usize,
    outputs: Vec<OutputTerms>,
    ir: LevelIr,
    acc_re: Vec<f32>,
    acc_im: Vec<f32>,
    /// Per group output: the level's last result, N samples.
    results: Vec<Vec<f32>>,
}

impl std::fmt::Debug for LevelRunner {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("LevelRunner")
            .field("block_frames", &self.n)
            .field("partitions", &self.partitions)
            .field("delay", &self.delay)
            .field("lead", &self.lead)
            .field("period_blocks", &self.period_blocks)
            .field("phase_blocks", &self.phase_blocks)
            .finish_non_exhaustive()
    }
}

/// Geometry of a level runner.
#[derive(Debug, Clone, Copy)]
pub(crate) struct LevelShape {
    pub(crate) n: usize,
    pub(crate) partitions: usize,
    pub(crate) delay: usize,
    pub(crate) lead: usize,
    pub(crate) period_blocks: u64,
    pub(crate) phase_blocks: u64,
}

impl LevelRunner {
    /// Allocates every buffer the level will use.
    pub(crate) fn new(
        shape: LevelShape,
        planner: &mut RealFftPlanner<f32>,
        inputs: Vec<usize>,
        outputs: Vec<OutputTerms>,
        ir: LevelIr,
    ) -> Self {
        let n = shape.n;
        let fwd = planner.plan_fft_forward(2 * n);
        let inv = planner.plan_fft_inverse(2 * n);
        let scratch_len = fwd.get_scratch_len().max(inv.get_scratch_len());
        let fdl = inputs.iter().map(|_| Spectra::new(shape.partitions, n + 1)).collect();
        let results = outputs.iter().map(|_| vec![0.0; n]).collect();
        Self {
            n,
            partitions: shape.partitions,
            delay: shape.delay,
            lead: shape.lead,
            period_blocks: shape.period_blocks,
            phase_blocks: shape.phase_blocks,
            fwd,
            inv,
            time: vec![0.0; 2 * n],
            spec: vec![Complex32::new(0.0, 0.0); n + 1],
            scratch: vec![Complex32::new(0.0, 0.0); scratch_len],
            inputs,
            fdl,
            newest: 0,
            outputs,
            ir,
            acc_re: vec![0.0; n + 1],
            acc_im: vec![0.0; n + 1],
            results,
        }
    }

    /// True when the level's input block completes at engine block `block`.
    pub(crate) fn due_at(&self, block: u64) -> bool {
        block % self.period_blocks == self.phase_blocks
    }

    /// Frames between the newest input and the end of the window the level transforms.
    pub(crate) fn window_start(&self, now: i64) -> i64 {
        now - self.delay as i64 - 2 * self.n as i64
    }

    /// Group inputs (engine input indices).
    pub(crate) fn inputs(&self) -> &[usize] {
        &self.inputs
    }

    /// Group outputs (engine output indices).
    pub(crate) fn output_count(&self) -> usize {
        self.outputs.len()
    }

    /// Number of (input, IR) terms summed into group output `which`.
    pub(crate) fn terms(&self, which: usize) -> usize {
        self.outputs[which].terms.len()
    }

    /// Engine output index of group output `which`.
    pub(crate) fn output_index(&self, which: usize) -> usize {
        self.outputs[which].output
    }

    /// Level block N.
    pub(crate) fn n(&self) -> usize {
        self.n
    }

    /// Partitions P.
    pub(crate) fn partitions(&self) -> usize {
        self.partitions
    }

    /// Transforms each group input's `2N`-frame window (written into the buffer by `fill(input, buf)`)
    /// into the delay line.
    pub(crate) fn forward_with(&mut self, mut fill: impl FnMut(usize, &mut [f32])) {
        self.newest = (self.newest + 1) % self.partitions;
        for (i, slot) in self.fdl.iter_mut().enumerate() {
            fill(i, &mut self.time);
            // The sizes come from the same plan, so the only possible error cannot happen; ignore it
            // rather than panic on the audio thread.
            let _ = self.fwd.process_with_scratch(&mut self.time, &mut self.spec, &mut self.scratch);
            slot.store(self.newest, &self.spec);
        }
    }

    /// Advances the delay line by one slot (before storing a new block's spectra with
    /// [`store_spectrum`](Self::store_spectrum)).
    pub(crate) fn advance(&mut self) {
        self.newest = (self.newest + 1) % self.partitions;
    }

    /// Stores bins `lo..lo + spec.len()` of group input `i`'s spectrum for the newest block.
    pub(crate) fn store_spectrum_range(&mut self, i: usize, lo: usize, spec: &[Complex32]) {
        let base = self.newest * self.fdl[i].bins + lo;
        let f = &mut self.fdl[i];
        for ((re, im), c) in f.re[base..base + spec.len()].iter_mut().zip(&mut f.im[base..base + spec.len()]).zip(spec)
        {
            *re = c.re;
            *im = c.im;
        }
    }

    /// The accumulator, split real and imaginary.
    pub(crate) fn acc(&self) -> (&[f32], &[f32]) {
        (&self.acc_re, &self.acc_im)
    }

    /// Zeroes the accumulator.
    pub(crate) fn clear_acc(&mut self) {
        self.acc_re.fill(0.0);
        self.acc_im.fill(0.0);
    }

    /// Adds partitions `parts` over bins `bins` of group output `which` into the accumulator.
    pub(crate) fn mac_range(
        &mut self,
        which: usize,
        kernel: Kernel,
        parts: std::ops::Range<usize>,
        bins: std::ops::Range<usize>,
    ) {
        let p_count = self.partitions;
        let (ar, ai) = (&mut self.acc_re[bins.clone()], &mut self.acc_im[bins.clone()]);
        for &(input, ir) in &self.outputs[which].terms {
            let x = &self.fdl[input];
            let h = &self.ir.spectra[ir];
            for p in parts.clone() {
                let slot = (self.newest + p_count - p) % p_count;
                let (xr, xi) = x.slot(slot);
                let (hr, hi) = h.slot(p);
                kernel.mac(ar, ai, &xr[bins.clone()], &xi[bins.clone()], &hr[bins.clone()], &hi[bins.clone()]);
            }
        }
    }

    /// The accumulator as interleaved complex bins with exact-zero DC and Nyquist imaginary parts.
    pub(crate) fn acc_spectrum(&self, spec: &mut [Complex32]) {
        for ((c, &re), &im) in spec.iter_mut().zip(&self.acc_re).zip(&self.acc_im) {
            *c = Complex32::new(re, im);
        }
        spec[0].im = 0.0;
        spec[self.n].im = 0.0;
    }

    /// Sets the result of group output `which` (N samples).
    pub(crate) fn result_mut(&mut self, which: usize) -> &mut [f32] {
        &mut self.results[which]
    }

    /// The result of group output `which`.
    pub(crate) fn result(&self, which: usize) -> &[f32] {
        &self.results[which]
    }

    /// Transforms each group input's window ending `delay` frames before `now` into the delay line.
    pub(crate) fn forward(&mut self, rings: &[TimeRing], now: i64) {
        let start = self.window_start(now);
        let inputs = std::mem::take(&mut self.inputs);
        self.forward_with(|i, buf| rings[inputs[i]].read(start, buf));
        self.inputs = inputs;
    }

    /// Accumulates `sum_p X[k - p] H[p]` for group output `which` into the accumulator, in tiles of bins
    /// so the accumulator stays in L1 while the partitions stream by.
    pub(crate) fn accumulate(&mut self, which: usize, kernel: Kernel) {
        let bins = self.n + 1;
        self.clear_acc();
        let mut lo = 0;
        while lo < bins {
            let hi = (lo + TILE_BINS).min(bins);
            self.mac_range(which, kernel, 0..self.partitions, lo..hi);
            lo = hi;
        }
    }

    /// Inverse-transforms the accumulator into the result for group output `which`.
    pub(crate) fn inverse(&mut self, which: usize) {
        let mut spec = std::mem::take(&mut self.spec);
        self.acc_spectrum(&mut spec);
        // DC and Nyquist are exactly real, so the inverse cannot report bad input; ignore the result
        // rather than panic on the audio thread.
        let _ = self.inv.process_with_scratch(&mut spec, &mut self.time, &mut self.scratch);
        self.spec = spec;
        self.results[which].copy_from_slice(&self.time[self.n..]);
    }

    /// Adds each output's result into the accumulator rings at `first_frame`.
    pub(crate) fn deliver(&self, rings: &mut [TimeRing], first_frame: i64) {
        for (terms, result) in self.outputs.iter().zip(&self.results) {
            rings[terms.output].add(first_frame, result);
        }
    }

    /// All three steps at once for every output, then delivery.
    pub(crate) fn run_sync(
        &mut self,
        inputs: &[TimeRing],
        outputs: &mut [TimeRing],
        now: i64,
        emit: i64,
        kernel: Kernel,
    ) {
        self.forward(inputs, now);
        for which in 0..self.outputs.len() {
            self.accumulate(which, kernel);
            self.inverse(which);
        }
        self.deliver(outputs, emit + self.lead as i64);
    }

    /// Bytes held by the level's spectra and buffers.
    pub(crate) fn memory_bytes(&self) -> usize {
        let spectra: usize = self.fdl.iter().chain(&self.ir.spectra).map(Spectra::bytes).sum();
        let buffers = 4 * (self.time.len() + self.acc_re.len() + self.acc_im.len())
            + 8 * (self.spec.len() + self.scratch.len())
            + 4 * self.results.iter().map(Vec::len).sum::<usize>();
        spectra + buffers
    }

    pub(crate) fn clear(&mut self) {
        for s in &mut self.fdl {
            s.clear();
        }
        for r in &mut self.results {
            r.fill(0.0);
        }
        self.newest = 0;
    }

    /// Overwrites scratch with garbage (tests prove it does not matter).
    pub(crate) fn dirty(&mut self, value: f32) {
        self.time.fill(value);
        self.spec.fill(Complex32::new(value, -value));
        self.scratch.fill(Complex32::new(-value, value));
        self.acc_re.fill(value);
        self.acc_im.fill(-value);
        for r in &mut self.results {
            r.fill(value);
        }
    }
}
