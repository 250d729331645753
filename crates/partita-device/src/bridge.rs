//! The per-callback work of a live stream, as plain structs testable without a device.
//!
//! cpal has no duplex stream, so a live stream is two: the capture side ([`CaptureSide`], run by the
//! input stream's callback) and the playback side ([`PlaybackSide`], the output stream's), joined by a
//! `ringbuf` single-producer single-consumer queue of interleaved f32 frames. The engine (whose own
//! output mix the caller drives through its [`Control`](partita_core::Control) handle) and the
//! [safety stage](crate::safety) run on one side ([`EngineSide`]); the ring carries engine
//! inputs (engine on the playback side) or finished output frames (engine on the capture side).
//!
//! Per callback, with no allocation, lock, I/O or wait: convert the device format to f32, map device
//! channels to engine channels, replace non-finite input by 0 (counted), push or pop whole frames,
//! prime the ring, correct drift ([`crate::drift`]: resample through the rate controller and the
//! fractional reader, or slip and repeat frames), run the engine in chunks of at most its
//! `max_host_frames`, apply the safety stage, meter, convert back, and time the callback (wall
//! clock against its period for the overrun count, thread CPU clock for the load).

use std::sync::atomic::Ordering::Relaxed;
use std::sync::Arc;
use std::time::Instant;

use partita_core::{Engine, Monitor};
use ringbuf::traits::{Consumer, Observer, Producer, Split};
use ringbuf::{HeapCons, HeapProd, HeapRb};

use crate::channels::ChannelMap;
use crate::convert::{with_samples, DeviceSample};
use crate::drift::{Correction, DriftMode, DriftOptions, DriftTracker, RateController, RateReader, HALF_TAPS};
use crate::error::DeviceError;
use crate::safety::{SafetyOptions, SafetyStage};
use crate::stats::{BridgeCells, Fault, Peaks, Stats};

/// The most engine inputs or outputs a bridge handles.
pub const MAX_ENGINE_CHANNELS: usize = 32;

/// Which callback runs the engine.
///
/// Measured on a JACK dummy server (both callbacks then run one after the other in the server's cycle)
/// the two are equivalent; with separate devices the capture side is the better place: the output
/// callback then only copies, so jitter in the engine's time is absorbed by the ring instead of
/// delaying the device's output buffer. See the crate docs for the figures.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum EngineSide {
    /// In the input stream's callback; the ring carries finished output frames (default).
    #[default]
    Capture,
    /// In the output stream's callback; the ring carries engine input frames.
    Playback,
}

/// How a [`Bridge`] is put together.
#[derive(Debug, Clone)]
pub struct BridgeOptions {
    /// The stream's sample rate (the engine's IR must be at this rate).
    pub sample_rate_hz: u32,
    /// Channels of the input stream (interleaved in each capture callback).
    pub device_inputs: usize,
    /// Channels of the output stream.
    pub device_outputs: usize,
    /// Device channels to engine channels; [`ChannelMap::default_for`] when `None`.
    pub map: Option<ChannelMap>,
    /// Where the engine runs.
    pub side: EngineSide,
    /// Frames kept in the ring beyond the larger of the two callback sizes before playback starts: 0
    /// only when the input callback always runs just before the output callback on one clock; a period
    /// when their order may change (JACK); a period plus the drift controller's slack for separate
    /// devices.
    pub margin_frames: usize,
    /// Ring capacity in frames (at least 4 x (largest expected callback + margin)).
    pub ring_frames: usize,
    /// The safety stage.
    pub safety: SafetyOptions,
    /// Drift correction settings.
    pub drift: DriftOptions,
}

impl BridgeOptions {
    /// Defaults for a stream at `sample_rate_hz` with the given device channel counts: engine on the
    /// capture side, no margin, a ring of 16384 frames, default safety. The mix is the engine's own
    /// ([`EngineOptions::mix`](partita_core::EngineOptions::mix) and [`Control`](partita_core::Control) commands).
    pub fn new(sample_rate_hz: u32, device_inputs: usize, device_outputs: usize) -> Self {
        Self {
            sample_rate_hz,
            device_inputs,
            device_outputs,
            map: None,
            side: EngineSide::default(),
            margin_frames: 0,
            ring_frames: 16_384,
            safety: SafetyOptions::default(),
            drift: DriftOptions::default(),
        }
    }
}

/// The time of a callback: now on the bridge's clock, and the device delay from cpal's timestamps
/// (capture side: callback minus capture instant; playback side: playback minus callback instant).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct CallbackTime {
    /// Nanoseconds on a clock both sides share: [`BridgeHandle::now_ns`], or the host's when input
    /// and output run on one clock (JACK).
    pub now_ns: u64,
    /// Device-side delay, ns.
    pub device_delay_ns: u64,
}

/// Engine and safety stage: the processing one side runs, per chunk.
#[derive(Debug)]
pub(crate) struct Stage {
    pub(crate) engine: Engine,
    pub(crate) outs: Vec<Vec<f32>>,
    safety: SafetyStage,
}

impl Stage {
    pub(crate) fn new(engine: Engine, chunk: usize, options: &BridgeOptions) -> Self {
        Self {
            outs: vec![vec![0.0; chunk]; engine.outputs()],
            safety: SafetyStage::new(&options.safety, options.sample_rate_hz),
            engine,
        }
    }

    /// Runs `len` frames of `ins` (planar, one per engine input) into `self.outs`.
    pub(crate) fn run(&mut self, ins: &[Vec<f32>], len: usize, shared: &BridgeCells) {
        let m = ins.len();
        let n = self.outs.len();
        if shared.unmute.swap(false, Relaxed) {
            // The spread reset: a bounded slice of the engine's state per block, never all of it in this
            // callback (a long IR's state is megabytes).
            self.engine.begin_reset();
            self.safety.unmute();
            shared.mute_reason.store(0, Relaxed);
        }
        {
            let mut in_refs: [&[f32]; MAX_ENGINE_CHANNELS] = [&[]; MAX_ENGINE_CHANNELS];
            for (r, b) in in_refs.iter_mut().zip(ins) {
                *r = &b[..len];
            }
            let mut out_refs: [&mut [f32]; MAX_ENGINE_CHANNELS] = Default::default();
            for (r, b) in out_refs.iter_mut().zip(self.outs.iter_mut()) {
                *r = &mut b[..len];
            }
            // Should not fail: channel counts and lengths are fixed at construction and len <= chunk <=
            // max_host_frames. On error the engine zeroes the outputs, which is safe; it is counted.
            if self.engine.process(&in_refs[..m], &mut out_refs[..n]).is_err() {
                shared.engine_errors.fetch_add(1, Relaxed);
            }
        }
        #[cfg(feature = "test-hooks")]
        if shared.inject_nonfinite.swap(false, Relaxed) {
            self.outs[0][len / 2] = f32::NAN;
        }
        let report = self.safety.process(&mut self.outs, len);
        if report.nonfinite > 0 {
            shared.nonfinite_outputs.fetch_add(report.nonfinite, Relaxed);
        }
        if let Some(reason) = report.muted {
            shared.mutes.fetch_add(1, Relaxed);
            shared.mute_reason.store(reason.code(), Relaxed);
        }
        let mut peak = 0.0f32;
        for y in &self.outs {
            for v in &y[..len] {
                peak = peak.max(v.abs());
            }
        }
        BridgeCells::raise_peak(&shared.out_peak, peak);
    }
}

/// Measures one callback: thread CPU time into the load, wall time against the period for the
/// overrun count and the worst-callback figure.
pub(crate) struct CallbackTimer {
    wall: Instant,
    cpu_s: f64,
    /// This callback runs the engine: its time goes into the distribution.
    engine: bool,
}

impl CallbackTimer {
    #[inline]
    pub(crate) fn start(engine: bool) -> Self {
        Self { wall: Instant::now(), cpu_s: partita_core::thread_cpu_seconds(), engine }
    }

    #[inline]
    pub(crate) fn finish(self, shared: &BridgeCells, frames: usize) {
        let cpu = partita_core::thread_cpu_seconds() - self.cpu_s;
        let elapsed = self.wall.elapsed();
        if self.engine {
            shared.callback_times.record(elapsed.as_nanos() as u64);
        }
        let wall = elapsed.as_secs_f64();
        let period = frames as f64 / f64::from(shared.rate_hz);
        shared.cpu_ns.fetch_add((cpu.max(0.0) * 1e9) as u64, Relaxed);
        if period > 0.0 {
            shared.max_callback_ppm.fetch_max((wall / period * 1e6) as u64, Relaxed);
            if wall > period {
                // Our own work over the period, or the thread kept off the CPU by the scheduler.
                if cpu > period {
                    shared.late_callbacks.fetch_add(1, Relaxed);
                } else {
                    shared.preempted_callbacks.fetch_add(1, Relaxed);
                }
            }
        }
    }
}

/// Spins for the test stall hook (feature `test-hooks`).
#[cfg(feature = "test-hooks")]
pub(crate) fn test_stall(shared: &BridgeCells) {
    let ns = shared.stall_ns.swap(0, Relaxed);
    if ns > 0 {
        let until = Instant::now() + std::time::Duration::from_nanos(ns);
        while Instant::now() < until {
            std::hint::spin_loop();
        }
    }
}

/// The input stream's per-callback work: format conversion, channel mapping, the engine (on
/// [`EngineSide::Capture`]), the ring push. See the crate docs.
pub struct CaptureSide {
    shared: Arc<BridgeCells>,
    prod: HeapProd<f32>,
    width: usize,
    device_channels: usize,
    map: Vec<usize>,
    planar: Vec<Vec<f32>>,
    frames_buf: Vec<f32>,
    stage: Option<Box<Stage>>,
    chunk: usize,
}

/// The click-free drift corrector of [`DriftMode::Resample`]: the rate controller and the fractional
/// reader between the ring and the rest of the playback side.
#[derive(Debug)]
struct Resampling {
    control: RateController,
    reader: RateReader,
    /// The correction reached at the end of the last callback (the next one ramps on from it).
    u: f64,
}

/// The output stream's per-callback work: the ring pop with priming and drift correction, the engine
/// (on [`EngineSide::Playback`]), channel mapping and conversion. See the crate docs.
pub struct PlaybackSide {
    shared: Arc<BridgeCells>,
    cons: HeapCons<f32>,
    width: usize,
    device_channels: usize,
    map: Vec<Option<usize>>,
    planar: Vec<Vec<f32>>,
    frames_buf: Vec<f32>,
    last_frame: Vec<f32>,
    stage: Option<Box<Stage>>,
    chunk: usize,
    margin: usize,
    drift: DriftTracker,
    resampling: Option<Box<Resampling>>,
    primed: bool,
    started: bool,
    last_frames: usize,
    last_input_frames: usize,
    disturbed: u8,
    min_fill: usize,
    window_frames: usize,
}

impl std::fmt::Debug for CaptureSide {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("CaptureSide")
            .field("width", &self.width)
            .field("device_channels", &self.device_channels)
            .field("map", &self.map)
            .field("engine", &self.stage.is_some())
            .field("chunk", &self.chunk)
            .finish_non_exhaustive()
    }
}

impl std::fmt::Debug for PlaybackSide {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("PlaybackSide")
            .field("width", &self.width)
            .field("device_channels", &self.device_channels)
            .field("map", &self.map)
            .field("engine", &self.stage.is_some())
            .field("primed", &self.primed)
            .field("drift", &self.drift)
            .finish_non_exhaustive()
    }
}

/// The control side of a bridge: counters, meters, mix and mute controls. Cheap to clone; every method
/// is wait-free and may be called from any thread.
#[derive(Debug, Clone)]
pub struct BridgeHandle {
    shared: Arc<BridgeCells>,
    engine: Monitor,
    origin: Instant,
}

/// A bridge, split into its two callback sides and the control handle.
#[derive(Debug)]
pub struct Bridge {
    /// For the input stream's callback.
    pub capture: CaptureSide,
    /// For the output stream's callback.
    pub playback: PlaybackSide,
    /// For the control thread.
    pub handle: BridgeHandle,
}

impl Bridge {
    /// Builds a bridge around `engine`. Allocates every buffer: the ring and the scratch for chunks of
    /// `engine.max_host_frames()` frames.
    ///
    /// # Errors
    /// [`DeviceError::TooManyChannels`] beyond [`MAX_ENGINE_CHANNELS`], [`DeviceError::ChannelMap`] when
    /// the map does not fit the devices or the engine.
    pub fn new(engine: Engine, options: &BridgeOptions) -> Result<Self, DeviceError> {
        let m = engine.inputs();
        let n = engine.outputs();
        for channels in [m, n] {
            if channels > MAX_ENGINE_CHANNELS {
                return Err(DeviceError::TooManyChannels { channels, max: MAX_ENGINE_CHANNELS });
            }
        }
        if options.device_inputs == 0 || options.device_outputs == 0 {
            return Err(DeviceError::ChannelMap("the devices need at least one channel each way".into()));
        }
        let map = options
            .map
            .clone()
            .unwrap_or_else(|| ChannelMap::default_for(options.device_inputs, options.device_outputs, m, n));
        if map.inputs.len() != m
            || map.device_inputs_needed() > options.device_inputs
            || map.outputs.len() != options.device_outputs
            || map.outputs.iter().flatten().any(|&o| o >= n)
        {
            return Err(DeviceError::ChannelMap(format!(
                "the map {map:?} does not fit {} input / {} output device channels and an engine of {m} x {n}",
                options.device_inputs, options.device_outputs
            )));
        }
        let chunk = engine.max_host_frames().min(8192);
        let width = match options.side {
            EngineSide::Capture => n,
            EngineSide::Playback => m,
        };
        let shared = Arc::new(BridgeCells::new(options.sample_rate_hz, engine.latency_frames()));
        let handle = BridgeHandle { shared: Arc::clone(&shared), engine: engine.monitor(), origin: Instant::now() };
        let (prod, cons) = HeapRb::<f32>::new(options.ring_frames.max(chunk) * width).split();
        let stage = Box::new(Stage::new(engine, chunk, options));
        let (capture_stage, playback_stage) = match options.side {
            EngineSide::Capture => (Some(stage), None),
            EngineSide::Playback => (None, Some(stage)),
        };
        let capture = CaptureSide {
            shared: Arc::clone(&shared),
            prod,
            width,
            device_channels: options.device_inputs,
            map: map.inputs.clone(),
            planar: vec![vec![0.0; chunk]; m],
            frames_buf: vec![0.0; chunk * width],
            stage: capture_stage,
            chunk,
        };
        let playback = PlaybackSide {
            shared,
            cons,
            width,
            device_channels: options.device_outputs,
            map: map.outputs.clone(),
            planar: vec![vec![0.0; chunk]; if playback_stage.is_some() { m } else { 0 }],
            frames_buf: vec![0.0; chunk * width],
            last_frame: vec![0.0; width],
            stage: playback_stage,
            chunk,
            margin: options.margin_frames,
            drift: DriftTracker::new(options.sample_rate_hz, options.drift),
            resampling: (options.drift.enabled && options.drift.mode == DriftMode::Resample).then(|| {
                Box::new(Resampling {
                    control: RateController::new(options.sample_rate_hz, options.drift, HALF_TAPS),
                    reader: RateReader::new(width, chunk),
                    u: 0.0,
                })
            }),
            primed: false,
            started: false,
            last_frames: 0,
            last_input_frames: 0,
            disturbed: 0,
            min_fill: usize::MAX,
            window_frames: 0,
        };
        Ok(Self { capture, playback, handle })
    }
}

impl CaptureSide {
    /// One input callback: `data` holds interleaved frames of the device's channels. Never allocates.
    pub fn capture<T: DeviceSample>(&mut self, data: &[T], time: CallbackTime) {
        let timer = CallbackTimer::start(self.stage.is_some());
        let shared = &*self.shared;
        let c = self.device_channels;
        let frames = data.len() / c;
        shared.callbacks_in.fetch_add(1, Relaxed);
        shared.in_period.store(frames as u32, Relaxed);
        shared.capture_delay_ns.store(time.device_delay_ns, Relaxed);
        let mut done = 0;
        let mut bad = 0u64;
        let mut peak = 0.0f32;
        let mut overflowed = false;
        while done < frames {
            let len = (frames - done).min(self.chunk);
            let src = &data[done * c..(done + len) * c];
            for (plane, &ch) in self.planar.iter_mut().zip(&self.map) {
                for (i, y) in plane[..len].iter_mut().enumerate() {
                    let v = src[i * c + ch].to_f32();
                    *y = if v.is_finite() {
                        peak = peak.max(v.abs());
                        v
                    } else {
                        bad += 1;
                        0.0
                    };
                }
            }
            let w = self.width;
            match &mut self.stage {
                Some(stage) => {
                    stage.run(&self.planar, len, shared);
                    interleave(&stage.outs, &mut self.frames_buf[..len * w], len);
                }
                None => interleave(&self.planar, &mut self.frames_buf[..len * w], len),
            }
            let room = self.prod.vacant_len() / w;
            let fit = len.min(room);
            if fit < len {
                overflowed = true;
            }
            self.prod.push_slice(&self.frames_buf[..fit * w]);
            done += len;
        }
        if overflowed {
            shared.ring_overflows.fetch_add(1, Relaxed);
        }
        if bad > 0 {
            shared.nonfinite_inputs.fetch_add(bad, Relaxed);
        }
        BridgeCells::raise_peak(&shared.in_peak, peak);
        shared.store_last_input(time.now_ns, frames);
        timer.finish(shared, frames);
    }

    /// [`capture`](Self::capture) for cpal's format-tagged buffer.
    pub fn capture_data(&mut self, data: &cpal::Data, time: CallbackTime) {
        with_samples!(data, as_slice, |s| self.capture(s, time));
    }
}

fn interleave(planar: &[Vec<f32>], out: &mut [f32], len: usize) {
    let w = planar.len();
    for (c, plane) in planar.iter().enumerate() {
        for i in 0..len {
            out[i * w + c] = plane[i];
        }
    }
}

impl PlaybackSide {
    /// One output callback: fills `data`, interleaved frames of the device's channels. Never allocates.
    pub fn play<T: DeviceSample>(&mut self, data: &mut [T], time: CallbackTime) {
        let timer = CallbackTimer::start(self.stage.is_some());
        #[cfg(feature = "test-hooks")]
        test_stall(&self.shared);
        let c = self.device_channels;
        let frames = data.len() / c;
        let shared = &*self.shared;
        shared.callbacks_out.fetch_add(1, Relaxed);
        shared.frames_out.fetch_add(frames as u64, Relaxed);
        shared.out_period.store(frames as u32, Relaxed);
        if frames == 0 {
            return;
        }
        let w = self.width;
        let (t_in, n_in) = shared.last_input();
        if frames != self.last_frames || n_in != self.last_input_frames {
            // A period changed (e.g. jack_bufsize): the level settles anew, and running dry now is the
            // reconfiguration's doing, not an overrun.
            self.last_frames = frames;
            self.last_input_frames = n_in;
            self.disturbed = 3;
            self.drift.reset();
            if let Some(rs) = self.resampling.as_deref_mut() {
                rs.control.reset();
            }
        } else {
            self.disturbed = self.disturbed.saturating_sub(1);
        }
        let fill = self.cons.occupied_len() / w;
        let target = n_in.max(frames) + self.margin;
        // Once engaged, the resampler holds its look-ahead out of the ring: prime with it included.
        let lookahead = self.resampling.as_ref().map_or(0, |rs| rs.reader.lookahead());
        if !self.primed {
            if n_in > 0 && fill >= target + lookahead {
                self.primed = true;
                if self.started {
                    shared.reprimes.fetch_add(1, Relaxed);
                }
                self.started = true;
                self.drift.reset();
                if let Some(rs) = self.resampling.as_deref_mut() {
                    rs.control.restart();
                    rs.reader.restart();
                }
                self.min_fill = usize::MAX;
                self.window_frames = 0;
            } else {
                fill_silence(data);
                timer.finish(shared, frames);
                return;
            }
        }
        // The ring's level independent of the two callbacks' phase: add what the input has gathered
        // since its last callback.
        let since_in_ns = time.now_ns.saturating_sub(t_in);
        let gathered = (since_in_ns as f64 * 1e-9 * f64::from(shared.rate_hz)).min(n_in as f64);
        let input = InputClock { n_in, since_in_ns, gathered, target };
        if self.resampling.is_some() {
            self.play_resampled(data, time, fill, input);
        } else {
            self.play_slipping(data, time, fill, input);
        }
        timer.finish(&self.shared, frames);
    }

    /// The end of [`play`](Self::play) in [`DriftMode::FrameSlip`], or with correction off: whole frames
    /// from the ring, one slipped or repeated when the tracker says so.
    fn play_slipping<T: DeviceSample>(&mut self, data: &mut [T], time: CallbackTime, fill: usize, input: InputClock) {
        let shared = &*self.shared;
        let c = self.device_channels;
        let frames = data.len() / c;
        let w = self.width;
        let InputClock { n_in, since_in_ns, gathered, target } = input;
        if fill < frames {
            // Ran dry: play silence and build the level up again rather than play a partial buffer.
            if self.disturbed == 0 {
                shared.ring_underruns.fetch_add(1, Relaxed);
            }
            self.primed = false;
            fill_silence(data);
            return;
        }
        let mut correction = self.drift.observe(fill as f64 + gathered, frames);
        // Excess buffering (after a glitch, or when the period shrank) shows as a floor under the level:
        // when the lowest fill over a quarter second stays a whole period above the target, drop the
        // excess at once. Ordering races between the two callbacks only ever add to the fill, so the
        // minimum is the honest measure.
        self.min_fill = self.min_fill.min(fill);
        self.window_frames += frames;
        if self.window_frames * 4 >= shared.rate_hz as usize {
            let slack = n_in.max(frames);
            if correction == Correction::None && self.min_fill >= target + slack && self.disturbed == 0 {
                let excess = self.min_fill - target;
                self.cons.skip(excess * w);
                shared.resyncs.fetch_add(1, Relaxed);
                self.drift.reset();
            }
            self.min_fill = usize::MAX;
            self.window_frames = 0;
        }
        let fill = self.cons.occupied_len() / w;
        if correction == Correction::Slip && fill < frames + 1 {
            correction = Correction::None;
        }
        // Latency of the first frame played now: playback delay + time since the input callback +
        // capture delay + frames queued ahead of that callback's + the engine's latency.
        let queued = fill as f64 - n_in as f64 - f64::from(u8::from(correction == Correction::Slip));
        record_latency(shared, time, since_in_ns, queued);

        match correction {
            Correction::Slip => {
                self.cons.skip(w);
                shared.drift_slips.fetch_add(1, Relaxed);
            }
            Correction::Repeat => {
                shared.drift_repeats.fetch_add(1, Relaxed);
            }
            Correction::None => {}
        }
        self.drift.applied(correction);

        let mut done = 0;
        let mut repeat = correction == Correction::Repeat;
        while done < frames {
            let len = (frames - done).min(self.chunk);
            let buf = &mut self.frames_buf[..len * w];
            let start = if repeat {
                buf[..w].copy_from_slice(&self.last_frame);
                repeat = false;
                w
            } else {
                0
            };
            let got = self.cons.pop_slice(&mut buf[start..]);
            buf[start + got..].fill(0.0);
            self.last_frame.copy_from_slice(&buf[(len - 1) * w..]);
            let out = &mut data[done * c..(done + len) * c];
            emit(&self.frames_buf[..len * w], w, &mut self.planar, &mut self.stage, out, c, &self.map, shared);
            done += len;
        }
    }

    /// The end of [`play`](Self::play) in [`DriftMode::Resample`]: the ring read at `1 + u` frames per
    /// output frame through the fractional reader, `u` ramped across the callback to what the rate
    /// controller asks for now.
    fn play_resampled<T: DeviceSample>(&mut self, data: &mut [T], time: CallbackTime, fill: usize, input: InputClock) {
        let shared = &*self.shared;
        let c = self.device_channels;
        let frames = data.len() / c;
        let w = self.width;
        let InputClock { n_in, since_in_ns, gathered, target } = input;
        let Some(rs) = self.resampling.as_deref_mut() else {
            return;
        };
        // The level counts the frames the reader holds beyond its (fractional) output position, so it
        // moves smoothly with the reading rate rather than in steps of whole frames taken.
        let pending = rs.reader.pending();
        let u_end = rs.control.observe(fill as f64 + pending + gathered, frames);
        if rs.control.engaged() && rs.reader.lookahead() == 0 {
            rs.reader.engage();
        }
        let u0 = rs.u;
        let du = (u_end - u0) / frames as f64;
        let need = rs.reader.need(0, frames, u0, du);
        if fill < need {
            // Ran dry: play silence and build the level up again rather than play a partial buffer.
            if self.disturbed == 0 {
                shared.ring_underruns.fetch_add(1, Relaxed);
            }
            self.primed = false;
            fill_silence(data);
            return;
        }
        // Excess buffering: as in frame-slip mode, on the ring's own fill.
        self.min_fill = self.min_fill.min(fill);
        self.window_frames += frames;
        let mut fill = fill;
        if self.window_frames * 4 >= shared.rate_hz as usize {
            let slack = n_in.max(frames);
            if self.min_fill >= target + slack && self.disturbed == 0 {
                let excess = (self.min_fill - target).min(fill - need);
                self.cons.skip(excess * w);
                fill -= excess;
                shared.resyncs.fetch_add(1, Relaxed);
                rs.control.reset();
            }
            self.min_fill = usize::MAX;
            self.window_frames = 0;
        }
        // Latency of the first frame played now, as in frame-slip mode, with the frames the reader
        // holds ahead of its output position (its look-ahead: the resampler's delay) among the queued.
        record_latency(shared, time, since_in_ns, fill as f64 + pending - n_in as f64);
        shared.drift_ppm_bits.store((u_end * 1e6).to_bits(), Relaxed);
        shared.resampler_frames.store(rs.reader.lookahead() as u64, Relaxed);

        let mut done = 0;
        while done < frames {
            let len = (frames - done).min(self.chunk);
            let take = rs.reader.need(done, len, u0, du);
            rs.reader.pull(&mut self.cons, take);
            rs.reader.render(&mut self.frames_buf[..len * w], done, u0, du);
            let out = &mut data[done * c..(done + len) * c];
            emit(&self.frames_buf[..len * w], w, &mut self.planar, &mut self.stage, out, c, &self.map, shared);
            done += len;
        }
        rs.u = u_end;
    }

    /// [`play`](Self::play) for cpal's format-tagged buffer.
    pub fn play_data(&mut self, data: &mut cpal::Data, time: CallbackTime) {
        with_samples!(data, as_slice_mut, |s| self.play(s, time));
    }
}

/// What the playback side knows of the input side when it plays.
#[derive(Debug, Clone, Copy)]
struct InputClock {
    /// Frames of the latest input callback.
    n_in: usize,
    /// Time since it, ns.
    since_in_ns: u64,
    /// Frames the input has gathered since it (elapsed time x rate, at most `n_in`).
    gathered: f64,
    /// The ring's primed level: the larger period plus the margin.
    target: usize,
}

/// Records the latency of the first frame played now: playback delay + time since the input
/// callback + capture delay + `queued` frames (ahead of that callback's first) + the engine's latency.
#[inline]
fn record_latency(shared: &BridgeCells, time: CallbackTime, since_in_ns: u64, queued: f64) {
    let rate = f64::from(shared.rate_hz);
    let latency_ns = time.device_delay_ns as f64
        + since_in_ns as f64
        + shared.capture_delay_ns.load(Relaxed) as f64
        + (queued + shared.engine_latency_frames as f64) * 1e9 / rate;
    shared.record_latency(latency_ns.max(0.0) as u64);
}

/// The playback side's work on a chunk of `len` frames from the ring (`buf`, interleaved, `w` wide):
/// the engine and safety stage when this side runs them, the meter otherwise, and the device buffer.
#[allow(clippy::too_many_arguments)]
#[inline]
fn emit<T: DeviceSample>(
    buf: &[f32],
    w: usize,
    planar: &mut [Vec<f32>],
    stage: &mut Option<Box<Stage>>,
    out: &mut [T],
    c: usize,
    map: &[Option<usize>],
    shared: &BridgeCells,
) {
    let len = buf.len() / w;
    match stage {
        Some(stage) => {
            for (k, plane) in planar.iter_mut().enumerate() {
                for i in 0..len {
                    plane[i] = buf[i * w + k];
                }
            }
            stage.run(planar, len, shared);
            write_device(out, c, map, len, |o, i| stage.outs[o][i]);
        }
        None => {
            let peak = buf.iter().fold(0.0f32, |p, v| p.max(v.abs()));
            BridgeCells::raise_peak(&shared.out_peak, peak);
            write_device(out, c, map, len, |o, i| buf[i * w + o]);
        }
    }
}

fn fill_silence<T: DeviceSample>(data: &mut [T]) {
    let zero = T::from_f32(0.0);
    data.fill(zero);
}

#[inline]
fn write_device<T: DeviceSample>(
    out: &mut [T],
    channels: usize,
    map: &[Option<usize>],
    len: usize,
    sample: impl Fn(usize, usize) -> f32,
) {
    for i in 0..len {
        for (d, src) in map.iter().enumerate() {
            out[i * channels + d] = T::from_f32(src.map_or(0.0, |o| sample(o, i)));
        }
    }
}

impl BridgeHandle {
    /// Nanoseconds since the bridge was built: the clock [`CallbackTime::now_ns`] is read on.
    #[inline]
    pub fn now_ns(&self) -> u64 {
        self.origin.elapsed().as_nanos() as u64
    }

    /// A snapshot of every counter.
    pub fn stats(&self) -> Stats {
        self.shared.snapshot(self.engine.late_results(), self.engine.worker_cpu_seconds())
    }

    /// The counters the callbacks write.
    pub(crate) fn cells(&self) -> &BridgeCells {
        &self.shared
    }

    /// Input and output peaks since the last call (for a meter).
    pub fn take_peaks(&self) -> Peaks {
        self.shared.take_peaks()
    }

    /// The fault an error callback reported, if any.
    pub fn fault(&self) -> Option<Fault> {
        self.shared.fault()
    }

    /// Records a fault found by the control side (e.g. the watchdog).
    pub fn set_fault(&self, fault: Fault) {
        self.shared.set_fault(fault);
    }

    /// What an error callback does: classify cpal's error into counters and the fault flag. Atomics
    /// only, real-time safe.
    #[inline]
    pub fn note_error(&self, kind: cpal::ErrorKind, direction: crate::Direction) {
        self.shared.note_error(kind, direction);
    }

    /// Asks real-time priority for the calling callback thread (`StreamOptions::realtime`); see
    /// [`crate::CALLBACK_PRIORITY`].
    pub(crate) fn promote_callback_thread(&self) {
        crate::realtime::promote_callback_thread(&self.shared);
    }

    /// Ends a safety mute: the engine's state is cleared by its spread reset (a slice per block, never all
    /// in one callback) and the output fades in again.
    pub fn unmute(&self) {
        self.shared.unmute.store(true, Relaxed);
    }

    /// Test hook (feature `test-hooks`): the next playback callback spins for `stall` before its work.
    #[cfg(feature = "test-hooks")]
    pub fn stall_next_callback(&self, stall: std::time::Duration) {
        self.shared.stall_ns.store(stall.as_nanos() as u64, Relaxed);
    }

    /// Test hook (feature `test-hooks`): the engine's next output gets a NaN before the safety stage.
    #[cfg(feature = "test-hooks")]
    pub fn inject_nonfinite_output(&self) {
        self.shared.inject_nonfinite.store(true, Relaxed);
    }
}
