//! Cost models for partition planning: a flop model, and per-operation costs measured on the running
//! machine ([`MachineCosts::calibrate`]). Core does no file I/O: a caller that wants to cache the
//! calibration stores the [`MachineCosts`] (serde) itself.

use std::time::Instant;

use realfft::RealFftPlanner;
use serde::{Deserialize, Serialize};

use crate::kernel::Kernel;
use crate::plan::Plan;

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

    /// Predicted load in percent of one core at `sample_rate_hz`.
    pub fn load_pct(&self, plan: &Plan, shape: Shape, sample_rate_hz: f64) -> f64 {
        let per_frame = self.plan_cost(plan, shape);
        let seconds_per_frame = match self {
            Self::Flops { flops_per_second } => per_frame / flops_per_second,
            Self::Measured(_) => per_frame,
        };
        100.0 * seconds_per_frame * sample_rate_hz
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
            let t0 = Instant::now();
            for _ in 0..reps {
                run(&mut time, &mut spec, &mut scratch);
            }
            fft_pair_seconds.push((n, t0.elapsed().as_secs_f64() / reps as f64));
        }
        let mac_seconds_per_bin = time_mac(kernel, 1025, 64, 20); // about 1 MB of spectra
        let mac_streamed_seconds_per_bin = time_mac(kernel, 16_385, 256, 1); // about 64 MB, beyond any cache
                                                                             // Head: a 256-tap dot product per sample.
        let taps = 256;
        let frames = 4096;
        let sig: Vec<f32> = (0..frames + taps).map(|i| (i % 13) as f32 * 1e-2).collect();
        let hh: Vec<f32> = (0..taps).map(|i| (i % 5) as f32 * 1e-2).collect();
        let t0 = Instant::now();
        let mut sink = 0.0f32;
        for j in 0..frames {
            sink += crate::head::dot(&hh, &sig[j..j + taps]);
        }
        std::hint::black_box(sink);
        let head_seconds_per_tap = t0.elapsed().as_secs_f64() / (frames * taps) as f64;
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
    let t0 = Instant::now();
    for _ in 0..reps {
        pass();
    }
    let s = t0.elapsed().as_secs_f64() / (reps * parts * bins) as f64;
    std::hint::black_box(&acc_re);
    s
}
