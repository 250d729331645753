//! Seeded synthetic signals for tests, benches and demos: reproducible noise and decaying-noise IRs.

/// A small, fast, seeded generator (SplitMix64, Steele, Lea & Flood, OOPSLA 2014). Not cryptographic.
#[derive(Debug, Clone)]
pub struct Noise {
    state: u64,
}

impl Noise {
    /// A generator from a seed; the same seed gives the same sequence on every platform.
    pub fn new(seed: u64) -> Self {
        Self { state: seed ^ 0x5DEE_CE66_D1CE_4E5B }
    }

    /// Next 64 random bits.
    pub fn next_u64(&mut self) -> u64 {
        self.state = self.state.wrapping_add(0x9E37_79B9_7F4A_7C15);
        let mut z = self.state;
        z = (z ^ (z >> 30)).wrapping_mul(0xBF58_476D_1CE4_E5B9);
        z = (z ^ (z >> 27)).wrapping_mul(0x94D0_49BB_1331_11EB);
        z ^ (z >> 31)
    }

    /// Uniform in [0, 1).
    pub fn unit(&mut self) -> f64 {
        (self.next_u64() >> 11) as f64 / (1u64 << 53) as f64
    }

    /// Uniform in [-1, 1).
    pub fn sample(&mut self) -> f32 {
        (2.0 * self.unit() - 1.0) as f32
    }

    /// Uniform integer in `lo..=hi`.
    pub fn range(&mut self, lo: usize, hi: usize) -> usize {
        lo + (self.next_u64() % (hi - lo + 1) as u64) as usize
    }

    /// `len` samples uniform in [-1, 1). Allocates.
    pub fn vec(&mut self, len: usize) -> Vec<f32> {
        (0..len).map(|_| self.sample()).collect()
    }
}

/// A noise burst with an exponential amplitude envelope that falls 60 dB over `rt60_frames`:
/// e^(-delta n) with delta = 3 ln(10) / rt60 (so T60 = 6.9078 / delta; Sabine's definition of
/// reverberation time). The first tap is 1. Allocates.
pub fn decaying_noise(frames: usize, rt60_frames: f64, seed: u64) -> Vec<f32> {
    let mut noise = Noise::new(seed);
    let delta = 3.0 * std::f64::consts::LN_10 / rt60_frames.max(1.0);
    (0..frames)
        .map(|n| if n == 0 { 1.0 } else { (f64::from(noise.sample()) * (-delta * n as f64).exp()) as f32 })
        .collect()
}
