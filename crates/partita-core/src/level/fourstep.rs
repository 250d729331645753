//! A real FFT of 2N points cut into small steps, so one transform can be spread over many callbacks.
//!
//! The 2N real samples are packed into N complex ones (even samples real, odd imaginary) and transformed
//! by the four-step decomposition of an N = N1 x N2 point DFT (Gentleman & Sande 1966; Bailey, "FFTs in
//! external or hierarchical memory", J. Supercomputing 4, 1990): N1 transforms of N2 points over strided
//! columns, a twiddle multiply, then N2 transforms of N1 points. A final pass splits the packed spectrum
//! into the N + 1 bins of the real transform (the standard "two-for-one" real-FFT identity; Press et al.,
//! Numerical Recipes, 12.3). Each column transform is one step, so no step costs more than an
//! O(sqrt(N) log N) transform. The conventions match realfft's: forward unnormalised, inverse scaled by 2N.

use std::sync::Arc;

use realfft::num_complex::Complex32;
use rustfft::{Fft, FftPlanner};

/// Splits `n` into `n1 * n2` with both factors as close to sqrt(n) as the divisors allow.
pub(crate) fn split(n: usize) -> (usize, usize) {
    let mut best = (1, n);
    let mut d = 1;
    while d * d <= n {
        if n.is_multiple_of(d) {
            best = (d, n / d);
        }
        d += 1;
    }
    best
}

/// Plans and twiddles for one size, forward and inverse.
pub(crate) struct FourStep {
    pub(crate) n: usize,
    pub(crate) n1: usize,
    pub(crate) n2: usize,
    fwd1: Arc<dyn Fft<f32>>,
    fwd2: Arc<dyn Fft<f32>>,
    inv1: Arc<dyn Fft<f32>>,
    inv2: Arc<dyn Fft<f32>>,
    /// e^(-2 pi i n1 k2 / N), row-major [n1][k2].
    twiddle: Vec<Complex32>,
    /// e^(-pi i k / N), k = 0..=N, for the real-FFT split.
    half: Vec<Complex32>,
    column: Vec<Complex32>,
    scratch: Vec<Complex32>,
}

impl std::fmt::Debug for FourStep {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("FourStep").field("n", &self.n).field("n1", &self.n1).field("n2", &self.n2).finish()
    }
}

fn cis(angle: f64) -> Complex32 {
    Complex32::new(angle.cos() as f32, angle.sin() as f32)
}

impl FourStep {
    /// Allocates plans, twiddles and scratch for a 2N-point real transform.
    pub(crate) fn new(n: usize, planner: &mut FftPlanner<f32>) -> Self {
        let (n1, n2) = split(n);
        let fwd1 = planner.plan_fft_forward(n1);
        let fwd2 = planner.plan_fft_forward(n2);
        let inv1 = planner.plan_fft_inverse(n1);
        let inv2 = planner.plan_fft_inverse(n2);
        let scratch_len = [&fwd1, &fwd2, &inv1, &inv2].iter().map(|f| f.get_inplace_scratch_len()).max().unwrap_or(0);
        let tau = std::f64::consts::TAU;
        let twiddle = (0..n1).flat_map(|a| (0..n2).map(move |b| cis(-tau * (a * b) as f64 / n as f64))).collect();
        let half = (0..=n).map(|k| cis(-std::f64::consts::PI * k as f64 / n as f64)).collect();
        Self {
            n,
            n1,
            n2,
            fwd1,
            fwd2,
            inv1,
            inv2,
            twiddle,
            half,
            column: crate::ring::prefaulted(n1.max(n2)),
            scratch: crate::ring::prefaulted(scratch_len),
        }
    }

    #[cfg(feature = "test-hooks")]
    /// Overwrites scratch with garbage (tests prove it does not matter).
    pub(crate) fn dirty(&mut self, value: f32) {
        self.column.fill(Complex32::new(value, value));
        self.scratch.fill(Complex32::new(-value, value));
    }

    /// Step A, row `a` of N1: gathers `z[a + N1 m]` for m in 0..N2 from `src`, transforms it over N2
    /// points and applies the twiddles, into row `a` of `work` (N1 x N2, row-major).
    pub(crate) fn row(&mut self, a: usize, src: &[Complex32], work: &mut [Complex32], inverse: bool) {
        let (n1, n2) = (self.n1, self.n2);
        let row = &mut work[a * n2..(a + 1) * n2];
        for (m, r) in row.iter_mut().enumerate() {
            *r = src[a + n1 * m];
        }
        let fft = if inverse { &self.inv2 } else { &self.fwd2 };
        fft.process_with_scratch(row, &mut self.scratch);
        let tw = &self.twiddle[a * n2..(a + 1) * n2];
        for (r, w) in row.iter_mut().zip(tw) {
            *r *= if inverse { w.conj() } else { *w };
        }
    }

    /// Step C, column `b` of N2: transforms column `b` of `work` over N1 points into `dst[b + N2 k]`.
    pub(crate) fn column(&mut self, b: usize, work: &[Complex32], dst: &mut [Complex32], inverse: bool) {
        let (n1, n2) = (self.n1, self.n2);
        let col = &mut self.column[..n1];
        for (a, c) in col.iter_mut().enumerate() {
            *c = work[a * n2 + b];
        }
        let fft = if inverse { &self.inv1 } else { &self.fwd1 };
        fft.process_with_scratch(col, &mut self.scratch);
        for (k, c) in col.iter().enumerate() {
            dst[b + n2 * k] = *c;
        }
    }

    /// Forward split, bins `range` of 0..=N: from the packed spectrum `z` (N points) to the real
    /// transform's bins `x[k] = E[k] + e^(-pi i k / N) O[k]`.
    pub(crate) fn split_forward(&self, z: &[Complex32], range: std::ops::Range<usize>, x: &mut [Complex32]) {
        let n = self.n;
        for k in range {
            let zk = z[k % n];
            let zc = z[(n - k % n) % n].conj();
            let e = (zk + zc) * 0.5;
            let o = (zk - zc) * Complex32::new(0.0, -0.5);
            x[k] = e + self.half[k] * o;
        }
    }

    /// Inverse pre-pass, packed bins `range` of 0..N: from the real spectrum `x` (N + 1 bins) to
    /// `Z[k] = (X[k] + X*[N-k]) + i e^(pi i k / N) (X[k] - X*[N-k])`, whose unnormalised N-point inverse
    /// holds the 2N-scaled real signal packed even/odd.
    pub(crate) fn merge_inverse(&self, x_re: &[f32], x_im: &[f32], range: std::ops::Range<usize>, z: &mut [Complex32]) {
        let n = self.n;
        for k in range {
            let xk = Complex32::new(x_re[k], x_im[k]);
            let xc = Complex32::new(x_re[n - k], -x_im[n - k]);
            let e = xk + xc;
            let o = (xk - xc) * self.half[k].conj();
            z[k] = e + Complex32::new(0.0, 1.0) * o;
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use realfft::RealFftPlanner;

    fn forward(fs: &mut FourStep, x: &[f32]) -> Vec<Complex32> {
        let n = fs.n;
        let packed: Vec<Complex32> = (0..n).map(|m| Complex32::new(x[2 * m], x[2 * m + 1])).collect();
        let mut work = vec![Complex32::new(0.0, 0.0); n];
        let mut z = vec![Complex32::new(0.0, 0.0); n];
        for a in 0..fs.n1 {
            fs.row(a, &packed, &mut work, false);
        }
        for b in 0..fs.n2 {
            fs.column(b, &work, &mut z, false);
        }
        let mut out = vec![Complex32::new(0.0, 0.0); n + 1];
        fs.split_forward(&z, 0..n + 1, &mut out);
        out
    }

    #[test]
    fn matches_realfft_forward_and_inverse() {
        for n in [1usize, 2, 3, 8, 12, 64, 96, 1000] {
            let mut planner = FftPlanner::new();
            let mut fs = FourStep::new(n, &mut planner);
            let mut noise = crate::synth::Noise::new(n as u64);
            let x = noise.vec(2 * n);
            let got = forward(&mut fs, &x);
            let r2c = RealFftPlanner::<f32>::new().plan_fft_forward(2 * n);
            let mut xin = x.clone();
            let mut want = r2c.make_output_vec();
            r2c.process(&mut xin, &mut want).unwrap();
            let scale = (2 * n) as f32;
            for k in 0..=n {
                assert!(
                    (got[k] - want[k]).norm() <= 2e-5 * scale.sqrt() * 4.0,
                    "n={n} k={k}: {} vs {}",
                    got[k],
                    want[k]
                );
            }
            // Inverse: merge, four-step inverse, unpack; compare with realfft's 2N-scaled inverse.
            let re: Vec<f32> = want.iter().map(|c| c.re).collect();
            let mut im: Vec<f32> = want.iter().map(|c| c.im).collect();
            im[0] = 0.0;
            im[n] = 0.0;
            let mut z = vec![Complex32::new(0.0, 0.0); n];
            fs.merge_inverse(&re, &im, 0..n, &mut z);
            let mut work = vec![Complex32::new(0.0, 0.0); n];
            let mut y = vec![Complex32::new(0.0, 0.0); n];
            for a in 0..fs.n1 {
                fs.row(a, &z, &mut work, true);
            }
            for b in 0..fs.n2 {
                fs.column(b, &work, &mut y, true);
            }
            for m in 0..n {
                let (e, o) = (y[m].re / scale, y[m].im / scale);
                assert!((e - x[2 * m]).abs() < 1e-5 && (o - x[2 * m + 1]).abs() < 1e-5, "n={n} m={m}");
            }
        }
    }

    #[test]
    fn split_is_balanced() {
        assert_eq!(split(49_152), (192, 256));
        assert_eq!(split(64), (8, 8));
        assert_eq!(split(7), (1, 7));
    }
}
