//! Criterion micro-benchmarks of the hot loops: the complex multiply-accumulate kernels, the real FFT pair
//! and one FFT level pass. `cargo bench --bench kernels`; under `cargo test --benches` criterion runs each
//! bench once.
//!
//! - `mac/<kernel>/<bins>`: one `Kernel::mac` call over split re/im slices of 65, 513, 4097 and 32769 bins
//!   (the bins of levels of 64, 512, 4096 and 32768 frames), cache-resident.
//! - `mac-streamed/<kernel>/...`: one accumulation over 256 partitions of 16385 bins (64 MiB of spectra,
//!   beyond any cache), once partition by partition over whole spectra (`contiguous`) and once in the
//!   engine's order (256-bin tiles, all partitions per tile: `tiled-256`).
//! - `fft-pair/<frames>`: a bare realfft forward + inverse pair of twice the block (what one level pays
//!   per block; `MachineCosts::calibrate` times the same pair for the cost model), with preallocated
//!   scratch, plus one copy of the window of twice the block in (the forward transform overwrites its input).
//! - `level-pass/<frames>`: an engine with one uniform level of one partition processing one block: the
//!   same FFT pair, a one-partition MAC and the ring copies, through the public API. The difference to
//!   `fft-pair` is the MAC and the engine's work around the transforms.

use std::hint::black_box;
use std::time::Duration;

use criterion::{criterion_group, criterion_main, BenchmarkId, Criterion, Throughput};
use partita_core::synth::Noise;
use partita_core::{Engine, ImpulseResponse, Kernel, Plan, Routing};
use realfft::num_complex::Complex32;
use realfft::RealFftPlanner;

struct Spectra {
    acc_re: Vec<f32>,
    acc_im: Vec<f32>,
    x_re: Vec<f32>,
    x_im: Vec<f32>,
    h_re: Vec<f32>,
    h_im: Vec<f32>,
}

impl Spectra {
    fn new(len: usize, seed: u64) -> Self {
        let mut n = Noise::new(seed);
        let mut v = |scale: f32| -> Vec<f32> { (0..len).map(|_| scale * n.sample()).collect() };
        Self {
            acc_re: vec![0.0; len],
            acc_im: vec![0.0; len],
            x_re: v(1.0),
            x_im: v(1.0),
            h_re: v(1e-3),
            h_im: v(1e-3),
        }
    }
}

fn mac(c: &mut Criterion) {
    let mut group = c.benchmark_group("mac");
    for kernel in Kernel::available() {
        for bins in [65usize, 513, 4097, 32769] {
            let mut s = Spectra::new(bins, bins as u64);
            group.throughput(Throughput::Elements(bins as u64));
            group.bench_with_input(BenchmarkId::new(kernel.name(), bins), &bins, |b, _| {
                b.iter(|| {
                    kernel.mac(
                        black_box(&mut s.acc_re),
                        black_box(&mut s.acc_im),
                        black_box(&s.x_re),
                        black_box(&s.x_im),
                        black_box(&s.h_re),
                        black_box(&s.h_im),
                    );
                })
            });
            // Keep the accumulators bounded: they grow by x * h per call.
            s.acc_re.fill(0.0);
            s.acc_im.fill(0.0);
        }
    }
    group.finish();
}

fn mac_streamed(c: &mut Criterion) {
    const BINS: usize = 16_385;
    const PARTS: usize = 256;
    const TILE: usize = 256;
    let mut group = c.benchmark_group("mac-streamed");
    group.sample_size(10);
    group.throughput(Throughput::Elements((BINS * PARTS) as u64));
    let s = Spectra::new(BINS * PARTS, 7);
    for kernel in Kernel::available() {
        let mut acc_re = vec![0.0f32; BINS];
        let mut acc_im = vec![0.0f32; BINS];
        group.bench_function(BenchmarkId::new(kernel.name(), "contiguous"), |b| {
            b.iter(|| {
                for p in 0..PARTS {
                    let r = p * BINS..(p + 1) * BINS;
                    kernel.mac(
                        &mut acc_re,
                        &mut acc_im,
                        &s.x_re[r.clone()],
                        &s.x_im[r.clone()],
                        &s.h_re[r.clone()],
                        &s.h_im[r],
                    );
                }
                black_box(&acc_re);
            })
        });
        group.bench_function(BenchmarkId::new(kernel.name(), "tiled-256"), |b| {
            b.iter(|| {
                let mut lo = 0;
                while lo < BINS {
                    let hi = (lo + TILE).min(BINS);
                    for p in 0..PARTS {
                        let r = p * BINS + lo..p * BINS + hi;
                        kernel.mac(
                            &mut acc_re[lo..hi],
                            &mut acc_im[lo..hi],
                            &s.x_re[r.clone()],
                            &s.x_im[r.clone()],
                            &s.h_re[r.clone()],
                            &s.h_im[r],
                        );
                    }
                    lo = hi;
                }
                black_box(&acc_re);
            })
        });
    }
    group.finish();
}

fn fft_pair(c: &mut Criterion) {
    let mut group = c.benchmark_group("fft-pair");
    let mut planner = RealFftPlanner::<f32>::new();
    for frames in [64usize, 512, 4096, 32768] {
        let fwd = planner.plan_fft_forward(2 * frames);
        let inv = planner.plan_fft_inverse(2 * frames);
        let window = Noise::new(5).vec(2 * frames);
        let mut time = fwd.make_input_vec();
        let mut spec = fwd.make_output_vec();
        let mut scratch = vec![Complex32::default(); fwd.get_scratch_len().max(inv.get_scratch_len())];
        group.throughput(Throughput::Elements(frames as u64));
        group.bench_with_input(BenchmarkId::from_parameter(frames), &frames, |b, _| {
            b.iter(|| {
                time.copy_from_slice(black_box(&window));
                fwd.process_with_scratch(&mut time, &mut spec, &mut scratch).expect("forward FFT lengths");
                // The inverse rejects complex DC and Nyquist bins; the engine zeroes them before it too.
                spec[0].im = 0.0;
                let last = spec.len() - 1;
                spec[last].im = 0.0;
                inv.process_with_scratch(&mut spec, &mut time, &mut scratch).expect("inverse FFT lengths");
                black_box(&time);
            })
        });
    }
    group.finish();
}

fn level_pass(c: &mut Criterion) {
    let mut group = c.benchmark_group("level-pass");
    for frames in [64usize, 512, 4096, 32768] {
        let ir = ImpulseResponse::new(vec![Noise::new(3).vec(frames)], 48_000).expect("finite taps");
        let plan = Plan::uniform(frames, frames).expect("valid uniform plan");
        let mut engine = Engine::new(&plan, &ir, Routing::Mono, frames).expect("engine");
        let x = Noise::new(4).vec(frames);
        let mut y = vec![0.0f32; frames];
        group.throughput(Throughput::Elements(frames as u64));
        group.bench_with_input(BenchmarkId::from_parameter(frames), &frames, |b, _| {
            b.iter(|| {
                engine.process(&[black_box(&x[..])], &mut [&mut y[..]]).expect("process");
                black_box(&y);
            })
        });
    }
    group.finish();
}

criterion_group! {
    name = kernels;
    config = Criterion::default().warm_up_time(Duration::from_millis(500)).measurement_time(Duration::from_secs(2));
    targets = mac, mac_streamed, fft_pair, level_pass
}
criterion_main!(kernels);
