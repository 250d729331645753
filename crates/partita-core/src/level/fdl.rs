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

/// A set of the engine's two IR slots: bit `s` for slot `s`.
pub(crate) type SlotMask = u8;

/// The rings and stream position a level works on at a block boundary.
pub(crate) struct LevelIo<'a> {
    pub(crate) inputs: &'a [TimeRing],
    /// Accumulator rings per IR slot.
    pub(crate) outputs: &'a mut [Vec<TimeRing>; 2],
    pub(crate) now: i64,
    pub(crate) emit: i64,
}

/// What one output of a group sums: (index into the group's inputs, index into the group's IR spectra).
#[derive(Debug, Clone, PartialEq, Eq)]
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
    /// Transforms `[offset, offset + P N)` of each channel (zero-padded past its end). Allocates. Adds the
    /// seconds spent in FFT planning, allocation and the partition FFTs to `times` when given (the
    /// `test-hooks` timing of `Control::prepare`; the clock is not read otherwise).
    pub(crate) fn new(
        channels: &[&[f32]],
        (n, partitions, offset): (usize, usize, usize),
        planner: &mut RealFftPlanner<f32>,
        mut times: Option<&mut PrepareTimes>,
    ) -> Self {
        let mut lap = Lap::start(times.is_some());
        let fwd = planner.plan_fft_forward(2 * n);
        let mut time = fwd.make_input_vec();
        let mut spec = fwd.make_output_vec();
        let mut scratch = fwd.make_scratch_vec();
        let scale = 1.0 / (2 * n) as f32;
        if let Some(t) = times.as_deref_mut() {
            t.plan_s += lap.next();
        }
        let spectra = channels
            .iter()
            .map(|taps| {
                let mut s = Spectra::new(partitions, n + 1);
                if let Some(t) = times.as_deref_mut() {
                    t.alloc_s += lap.next();
                }
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
                if let Some(t) = times.as_deref_mut() {
                    t.fft_s += lap.next();
                }
                s
            })
            .collect();
        Self { spectra }
    }

    /// Bytes held by the spectra.
    pub(crate) fn memory_bytes(&self) -> usize {
        self.spectra.iter().map(Spectra::bytes).sum()
    }
}

/// Where the time of preparing one level slot's spectra went, in seconds.
#[derive(Debug, Clone, Copy, Default, PartialEq)]
pub(crate) struct PrepareTimes {
    /// FFT planning (twiddles, on the first use of a size) and the transform buffers.
    pub(crate) plan_s: f64,
    /// The spectra allocation, with one write per page.
    pub(crate) alloc_s: f64,
    /// Per partition: the scaled copy, the forward FFT and the split store.
    pub(crate) fft_s: f64,
}

/// Laps of a clock that is read only when timing is on.
struct Lap(Option<std::time::Instant>);

impl Lap {
    fn start(on: bool) -> Self {
        Self(on.then(std::time::Instant::now))
    }

    /// Seconds since the last lap (0 when off).
    fn next(&mut self) -> f64 {
        match &mut self.0 {
            Some(t) => {
                let now = std::time::Instant::now();
                let dt = (now - *t).as_secs_f64();
                *t = now;
                dt
            }
            None => 0.0,
        }
    }
}

/// Zeroes up to `budget` samples of the concatenation of `bufs`, starting at sample `pos` of it. Returns
/// the position to continue from, or `None` when the end was reached.
pub(crate) fn sweep<'a>(bufs: impl Iterator<Item = &'a mut [f32]>, pos: usize, budget: usize) -> Option<usize> {
    let (mut base, mut left) = (0usize, budget);
    for buf in bufs {
        let len = buf.len();
        if pos < base + len {
            let from = pos.saturating_sub(base);
            let upto = (from + left).min(len);
            buf[from..upto].fill(0.0);
            left -= upto - from;
            if left == 0 {
                return Some(base + upto);
            }
        }
        base += len;
    }
    None
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
    acc_re: Vec<f32>,
    acc_im: Vec<f32>,
    /// Per IR slot and group output (index `slot * outputs + which`): the level's last result, N samples.
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
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
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
    ) -> Self {
        let n = shape.n;
        let fwd = planner.plan_fft_forward(2 * n);
        let inv = planner.plan_fft_inverse(2 * n);
        let scratch_len = fwd.get_scratch_len().max(inv.get_scratch_len());
        let fdl = inputs.iter().map(|_| Spectra::new(shape.partitions, n + 1)).collect();
        let results = (0..2 * outputs.len()).map(|_| prefaulted(n)).collect();
        Self {
            n,
            partitions: shape.partitions,
            delay: shape.delay,
            lead: shape.lead,
            period_blocks: shape.period_blocks,
            phase_blocks: shape.phase_blocks,
            fwd,
            inv,
            time: prefaulted(2 * n),
            spec: prefaulted(n + 1),
            scratch: prefaulted(scratch_len),
            inputs,
            fdl,
            newest: 0,
            outputs,
            acc_re: prefaulted(n + 1),
            acc_im: prefaulted(n + 1),
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

    /// Adds partitions `parts` over bins `bins` of group output `which`, with the IR spectra `ir`, into
    /// the accumulator.
    pub(crate) fn mac_range(
        &mut self,
        which: usize,
        kernel: Kernel,
        parts: std::ops::Range<usize>,
        bins: std::ops::Range<usize>,
        ir: &LevelIr,
    ) {
        let p_count = self.partitions;
        let (ar, ai) = (&mut self.acc_re[bins.clone()], &mut self.acc_im[bins.clone()]);
        for &(input, c) in &self.outputs[which].terms {
            let x = &self.fdl[input];
            let h = &ir.spectra[c];
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

    /// Sets the result of group output `which` for IR slot `slot` (N samples).
    pub(crate) fn result_mut(&mut self, slot: usize, which: usize) -> &mut [f32] {
        let k = slot * self.outputs.len() + which;
        &mut self.results[k]
    }

    /// The result of group output `which` for IR slot `slot`.
    pub(crate) fn result(&self, slot: usize, which: usize) -> &[f32] {
        &self.results[slot * self.outputs.len() + which]
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
    pub(crate) fn accumulate(&mut self, which: usize, kernel: Kernel, ir: &LevelIr) {
        let bins = self.n + 1;
        self.clear_acc();
        let mut lo = 0;
        while lo < bins {
            let hi = (lo + TILE_BINS).min(bins);
            self.mac_range(which, kernel, 0..self.partitions, lo..hi, ir);
            lo = hi;
        }
    }

    /// Inverse-transforms the accumulator into the result for group output `which` of IR slot `slot`.
    pub(crate) fn inverse(&mut self, slot: usize, which: usize) {
        let mut spec = std::mem::take(&mut self.spec);
        self.acc_spectrum(&mut spec);
        // DC and Nyquist are exactly real, so the inverse cannot report bad input; ignore the result
        // rather than panic on the audio thread.
        let _ = self.inv.process_with_scratch(&mut spec, &mut self.time, &mut self.scratch);
        self.spec = spec;
        let k = slot * self.outputs.len() + which;
        self.results[k].copy_from_slice(&self.time[self.n..]);
    }

    /// Adds each output's result of every IR slot in `mask` into that slot's accumulator rings at
    /// `first_frame`.
    pub(crate) fn deliver(&self, rings: &mut [Vec<TimeRing>; 2], first_frame: i64, mask: SlotMask) {
        self.deliver_range(rings, first_frame, mask, 0..self.n);
    }

    /// [`deliver`](Self::deliver) for result samples `range` only (they land at `first_frame + range.start`).
    pub(crate) fn deliver_range(
        &self,
        rings: &mut [Vec<TimeRing>; 2],
        first_frame: i64,
        mask: SlotMask,
        range: std::ops::Range<usize>,
    ) {
        for (slot, slot_rings) in rings.iter_mut().enumerate() {
            if mask & (1 << slot) == 0 {
                continue;
            }
            for (w, terms) in self.outputs.iter().enumerate() {
                slot_rings[terms.output].add(first_frame + range.start as i64, &self.result(slot, w)[range.clone()]);
            }
        }
    }

    /// All three steps at once for every output and every IR slot in `mask`, then delivery.
    pub(crate) fn run_sync(&mut self, io: LevelIo<'_>, irs: [Option<&LevelIr>; 2], mask: SlotMask, kernel: Kernel) {
        self.forward(io.inputs, io.now);
        for (slot, ir) in irs.iter().enumerate() {
            let Some(ir) = ir.filter(|_| mask & (1 << slot) != 0) else { continue };
            for which in 0..self.outputs.len() {
                self.accumulate(which, kernel, ir);
                self.inverse(slot, which);
            }
        }
        self.deliver(io.outputs, io.emit + self.lead as i64, mask);
    }

    /// Zeroes up to `budget` samples of the level's state from sweep position `pos`; see [`sweep`].
    pub(crate) fn sweep(&mut self, pos: usize, budget: usize) -> Option<usize> {
        let bufs = self.fdl.iter_mut().flat_map(|s| [&mut s.re[..], &mut s.im[..]]);
        let next = sweep(bufs.chain(self.results.iter_mut().map(|r| &mut r[..])), pos, budget);
        if next.is_none() {
            self.newest = 0;
        }
        next
    }

    /// Bytes held by the level's delay line and buffers (the IR spectra are counted with the IR).
    pub(crate) fn memory_bytes(&self) -> usize {
        let spectra: usize = self.fdl.iter().map(Spectra::bytes).sum();
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

    #[cfg(feature = "test-hooks")]
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
