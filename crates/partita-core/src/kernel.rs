//! Complex multiply-accumulate kernels over split real/imaginary spectra.
//!
//! `acc += x * h` bin by bin. This loop is where partitioned convolution spends most of its time
//! (8 flops per bin per partition; Wefers 2015). The kernel is a closed enum chosen once when an engine
//! is built, so the hot loop is a `match`, not a virtual call. The scalar kernel always exists and the
//! tests compare every available kernel with it.

/// A multiply-accumulate implementation.
///
/// The SIMD variants carry a [`CpuToken`] that only [`Kernel::detect`] (and so [`Kernel::available`]) can
/// make, after checking the CPU: safe code cannot name a kernel its CPU does not run, which is what makes
/// [`mac`](Kernel::mac) safe to call.
///
/// ```compile_fail
/// // The token's field is private: a kernel cannot be made up.
/// let k = partita_core::Kernel::Avx2Fma(partita_core::kernel::CpuToken(()));
/// ```
///
/// ```
/// // What the compile_fail example above leans on exists; only its construction is refused.
/// # #[cfg(target_arch = "x86_64")]
/// if let partita_core::Kernel::Avx2Fma(token) = partita_core::Kernel::detect() {
///     let _copy: partita_core::kernel::CpuToken = token;
/// }
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kernel {
    /// Portable code (the compiler auto-vectorizes it for the baseline target).
    Scalar,
    /// AVX2 + FMA, 8 bins per instruction (x86-64 only, chosen when the CPU has both).
    #[cfg(target_arch = "x86_64")]
    Avx2Fma(CpuToken),
}

/// Proof that the CPU was checked for a SIMD kernel's features. Only [`Kernel::detect`] makes one.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct CpuToken(());

impl Kernel {
    /// The fastest kernel this CPU runs.
    pub fn detect() -> Self {
        #[cfg(target_arch = "x86_64")]
        {
            if std::is_x86_feature_detected!("avx2") && std::is_x86_feature_detected!("fma") {
                return Self::Avx2Fma(CpuToken(()));
            }
        }
        Self::Scalar
    }

    /// Every kernel this CPU runs, scalar first.
    pub fn available() -> Vec<Self> {
        let mut all = vec![Self::Scalar];
        let best = Self::detect();
        if best != Self::Scalar {
            all.push(best);
        }
        all
    }

    /// Short name for tables.
    pub fn name(self) -> &'static str {
        match self {
            Self::Scalar => "scalar",
            #[cfg(target_arch = "x86_64")]
            Self::Avx2Fma(_) => "avx2-fma",
        }
    }

    /// `acc += x * h` over complex bins held as split real/imaginary slices.
    ///
    /// # Panics
    /// When the slices differ in length.
    #[inline]
    pub fn mac(self, acc_re: &mut [f32], acc_im: &mut [f32], x_re: &[f32], x_im: &[f32], h_re: &[f32], h_im: &[f32]) {
        let n = acc_re.len();
        assert!(acc_im.len() == n && x_re.len() == n && x_im.len() == n && h_re.len() == n && h_im.len() == n);
        match self {
            Self::Scalar => mac_scalar(acc_re, acc_im, x_re, x_im, h_re, h_im),
            #[cfg(target_arch = "x86_64")]
            // SAFETY: `Avx2Fma` carries a `CpuToken`, which only `detect()` makes after checking both CPU
            // features (its field is private to this module), and the lengths were checked equal above.
            Self::Avx2Fma(_) => unsafe { mac_avx2_fma(acc_re, acc_im, x_re, x_im, h_re, h_im) },
        }
    }
}

fn mac_scalar(acc_re: &mut [f32], acc_im: &mut [f32], x_re: &[f32], x_im: &[f32], h_re: &[f32], h_im: &[f32]) {
    for (((((ar, ai), &xr), &xi), &hr), &hi) in
        acc_re.iter_mut().zip(acc_im.iter_mut()).zip(x_re).zip(x_im).zip(h_re).zip(h_im)
    {
        *ar += xr * hr - xi * hi;
        *ai += xr * hi + xi * hr;
    }
}

#[cfg(target_arch = "x86_64")]
#[target_feature(enable = "avx2,fma")]
unsafe fn mac_avx2_fma(acc_re: &mut [f32], acc_im: &mut [f32], x_re: &[f32], x_im: &[f32], h_re: &[f32], h_im: &[f32]) {
    use std::arch::x86_64::*;
    let n = acc_re.len();
    let full = n - n % 8;
    let mut k = 0;
    while k < full {
        // SAFETY: k + 8 <= full <= n and every slice has length n, so each unaligned 8-lane access is
        // in bounds.
        unsafe {
            let xr = _mm256_loadu_ps(x_re.as_ptr().add(k));
            let xi = _mm256_loadu_ps(x_im.as_ptr().add(k));
            let hr = _mm256_loadu_ps(h_re.as_ptr().add(k));
            let hi = _mm256_loadu_ps(h_im.as_ptr().add(k));
            let mut ar = _mm256_loadu_ps(acc_re.as_ptr().add(k));
            let mut ai = _mm256_loadu_ps(acc_im.as_ptr().add(k));
            ar = _mm256_fmadd_ps(xr, hr, ar);
            ar = _mm256_fnmadd_ps(xi, hi, ar);
            ai = _mm256_fmadd_ps(xr, hi, ai);
            ai = _mm256_fmadd_ps(xi, hr, ai);
            _mm256_storeu_ps(acc_re.as_mut_ptr().add(k), ar);
            _mm256_storeu_ps(acc_im.as_mut_ptr().add(k), ai);
        }
        k += 8;
    }
    mac_scalar(&mut acc_re[full..], &mut acc_im[full..], &x_re[full..], &x_im[full..], &h_re[full..], &h_im[full..]);
}

#[cfg(test)]
mod tests {
    use super::*;
    use crate::synth::Noise;

    #[test]
    fn every_kernel_matches_scalar() {
        for n in [1usize, 7, 8, 9, 33, 257] {
            let mut noise = Noise::new(n as u64);
            let v: Vec<Vec<f32>> = (0..6).map(|_| noise.vec(n)).collect();
            let mut want = (v[0].clone(), v[1].clone());
            Kernel::Scalar.mac(&mut want.0, &mut want.1, &v[2], &v[3], &v[4], &v[5]);
            for k in Kernel::available() {
                let mut got = (v[0].clone(), v[1].clone());
                k.mac(&mut got.0, &mut got.1, &v[2], &v[3], &v[4], &v[5]);
                for i in 0..n {
                    assert!((got.0[i] - want.0[i]).abs() <= 1e-6, "{} re bin {i}", k.name());
                    assert!((got.1[i] - want.1[i]).abs() <= 1e-6, "{} im bin {i}", k.name());
                }
            }
        }
    }
}
