//! Quantization of f32 samples to 16- or 24-bit PCM, with TPDF dither.
//!
//! TPDF (triangular probability density) dither is the sum of two independent uniform variables of +-0.5 LSB
//! each: triangular on (-1, 1) LSB, variance 2 x 1/12 = 1/6 LSB^2 (arithmetic). Added before rounding, it makes
//! the total error's mean and variance independent of the signal: mean 0, variance 1/12 + 1/6 = 1/4 LSB^2
//! (common practice; Lipshitz, Wannamaker & Vanderkooy, J. AES 40(5), 1992, from memory). Without dither the
//! error is the plain rounding error, which follows the signal (distortion on quiet material).

use partita_core::synth::Noise;

/// Dither settings for writing integer PCM. On by default with a fixed seed, so the same render gives the same
/// file.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Dither {
    /// Add TPDF dither before rounding to 16 or 24 bits. Float output is never dithered.
    pub enabled: bool,
    /// Seed of the dither generator.
    pub seed: u64,
}

impl Dither {
    /// The default seed.
    pub const DEFAULT_SEED: u64 = 0x5041_5254_4954_4121;

    /// No dither: plain rounding (to nearest, halves away from zero).
    pub const OFF: Self = Self { enabled: false, seed: Self::DEFAULT_SEED };

    /// TPDF dither with the given seed.
    pub fn seeded(seed: u64) -> Self {
        Self { enabled: true, seed }
    }
}

impl Default for Dither {
    fn default() -> Self {
        Self { enabled: true, seed: Self::DEFAULT_SEED }
    }
}

/// Turns f32 samples in [-1, 1) into signed integers of `bits` bits: round(x * 2^(bits-1) + d), clamped to
/// [-2^(bits-1), 2^(bits-1) - 1], with d the TPDF dither when enabled.
#[derive(Debug, Clone)]
pub(crate) struct Quantizer {
    scale: f64,
    min: f64,
    max: f64,
    noise: Option<Noise>,
}

impl Quantizer {
    pub(crate) fn new(bits: u32, dither: Dither) -> Self {
        let scale = f64::from(1u32 << (bits - 1));
        Self { scale, min: -scale, max: scale - 1.0, noise: dither.enabled.then(|| Noise::new(dither.seed)) }
    }

    /// One TPDF dither value in LSB: the sum of two independent uniforms on [-0.5, 0.5).
    fn tpdf(noise: &mut Noise) -> f64 {
        (noise.unit() - 0.5) + (noise.unit() - 0.5)
    }

    pub(crate) fn quantize(&mut self, x: f32) -> i32 {
        let mut v = f64::from(x) * self.scale;
        if let Some(noise) = &mut self.noise {
            v += Self::tpdf(noise);
        }
        v.round().clamp(self.min, self.max) as i32
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn moments(v: &[f64]) -> (f64, f64) {
        let mean = v.iter().sum::<f64>() / v.len() as f64;
        let var = v.iter().map(|x| (x - mean) * (x - mean)).sum::<f64>() / v.len() as f64;
        (mean, var)
    }

    #[test]
    fn tpdf_is_triangular_on_plus_minus_one_lsb() {
        let mut noise = Noise::new(3);
        let d: Vec<f64> = (0..200_000).map(|_| Quantizer::tpdf(&mut noise)).collect();
        assert!(d.iter().all(|x| x.abs() < 1.0));
        let (mean, var) = moments(&d);
        // Two uniforms of variance 1/12 each (arithmetic): 1/6. Standard error of the variance ~ 4e-4 here.
        assert!(mean.abs() < 0.005, "mean {mean}");
        assert!((var - 1.0 / 6.0).abs() < 0.003, "variance {var}");
        // Triangular density: P(|d| < 0.5) = 3/4 (a uniform on (-1, 1) would give 1/2).
        let inner = d.iter().filter(|x| x.abs() < 0.5).count() as f64 / d.len() as f64;
        assert!((inner - 0.75).abs() < 0.01, "P(|d| < 0.5) = {inner}");
    }

    #[test]
    fn rounding_without_dither_is_exact_on_the_grid_and_clamps() {
        let mut q = Quantizer::new(16, Dither::OFF);
        assert_eq!(q.quantize(0.0), 0);
        assert_eq!(q.quantize(1.0 / 32768.0), 1);
        assert_eq!(q.quantize(-1.0), -32768);
        assert_eq!(q.quantize(1.0), 32767);
        assert_eq!(q.quantize(7.5), 32767);
        assert_eq!(q.quantize(-7.5), -32768);
        assert_eq!(q.quantize(0.4 / 32768.0), 0);
        assert_eq!(q.quantize(0.6 / 32768.0), 1);
        let mut q = Quantizer::new(24, Dither::OFF);
        assert_eq!(q.quantize(1.0), 8_388_607);
        assert_eq!(q.quantize(-3.0 / 8_388_608.0), -3);
    }

    #[test]
    fn total_error_statistics_do_not_follow_the_signal() {
        // With TPDF the error's variance is 1/4 LSB^2 whatever the input; plain rounding gives 0 on the grid
        // and 1/4 half-way between, so this would fail for no dither or for a single uniform (RPDF).
        for offset in [0.0f64, 0.25, 0.5] {
            let mut q = Quantizer::new(16, Dither::seeded(11));
            let x = ((100.0 + offset) / 32768.0) as f32;
            let e: Vec<f64> = (0..100_000).map(|_| f64::from(q.quantize(x)) - (100.0 + offset)).collect();
            assert!(e.iter().all(|v| v.abs() <= 1.5), "error within 1.5 LSB (1 dither + 0.5 rounding)");
            let (mean, var) = moments(&e);
            assert!(mean.abs() < 0.01, "offset {offset}: mean {mean}");
            assert!((var - 0.25).abs() < 0.01, "offset {offset}: variance {var}");
        }
    }

    #[test]
    fn same_seed_same_output() {
        let mut a = Quantizer::new(16, Dither::seeded(5));
        let mut b = Quantizer::new(16, Dither::seeded(5));
        let mut c = Quantizer::new(16, Dither::seeded(6));
        let x: Vec<i32> = (0..100).map(|i| a.quantize(i as f32 * 1e-4)).collect();
        let y: Vec<i32> = (0..100).map(|i| b.quantize(i as f32 * 1e-4)).collect();
        let z: Vec<i32> = (0..100).map(|i| c.quantize(i as f32 * 1e-4)).collect();
        assert_eq!(x, y);
        assert_ne!(x, z);
    }
}
