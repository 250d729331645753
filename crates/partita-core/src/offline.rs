//! Offline rendering: the full convolution of whole signals, optionally split across threads.
//!
//! [`render`] returns `x * h` exactly as the direct form defines it (`y[n] = sum_k h[k] x[n - k]`,
//! `frames + ir_frames - 1` samples per output, the engine's latency removed), computed by the same
//! [`Engine`] that runs live. With more than one thread the input is cut into consecutive time segments;
//! each thread runs its own engine over its segment followed by `ir_frames - 1` (plus latency) frames of
//! silence, and the segment results are summed at their offsets. Convolution is linear and
//! time-invariant, so this overlap-add of segment convolutions equals the convolution of the whole
//! signal up to f32 rounding (Oppenheim & Schafer, *Discrete-Time Signal Processing*, overlap-add).
//!
//! [`offline_plan`] gives the plan to use when latency does not matter (the policy lives with the other
//! planning code, in `plan/offline.rs`, and is re-exported here).
//!
//! ```
//! use partita_core::{naive, offline, ImpulseResponse, Routing, Shape};
//!
//! let taps = partita_core::synth::decaying_noise(3000, 1200.0, 3);
//! let ir = ImpulseResponse::new(vec![taps.clone()], 48_000)?;
//! let plan = offline::offline_plan(ir.frames(), Shape::MONO)?;
//! let x = partita_core::synth::Noise::new(9).vec(20_000);
//! let y = offline::render(&plan, &ir, Routing::Mono, &[x.clone()], 2, None)?;
//! let want = naive::convolve(&x, &taps);
//! assert_eq!(y[0].len(), want.len());
//! assert!((y[0][12_345] as f64 - want[12_345]).abs() < 1e-3);
//! # Ok::<(), Box<dyn std::error::Error>>(())
//! ```

use std::fmt;
use std::ops::Range;
use std::sync::atomic::{AtomicU64, Ordering};
use std::sync::Mutex;

use crate::engine::{Engine, EngineOptions, Mix};
use crate::error::{EngineError, PlanError};
use crate::ir::ImpulseResponse;
use crate::plan::{Plan, Schedule};
use crate::routing::Routing;

pub use crate::plan::offline::{
    offline_block_frames, offline_plan, offline_plan_with_block, offline_planner, OFFLINE_MAX_BLOCK_FRAMES,
    OFFLINE_MAX_LEVEL_FRAMES, OFFLINE_MIN_BLOCK_FRAMES,
};

/// Frames per host call in [`render`] (or the plan's block, when larger): big calls keep the per-call
/// overhead out of the profile.
pub const RENDER_HOST_FRAMES: usize = 8192;

/// Segments shorter than this are not worth a thread of their own: each extra segment costs a full engine
/// build (the IR spectra) and `ir_frames` of silent tail.
pub const MIN_SEGMENT_FRAMES: usize = 1 << 14;

/// Why [`render`] could not run.
#[derive(Debug, Clone, PartialEq)]
#[non_exhaustive]
pub enum RenderError {
    /// The plan, IR or routing cannot make an engine.
    Engine(EngineError),
    /// The routing needs a different number of input signals.
    InputCount {
        /// Inputs the routing needs.
        expected: usize,
        /// Inputs given.
        got: usize,
    },
    /// The input signals differ in length.
    UnequalInputs {
        /// Index of the first input whose length differs from input 0.
        input: usize,
        /// Its length in frames.
        frames: usize,
        /// Length of input 0.
        expected: usize,
    },
}

impl fmt::Display for RenderError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Engine(e) => write!(f, "cannot build the render engine: {e}"),
            Self::InputCount { expected, got } => {
                write!(f, "routing needs {expected} input signal(s), got {got}")
            }
            Self::UnequalInputs { input, frames, expected } => {
                write!(f, "input {input} has {frames} frames but input 0 has {expected}; pad the inputs to one length")
            }
        }
    }
}

impl std::error::Error for RenderError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            Self::Engine(e) => Some(e),
            _ => None,
        }
    }
}

impl From<EngineError> for RenderError {
    fn from(e: EngineError) -> Self {
        Self::Engine(e)
    }
}

impl From<PlanError> for RenderError {
    fn from(e: PlanError) -> Self {
        Self::Engine(EngineError::Plan(e))
    }
}

/// Renders the full convolution of `inputs` through `ir` with `routing`. Allocates: the returned outputs,
/// one engine per thread (each holds the IR's spectra) and, per segment, an `ir_frames - 1` tail buffer
/// and two host-call buffers. Segments write the rest of their result straight into the outputs.
///
/// Returns one signal per routing output, each `frames + ir.frames() - 1` long (empty when the inputs
/// are empty), where output frame `n` is `sum_k h[k] x[n - k]` summed over the output's paths: the
/// engine's latency is removed. Every level runs synchronously whatever the plan's schedule (offline
/// there is no deadline; a level valid for a later schedule is valid for `sync`, whose offset rule is
/// weaker). Non-finite input samples count as zero, as in [`Engine::process`].
///
/// `threads` is the number of time segments rendered in parallel (0 means
/// [`std::thread::available_parallelism`]); it is lowered so that no segment is shorter than
/// [`MIN_SEGMENT_FRAMES`]. `threads == 1` runs one engine on the calling thread. Each extra segment costs
/// an engine build and `ir.frames()` frames of silent tail, so the speed-up is about
/// `(frames + ir) / (frames / threads + ir)`.
///
/// `progress`, when given, is called as `progress(done, total)` from the rendering threads (one call at a
/// time): first with `done = 0`, then with strictly increasing `done`, the last call with
/// `done == total`. Both count frames of engine work over all segments (input plus silent tail).
///
/// # Errors
/// [`RenderError::Engine`] when the plan is invalid, does not cover the IR, or the routing does not fit
/// the IR; [`RenderError::InputCount`] or [`RenderError::UnequalInputs`] when the inputs do not fit the
/// routing.
pub fn render<X: AsRef<[f32]> + Sync>(
    plan: &Plan,
    ir: &ImpulseResponse,
    routing: Routing,
    inputs: &[X],
    threads: usize,
    progress: Option<&(dyn Fn(u64, u64) + Sync)>,
) -> Result<Vec<Vec<f32>>, RenderError> {
    render_with_mix(plan, ir, routing, &Mix::default(), inputs, threads, progress)
}

/// [`render`] through the engine's own output mix ([`Mix`]: wet, dry aligned with the convolution,
/// output gain, pre-delay, bypass), exactly as a live engine started at `mix` would play it with its
/// latency removed. Allocates as [`render`] does.
///
/// Each output is `frames + ir.frames() + mix.predelay_frames - 1` long: the pre-delay moves the whole
/// wet signal later, so the tail grows by as much. With the default mix this is [`render`], bit for bit.
///
/// ```
/// use partita_core::{naive, offline, ImpulseResponse, Mix, Routing, Shape};
///
/// let taps = vec![1.0, 0.5, 0.25];
/// let ir = ImpulseResponse::new(vec![taps.clone()], 48_000)?;
/// let plan = offline::offline_plan(ir.frames(), Shape::MONO)?;
/// let x = vec![1.0f32, 0.0, 0.0, 0.0];
/// let mix = Mix { wet: 0.5, dry: 1.0, predelay_frames: 2, ..Mix::default() };
/// let y = offline::render_with_mix(&plan, &ir, Routing::Mono, &mix, &[x], 1, None)?;
/// // The dry impulse at frame 0, the halved IR two frames later; 4 + 3 + 2 - 1 frames in all.
/// let want = [1.0, 0.0, 0.5, 0.25, 0.125, 0.0, 0.0, 0.0];
/// assert_eq!(y[0].len(), want.len());
/// assert!(y[0].iter().zip(want).all(|(a, b)| (a - b).abs() < 1e-6));
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
///
/// # Errors
/// As [`render`], and [`RenderError::Engine`] with [`EngineError::Mix`] when the mix does not fit the
/// routing (a dry signal or bypass on a shape without a dry path, a non-finite gain).
pub fn render_with_mix<X: AsRef<[f32]> + Sync>(
    plan: &Plan,
    ir: &ImpulseResponse,
    routing: Routing,
    mix: &Mix,
    inputs: &[X],
    threads: usize,
    progress: Option<&(dyn Fn(u64, u64) + Sync)>,
) -> Result<Vec<Vec<f32>>, RenderError> {
    let routes = routing.resolve(ir.channels()).map_err(EngineError::from)?;
    if inputs.len() != routes.inputs {
        return Err(RenderError::InputCount { expected: routes.inputs, got: inputs.len() });
    }
    let frames = inputs.first().map_or(0, |x| x.as_ref().len());
    if let Some((input, x)) = inputs.iter().enumerate().find(|(_, x)| x.as_ref().len() != frames) {
        return Err(RenderError::UnequalInputs { input, frames: x.as_ref().len(), expected: frames });
    }
    let mut plan = plan.clone();
    for level in &mut plan.levels {
        level.schedule = Schedule::Sync;
    }
    let host_frames = RENDER_HOST_FRAMES.max(plan.block_frames);
    // Built first, on the calling thread, so every set-up error is reported before any work starts.
    let options =
        EngineOptions { max_predelay_frames: mix.predelay_frames, mix: *mix, ..EngineOptions::new(host_frames) };
    let first = Engine::with_options(&plan, ir, routing, options)?;
    // The response of the whole system (pre-delay, then the IR) is what each segment must let ring out.
    let ir_frames = ir.frames() + mix.predelay_frames;
    let latency = first.latency_frames();
    let outputs = first.outputs();

    let threads = if threads == 0 { std::thread::available_parallelism().map_or(1, |n| n.get()) } else { threads };
    let segments = threads.min(frames.div_ceil(MIN_SEGMENT_FRAMES)).max(1);
    let seg_len = frames.div_ceil(segments).max(1);
    let ranges: Vec<Range<usize>> =
        (0..segments).map(|s| (s * seg_len).min(frames)..((s + 1) * seg_len).min(frames)).collect();
    let work = |r: &Range<usize>| (r.len() + ir_frames - 1 + latency) as u64;
    let reporter = Reporter::new(progress, if frames == 0 { 0 } else { ranges.iter().map(work).sum() });
    reporter.report(0);
    if frames == 0 {
        return Ok(vec![Vec::new(); outputs]);
    }

    // Each segment writes the part of its convolution that lies before the next segment's start straight
    // into the output (those regions are disjoint); the rest, its tail of `ir_frames - 1` frames, comes
    // back separately and is added once every segment is done.
    let out_len = frames + ir_frames - 1;
    let mut out = vec![vec![0.0f32; out_len]; outputs];
    let mut regions: Vec<Vec<&mut [f32]>> = (0..segments).map(|_| Vec::with_capacity(outputs)).collect();
    for y in out.iter_mut() {
        let mut rest: &mut [f32] = y;
        for (s, r) in ranges.iter().enumerate() {
            let own = if s + 1 == segments { rest.len() } else { r.len() };
            let (head, tail) = rest.split_at_mut(own);
            regions[s].push(head);
            rest = tail;
        }
    }
    let segment = |engine: &mut Engine, r: Range<usize>, own: &mut [&mut [f32]]| {
        render_segment(engine, inputs, r, ir_frames, own, &reporter)
    };
    let mut regions = regions.into_iter();
    let mut own0 = regions.next().expect("at least one segment");
    let tails: Vec<(usize, Vec<Vec<f32>>)> = if segments == 1 {
        let mut engine = first;
        segment(&mut engine, ranges[0].clone(), &mut own0);
        Vec::new()
    } else {
        std::thread::scope(|scope| -> Result<_, RenderError> {
            let handles: Vec<_> = ranges[1..]
                .iter()
                .zip(regions)
                .map(|(r, mut own)| {
                    let (r, plan, segment) = (r.clone(), &plan, &segment);
                    scope.spawn(move || -> Result<(usize, Vec<Vec<f32>>), RenderError> {
                        let mut engine = Engine::with_options(plan, ir, routing, options)?;
                        let tail = segment(&mut engine, r.clone(), &mut own);
                        Ok((r.end, tail))
                    })
                })
                .collect();
            let mut engine = first;
            let mut all = vec![(ranges[0].end, segment(&mut engine, ranges[0].clone(), &mut own0))];
            for h in handles {
                match h.join() {
                    Ok(r) => all.push(r?),
                    Err(panic) => std::panic::resume_unwind(panic),
                }
            }
            Ok(all)
        })?
    };
    for (start, tail) in tails {
        for (y, t) in out.iter_mut().zip(tail) {
            for (a, b) in y[start..start + t.len()].iter_mut().zip(t) {
                *a += b;
            }
        }
    }
    Ok(out)
}

/// Runs `engine` (fresh) over `inputs[range]` followed by `ir_frames - 1 + latency` frames of silence.
/// The segment's convolution, `range.len() + ir_frames - 1` frames per output, goes to `own` (one slice
/// per output, all of one length) as far as it reaches; the frames past it are returned.
fn render_segment<X: AsRef<[f32]>>(
    engine: &mut Engine,
    inputs: &[X],
    range: Range<usize>,
    ir_frames: usize,
    own: &mut [&mut [f32]],
    reporter: &Reporter<'_>,
) -> Vec<Vec<f32>> {
    let latency = engine.latency_frames();
    let host = engine.max_host_frames();
    let seg_frames = range.len();
    let conv_frames = seg_frames + ir_frames - 1;
    let own_frames = own.first().map_or(0, |o| o.len()).min(conv_frames);
    let total = conv_frames + latency;
    let mut tail = vec![vec![0.0f32; conv_frames - own_frames]; engine.outputs()];
    let mut in_buf = vec![vec![0.0f32; host]; engine.inputs()];
    let mut out_buf = vec![vec![0.0f32; host]; engine.outputs()];
    let mut at = 0;
    while at < total {
        let n = host.min(total - at);
        // Input frames [at, at + n) of the segment: the caller's signal itself while it lasts, then a
        // buffer with its end and silence.
        let ins: Vec<&[f32]> = if at + n <= seg_frames {
            inputs.iter().map(|x| &x.as_ref()[range.start + at..range.start + at + n]).collect()
        } else {
            for (buf, x) in in_buf.iter_mut().zip(inputs) {
                let have = seg_frames.saturating_sub(at).min(n);
                let from = range.start + at.min(seg_frames);
                buf[..have].copy_from_slice(&x.as_ref()[from..from + have]);
                buf[have..n].fill(0.0);
            }
            in_buf.iter().map(|b| &b[..n]).collect()
        };
        // Engine output frame m is convolution frame m - latency. A call whose output lies wholly in
        // `own` writes there directly; others go through a buffer.
        if at >= latency && at - latency + n <= own_frames {
            let lo = at - latency;
            let mut outs: Vec<&mut [f32]> = own.iter_mut().map(|o| &mut o[lo..lo + n]).collect();
            engine.process(&ins, &mut outs).expect("buffer counts and sizes match the engine by construction");
        } else {
            let mut outs: Vec<&mut [f32]> = out_buf.iter_mut().map(|b| &mut b[..n]).collect();
            engine.process(&ins, &mut outs).expect("buffer counts and sizes match the engine by construction");
            let skip = latency.saturating_sub(at).min(n);
            if skip < n {
                let (lo, hi) = (at + skip - latency, at + n - latency);
                // [lo, split) lands in `own`, [split, hi) in the tail (then split >= own_frames).
                let split = own_frames.clamp(lo, hi);
                for ((o, t), b) in own.iter_mut().zip(tail.iter_mut()).zip(&out_buf) {
                    if split > lo {
                        o[lo..split].copy_from_slice(&b[skip..skip + split - lo]);
                    }
                    if hi > split {
                        t[split - own_frames..hi - own_frames].copy_from_slice(&b[skip + split - lo..n]);
                    }
                }
            }
        }
        at += n;
        reporter.add(n as u64);
    }
    tail
}

/// Serializes progress reports so the callback sees strictly increasing counts from any thread.
struct Reporter<'a> {
    callback: Option<&'a (dyn Fn(u64, u64) + Sync)>,
    total: u64,
    done: AtomicU64,
    last: Mutex<Option<u64>>,
}

impl<'a> Reporter<'a> {
    fn new(callback: Option<&'a (dyn Fn(u64, u64) + Sync)>, total: u64) -> Self {
        Self { callback, total, done: AtomicU64::new(0), last: Mutex::new(None) }
    }

    fn add(&self, frames: u64) {
        if self.callback.is_none() {
            return;
        }
        let done = self.done.fetch_add(frames, Ordering::AcqRel) + frames;
        self.report(done);
    }

    /// Reports the current count (at least `floor`) if it is new. Whoever adds the last frames reports
    /// after its add, and reads the count under the lock, so the final report is `total`.
    fn report(&self, floor: u64) {
        let Some(callback) = self.callback else { return };
        let mut last = self.last.lock().unwrap_or_else(|e| e.into_inner());
        let done = self.done.load(Ordering::Acquire).max(floor);
        if last.is_none_or(|l| done > l) {
            *last = Some(done);
            callback(done, self.total);
        }
    }
}
