//! The fractional-rate reader behind click-free drift correction.
//!
//! The playback side reads the ring at a rate of `1 + u` input frames per output frame, `u` the rate
//! controller's correction (a few hundred ppm at most in practice). The reader keeps the frames it has
//! taken from the ring in a short history and computes each output frame at a fractional input
//! position with a windowed-sinc kernel, so the correction is a smooth change of rate: no frame is
//! ever dropped or repeated.
//!
//! Kernel: `TAPS` = 32 taps of sinc(t) (cut-off at the Nyquist frequency: at ratios this close to 1 an
//! image of a tone at `f` lands within `u x rate` of `f` itself, attenuated by the kernel's response
//! at `rate - f`, so the transition band can straddle Nyquist) under a Kaiser window (beta 10), tabulated
//! at `PHASES` = 512 fractional positions with linear interpolation between neighbouring rows; every row
//! sums to 1 (DC gain 1 at any phase) and row 0 is the identity. The kernel is symmetric about the
//! output position, so the reader needs `HALF_TAPS` = 16 frames beyond it: that look-ahead is the
//! resampler's delay (0.33 ms at 48 kHz), and it sits in the reader's history, where the bridge counts
//! it as queued frames in the latency it reports.
//!
//! Until the controller first asks for a correction the reader runs with no look-ahead and copies
//! frames through (bit-exact, no added delay): devices on one clock never pay for the resampler.

use ringbuf::traits::Consumer;
use ringbuf::HeapCons;

/// Frames the kernel reaches beyond (and, less one, before) the output position: the look-ahead, and
/// so the delay, of the resampler once engaged.
pub(crate) const HALF_TAPS: usize = 16;
/// Kernel length.
const TAPS: usize = 2 * HALF_TAPS;
/// Tabulated fractional positions per frame.
const PHASES: usize = 512;
/// Kaiser window shape: beta 10 puts the window's sidelobes near -100 dB (Kaiser's design rule
/// beta = 0.1102 (A - 8.7) for A dB of attenuation).
const KAISER_BETA: f64 = 10.0;
/// The largest |u| the reader is sized for (1%); the controller's limit is clamped to it.
pub(crate) const MAX_RATE_DEVIATION: f64 = 0.01;

/// The tabulated kernel: `PHASES + 1` rows of `TAPS` weights. Row `p` holds the weights of the frames
/// at offsets `-(HALF_TAPS - 1) ..= HALF_TAPS` from the output position's integer part, for a
/// fractional part `p / PHASES`.
struct Kernel {
    table: Vec<f32>,
}

/// I0, the modified Bessel function of the first kind, order 0, by its power series (converges for
/// every argument; at x = 10 the terms fall below 1e-17 of the sum after 40).
fn bessel_i0(x: f64) -> f64 {
    let q = 0.25 * x * x;
    let mut term = 1.0;
    let mut sum = 1.0;
    for k in 1..200 {
        term *= q / (k * k) as f64;
        sum += term;
        if term < 1e-17 * sum {
            break;
        }
    }
    sum
}

impl Kernel {
    /// Builds the table. Allocates.
    fn new() -> Self {
        let half = HALF_TAPS as f64;
        let i0_beta = bessel_i0(KAISER_BETA);
        let mut table = vec![0.0f32; (PHASES + 1) * TAPS];
        let mut row = [0.0f64; TAPS];
        for p in 0..=PHASES {
            let mu = p as f64 / PHASES as f64;
            for (j, w) in row.iter_mut().enumerate() {
                // Distance from the output position to the frame this tap weighs.
                let t = mu + (HALF_TAPS - 1) as f64 - j as f64;
                *w = if t == t.round() {
                    // sin(pi k) is not exactly 0 in floating point: make row 0 the exact identity.
                    if t == 0.0 {
                        1.0
                    } else {
                        0.0
                    }
                } else if t.abs() >= half {
                    0.0
                } else {
                    let x = t / half;
                    let window = bessel_i0(KAISER_BETA * (1.0 - x * x).sqrt()) / i0_beta;
                    let arg = std::f64::consts::PI * t;
                    window * arg.sin() / arg
                };
            }
            let sum: f64 = row.iter().sum();
            for (dst, w) in table[p * TAPS..(p + 1) * TAPS].iter_mut().zip(&row) {
                *dst = (w / sum) as f32;
            }
        }
        Self { table }
    }

    /// The weights for fractional position `frac` in [0, 1), interpolated linearly between rows.
    #[inline]
    fn weights(&self, frac: f64, out: &mut [f32; TAPS]) {
        let phase = frac * PHASES as f64;
        let p = (phase as usize).min(PHASES - 1);
        let a = (phase - p as f64) as f32;
        let r0 = &self.table[p * TAPS..(p + 1) * TAPS];
        let r1 = &self.table[(p + 1) * TAPS..(p + 2) * TAPS];
        for ((o, &x0), &x1) in out.iter_mut().zip(r0).zip(r1) {
            *o = x0 + a * (x1 - x0);
        }
    }
}

/// Reads interleaved frames of `width` channels from the ring at a varying rate. Every buffer is
/// sized at construction; nothing in [`pull`](Self::pull) or [`render`](Self::render) allocates.
pub(crate) struct RateReader {
    width: usize,
    kernel: Kernel,
    /// Frames taken from the ring (interleaved), `capacity` frames of room.
    hist: Vec<f32>,
    capacity: usize,
    /// Frames held in `hist`.
    len: usize,
    /// The output position: `pos + frac` frames into `hist`.
    pos: usize,
    frac: f64,
    /// Frames needed beyond `pos`: 0 while copying through, `HALF_TAPS` once engaged.
    lookahead: usize,
}

impl std::fmt::Debug for RateReader {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("RateReader")
            .field("width", &self.width)
            .field("len", &self.len)
            .field("pos", &self.pos)
            .field("frac", &self.frac)
            .field("lookahead", &self.lookahead)
            .finish_non_exhaustive()
    }
}

/// The rate of output frame `i` of a callback whose correction ramps from `u0` by `du` per frame.
/// One expression shared by [`RateReader::need`] and [`RateReader::render`], so both step through
/// identical positions.
#[inline]
fn rate_step(u0: f64, du: f64, i: usize) -> f64 {
    u0 + du * (i + 1) as f64
}

/// Advances an output position by one frame at correction `u` (|u| < 1).
#[inline]
fn advance(pos: &mut usize, frac: &mut f64, u: f64) {
    *frac += u;
    *pos += 1;
    if *frac >= 1.0 {
        *frac -= 1.0;
        *pos += 1;
    } else if *frac < 0.0 {
        *frac += 1.0;
        *pos -= 1;
    }
}

impl RateReader {
    /// A reader for chunks of at most `max_chunk` output frames. Allocates.
    pub(crate) fn new(width: usize, max_chunk: usize) -> Self {
        // After a chunk, frames before `pos - (HALF_TAPS - 1)` are dropped, so at most
        // HALF_TAPS - 1 + HALF_TAPS + 1 frames remain; a chunk then needs up to
        // max_chunk x (1 + MAX_RATE_DEVIATION) + 2 more.
        let capacity = 2 * HALF_TAPS + 4 + max_chunk + (max_chunk as f64 * MAX_RATE_DEVIATION).ceil() as usize;
        let mut reader = Self {
            width,
            kernel: Kernel::new(),
            hist: vec![0.0; capacity * width],
            capacity,
            len: 0,
            pos: 0,
            frac: 0.0,
            lookahead: 0,
        };
        reader.restart();
        reader
    }

    /// Starts over from silence (after priming): the history before the next frame is zeros and the
    /// next output is the next frame from the ring, exactly. Keeps the look-ahead.
    pub(crate) fn restart(&mut self) {
        let keep = HALF_TAPS - 1;
        self.hist[..keep * self.width].fill(0.0);
        self.len = keep;
        self.pos = keep;
        self.frac = 0.0;
    }

    /// Switches from copying through to interpolating: from now on the reader holds `HALF_TAPS`
    /// frames beyond the output position. The output does not change (row 0 of the kernel is the
    /// identity); the next [`need`](Self::need) asks for the extra frames.
    pub(crate) fn engage(&mut self) {
        self.lookahead = HALF_TAPS;
    }

    /// Frames held beyond the output position when engaged: the resampler's delay.
    pub(crate) fn lookahead(&self) -> usize {
        self.lookahead
    }

    /// Frames taken from the ring and not yet passed by the output position (fractional): queued
    /// frames, as the ring's are.
    pub(crate) fn pending(&self) -> f64 {
        self.len as f64 - self.pos as f64 - self.frac
    }

    /// Frames to take from the ring before rendering output frames `first..first + n` of a callback
    /// whose correction ramps from `u0` by `du` per frame.
    pub(crate) fn need(&self, first: usize, n: usize, u0: f64, du: f64) -> usize {
        if n == 0 {
            return 0;
        }
        let (mut pos, mut frac) = (self.pos, self.frac);
        for i in first..first + n - 1 {
            advance(&mut pos, &mut frac, rate_step(u0, du, i));
        }
        (pos + self.lookahead + 1).saturating_sub(self.len)
    }

    /// Takes `frames` frames from the ring into the history; returns how many it got (zeros stand in
    /// for the rest, which the caller's [`need`](Self::need) check rules out).
    pub(crate) fn pull(&mut self, cons: &mut HeapCons<f32>, frames: usize) -> usize {
        let w = self.width;
        let frames = frames.min(self.capacity - self.len);
        let dst = &mut self.hist[self.len * w..(self.len + frames) * w];
        let got = cons.pop_slice(dst);
        dst[got..].fill(0.0);
        self.len += frames;
        got / w.max(1)
    }

    /// Renders output frames `first..first + out.len() / width` of the callback (see
    /// [`need`](Self::need); the frames it asked for must have been pulled) into `out`, interleaved.
    pub(crate) fn render(&mut self, out: &mut [f32], first: usize, u0: f64, du: f64) {
        let w = self.width;
        let n = out.len() / w.max(1);
        if self.lookahead == 0 {
            // Copying through: the controller keeps u at exactly 0 until it engages the reader.
            debug_assert!(u0 == 0.0 && du == 0.0 && self.frac == 0.0);
            out.copy_from_slice(&self.hist[self.pos * w..(self.pos + n) * w]);
            self.pos += n;
        } else {
            let mut weights = [0.0f32; TAPS];
            for (i, frame) in out.chunks_exact_mut(w).enumerate() {
                self.kernel.weights(self.frac, &mut weights);
                let start = (self.pos + 1 - HALF_TAPS) * w;
                let window = &self.hist[start..start + TAPS * w];
                for (c, y) in frame.iter_mut().enumerate() {
                    let mut acc = 0.0f32;
                    for (k, &h) in weights.iter().enumerate() {
                        acc += h * window[k * w + c];
                    }
                    *y = acc;
                }
                advance(&mut self.pos, &mut self.frac, rate_step(u0, du, first + i));
            }
        }
        // Keep HALF_TAPS - 1 frames of history before the output position.
        let drop = self.pos.saturating_sub(HALF_TAPS - 1);
        if drop > 0 {
            self.hist.copy_within(drop * w..self.len * w, 0);
            self.len -= drop;
            self.pos -= drop;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use ringbuf::traits::{Producer, Split};
    use ringbuf::HeapRb;

    /// The reader against the closed form: a tone sampled at integer frames, read at positions that
    /// advance by 1 + u, equals sin(2 pi f t) at those positions to within -100 dB of its amplitude for
    /// tones up to 0.35 x the rate and -95 dB at 0.4 x (measured: -102 to -110 dB, and -98 dB at 0.4 x;
    /// above that the kernel's transition band, which straddles Nyquist, takes over: -20 dB at 0.45 x).
    #[test]
    fn interpolates_tones_to_the_closed_form() {
        for (f, bound_db) in
            [(0.0208, -100.0), (0.1, -100.0), (0.2, -100.0), (0.3, -100.0), (0.35, -100.0), (0.4, -95.0)]
        {
            for u in [1e-4, -3e-4, 7.3e-3] {
                // Two channels: the tone, and its cosine at half the level (the channels stay apart).
                let total = 6000;
                let phase = |k: f64| 2.0 * std::f64::consts::PI * f * k;
                let x: Vec<f32> = (0..total)
                    .flat_map(|k| [phase(k as f64).sin() as f32, (0.5 * phase(k as f64).cos()) as f32])
                    .collect();
                let (mut prod, mut cons) = HeapRb::<f32>::new(2 * total).split();
                prod.push_slice(&x);
                let mut r = RateReader::new(2, 256);
                r.engage();
                let mut out = vec![0.0f32; 2 * 256];
                let mut worst = 0.0f64;
                // Output frame m sits at input position (HALF_TAPS - 1) + m (1 + u) - (HALF_TAPS - 1),
                // i.e. m (1 + u) into the tone (the history starts with HALF_TAPS - 1 zeros).
                let mut m = 0usize;
                for _ in 0..20 {
                    let need = r.need(0, 256, u, 0.0);
                    r.pull(&mut cons, need);
                    r.render(&mut out, 0, u, 0.0);
                    for y in out.chunks_exact(2) {
                        // Skip the start, where the kernel reaches into the zeros before the tone.
                        if m > 2 * HALF_TAPS {
                            let t = m as f64 * (1.0 + u);
                            worst = worst.max((f64::from(y[0]) - phase(t).sin()).abs());
                            worst = worst.max(2.0 * (f64::from(y[1]) - 0.5 * phase(t).cos()).abs());
                        }
                        m += 1;
                    }
                }
                let db = 20.0 * worst.log10();
                assert!(db < bound_db, "f = {f} x rate, u = {u}: error {db:.1} dB");
            }
        }
    }

    #[test]
    fn rows_are_unit_gain_and_row_zero_is_the_identity() {
        let k = Kernel::new();
        for p in 0..=PHASES {
            let sum: f64 = k.table[p * TAPS..(p + 1) * TAPS].iter().map(|&w| f64::from(w)).sum();
            assert!((sum - 1.0).abs() < 1e-6, "row {p}: {sum}");
        }
        for (j, &w) in k.table[..TAPS].iter().enumerate() {
            assert_eq!(w, if j == HALF_TAPS - 1 { 1.0 } else { 0.0 });
        }
        // The last row is the first moved one frame on.
        for (j, &w) in k.table[PHASES * TAPS..].iter().enumerate() {
            assert_eq!(w, if j == HALF_TAPS { 1.0 } else { 0.0 });
        }
    }

    /// Copying through is bit-exact, and engaging does not change the output at u = 0.
    #[test]
    fn copy_through_and_engaging_are_exact() {
        let x: Vec<f32> = (0..2000).map(|k| ((k * 7919) % 1000) as f32 / 1000.0 - 0.5).collect();
        let (mut prod, mut cons) = HeapRb::<f32>::new(2 * x.len()).split();
        prod.push_slice(&x);
        let mut r = RateReader::new(2, 100);
        let mut y = Vec::new();
        let mut out = [0.0f32; 2 * 100];
        for k in 0..8 {
            if k == 4 {
                r.engage();
            }
            let need = r.need(0, 100, 0.0, 0.0);
            r.pull(&mut cons, need);
            r.render(&mut out, 0, 0.0, 0.0);
            y.extend_from_slice(&out);
        }
        assert_eq!(&y[..], &x[..y.len()]);
        assert_eq!(r.pending(), HALF_TAPS as f64);
    }
}
