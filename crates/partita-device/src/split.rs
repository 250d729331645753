//! Room measurement on split devices through cpal: one stream plays a prepared signal, another records,
//! each on its own clock (the measurement stream of `partita capture` on every host but JACK's duplex
//! client, see the `capture` module).
//!
//! Input and output here are two streams, often two devices with two crystals: nothing ties output frame
//! `n` to input frame `n`. So this path does less than the one-client path and leaves the rest to the
//! analysis of the recording (`partita_room::align`):
//!
//! - no drift correction (it would resample the recording while it is made): the recording runs on the
//!   input device's clock, and the takes are found in it afterwards by cross-correlation with the sweep,
//!   which also measures the clock skew;
//! - the recording starts at the first input callback after the output's first callback, and both
//!   callbacks' times are kept ([`SplitHandle::start_offset_ns`]), so the loop delay can be told within
//!   about a period (the JACK client's is exact);
//! - the output is clamped to a hard ceiling (the signal's own peak level) and fades out over
//!   [`STOP_FADE_MS`] on a stop request (Ctrl-C), as on JACK; no fade-in and no runaway mute (a sweep
//!   brings its own fade-in, and its level is fixed before it starts).
//!
//! The callback bodies are plain struct methods ([`SignalPlayer::play`], [`Recorder::record`]) that never
//! allocate, lock or wait (the recording is preallocated and written through atomics, so the control
//! thread reads it without a lock), so tests drive them without a device ([`SplitParts::new`]).
//! [`SplitCapture`] opens the devices ([`LiveDevices`]) and runs the bodies in cpal's callbacks.

use std::sync::atomic::Ordering::{Acquire, Relaxed, Release};
use std::sync::atomic::{AtomicBool, AtomicU32, AtomicU64};
use std::sync::Arc;
use std::time::Instant;

use crate::bridge::{CallbackTime, CallbackTimer};
use crate::convert::{with_samples, DeviceSample};
use crate::error::DeviceError;
use crate::host::{release, DeviceOptions, DeviceSelector, LiveDevices, SideInfo, StreamHooks};
use crate::stats::{poll_stream_pair, BridgeCells, Fault, Stats, Watchdog};

/// Length of the fade-out after a stop request, ms.
pub const STOP_FADE_MS: f64 = 20.0;

/// The played signal: clamped to a ceiling, faded out on a stop. Shared by both measurement streams.
#[derive(Debug)]
pub(crate) struct SignalSource {
    signal: Vec<f32>,
    ceiling: f32,
    fade_frames: u64,
    /// Frames of the fade-out done, once a stop began (`None`: not stopping).
    fade_pos: Option<u64>,
    /// Frames played so far.
    pub(crate) pos: u64,
}

impl SignalSource {
    /// # Panics
    /// When `ceiling` is not finite and positive.
    pub(crate) fn new(signal: Vec<f32>, ceiling: f32, rate_hz: u32) -> Self {
        assert!(ceiling.is_finite() && ceiling > 0.0, "the ceiling must be a positive level");
        let fade_frames = ((STOP_FADE_MS * 1e-3 * f64::from(rate_hz)).round() as u64).max(1);
        Self { signal, ceiling, fade_frames, fade_pos: None, pos: 0 }
    }

    /// Starts the fade-out (once); returns the frame it starts at.
    pub(crate) fn begin_stop(&mut self) -> Option<u64> {
        if self.fade_pos.is_some() {
            return None;
        }
        self.fade_pos = Some(0);
        Some(self.pos)
    }

    /// Whether a stop's fade-out is over.
    pub(crate) fn faded(&self) -> bool {
        self.fade_pos.is_some_and(|k| k >= self.fade_frames)
    }

    /// The next output sample: the signal (silence after it), clamped, times the fade's raised cosine.
    #[inline]
    pub(crate) fn next_sample(&mut self) -> f32 {
        let mut v = self.signal.get(self.pos as usize).copied().unwrap_or(0.0).clamp(-self.ceiling, self.ceiling);
        if let Some(k) = self.fade_pos.as_mut() {
            v *= if *k >= self.fade_frames {
                0.0
            } else {
                (0.5 + 0.5 * (std::f64::consts::PI * *k as f64 / self.fade_frames as f64).cos()) as f32
            };
            *k += 1;
        }
        self.pos += 1;
        v
    }
}

/// Flags and counters the two callbacks and the control thread share.
#[derive(Debug)]
struct SplitCells {
    /// Set by the player's first callback: the recorder starts at its next callback.
    playing: AtomicBool,
    /// The player's first callback time, ns (the stream clock of [`CallbackTime`]).
    play_start_ns: AtomicU64,
    /// The callback time of the recorder's first recorded frame, ns.
    record_start_ns: AtomicU64,
    /// Frames played, frames recorded.
    played: AtomicU64,
    recorded: AtomicU64,
    /// Set by the control thread: fade out and stop.
    stop: AtomicBool,
    /// The played frame at which the fade-out began (`u64::MAX`: none).
    stopped_at: AtomicU64,
    /// The player's fade-out is over.
    faded: AtomicBool,
    /// The recording is complete (or stopped): both callbacks only play silence and drop input now.
    done: AtomicBool,
}

/// The output callback's part: plays the signal into one device channel, silence in the others.
#[derive(Debug)]
pub struct SignalPlayer {
    source: SignalSource,
    shared: Arc<BridgeCells>,
    cells: Arc<SplitCells>,
    channels: usize,
    channel: usize,
    started: bool,
}

/// The input callback's part: records one device channel from the first callback after the player
/// started.
#[derive(Debug)]
pub struct Recorder {
    recording: Arc<[AtomicU32]>,
    shared: Arc<BridgeCells>,
    cells: Arc<SplitCells>,
    channels: usize,
    channel: usize,
    pos: usize,
    started: bool,
}

/// The control side of a split measurement: progress, stop, faults, the recording when done. Cheap to
/// clone; every method is wait-free.
#[derive(Debug, Clone)]
pub struct SplitHandle {
    shared: Arc<BridgeCells>,
    cells: Arc<SplitCells>,
    recording: Arc<[AtomicU32]>,
    origin: Instant,
}

/// A player, a recorder and their handle, sharing one measurement.
#[derive(Debug)]
pub struct SplitParts {
    /// For the output stream's callback.
    pub player: SignalPlayer,
    /// For the input stream's callback.
    pub recorder: Recorder,
    /// For the control thread.
    pub handle: SplitHandle,
}

impl SplitParts {
    /// Plays `signal` clamped to +-`ceiling` into device channel `output_channel` of `output_channels`
    /// and records `record_frames` frames of `input_channel` of `input_channels`, at `rate_hz`.
    /// Allocates the recording (and writes every frame of it, so no callback faults a fresh page).
    ///
    /// # Panics
    /// When `ceiling` is not a positive level or a channel is not below its count.
    pub fn new(
        signal: Vec<f32>,
        ceiling: f32,
        record_frames: usize,
        rate_hz: u32,
        (output_channels, output_channel): (usize, usize),
        (input_channels, input_channel): (usize, usize),
    ) -> Self {
        assert!(output_channel < output_channels && input_channel < input_channels, "a channel beyond the device's");
        let shared = Arc::new(BridgeCells::new(rate_hz, 0));
        let cells = Arc::new(SplitCells {
            playing: AtomicBool::new(false),
            play_start_ns: AtomicU64::new(0),
            record_start_ns: AtomicU64::new(0),
            played: AtomicU64::new(0),
            recorded: AtomicU64::new(0),
            stop: AtomicBool::new(false),
            stopped_at: AtomicU64::new(u64::MAX),
            faded: AtomicBool::new(false),
            done: AtomicBool::new(false),
        });
        let recording: Arc<[AtomicU32]> = (0..record_frames).map(|_| AtomicU32::new(0)).collect();
        Self {
            player: SignalPlayer {
                source: SignalSource::new(signal, ceiling, rate_hz),
                shared: Arc::clone(&shared),
                cells: Arc::clone(&cells),
                channels: output_channels,
                channel: output_channel,
                started: false,
            },
            recorder: Recorder {
                recording: Arc::clone(&recording),
                shared: Arc::clone(&shared),
                cells: Arc::clone(&cells),
                channels: input_channels,
                channel: input_channel,
                pos: 0,
                started: false,
            },
            handle: SplitHandle { shared, cells, recording, origin: Instant::now() },
        }
    }
}

impl SignalPlayer {
    /// One output callback: interleaved `data` of the device's channels.
    pub fn play<T: DeviceSample>(&mut self, data: &mut [T], time: CallbackTime) {
        let timer = CallbackTimer::start(true);
        let shared = &*self.shared;
        let frames = data.len() / self.channels.max(1);
        shared.callbacks_out.fetch_add(1, Relaxed);
        shared.frames_out.fetch_add(frames as u64, Relaxed);
        shared.out_period.store(frames as u32, Relaxed);
        if !self.started {
            self.started = true;
            self.cells.play_start_ns.store(time.now_ns, Relaxed);
            self.cells.playing.store(true, Release);
        }
        if self.cells.done.load(Acquire) {
            data.fill(T::from_f32(0.0));
            timer.finish(shared, frames);
            return;
        }
        if self.cells.stop.load(Acquire) {
            if let Some(at) = self.source.begin_stop() {
                self.cells.stopped_at.store(at, Relaxed);
            }
        }
        let mut peak = 0.0f32;
        for frame in data.chunks_exact_mut(self.channels) {
            let v = self.source.next_sample();
            peak = peak.max(v.abs());
            for (c, slot) in frame.iter_mut().enumerate() {
                *slot = T::from_f32(if c == self.channel { v } else { 0.0 });
            }
        }
        self.cells.played.store(self.source.pos, Relaxed);
        if self.source.faded() {
            self.cells.faded.store(true, Release);
        }
        BridgeCells::raise_peak(&shared.out_peak, peak);
        timer.finish(shared, frames);
    }

    /// [`play`](Self::play) for cpal's format-tagged buffer.
    pub fn play_data(&mut self, data: &mut cpal::Data, time: CallbackTime) {
        with_samples!(data, as_slice_mut, |s| self.play(s, time));
    }
}

impl Recorder {
    /// One input callback: interleaved `data` of the device's channels. Non-finite samples are recorded
    /// as 0 and counted.
    pub fn record<T: DeviceSample>(&mut self, data: &[T], time: CallbackTime) {
        let timer = CallbackTimer::start(false);
        let shared = &*self.shared;
        let frames = data.len() / self.channels.max(1);
        shared.callbacks_in.fetch_add(1, Relaxed);
        shared.in_period.store(frames as u32, Relaxed);
        if self.cells.done.load(Acquire) {
            timer.finish(shared, frames);
            return;
        }
        if !self.started {
            if !self.cells.playing.load(Acquire) {
                timer.finish(shared, frames);
                return;
            }
            self.started = true;
            self.cells.record_start_ns.store(time.now_ns, Relaxed);
        }
        let (mut bad, mut peak) = (0u64, 0.0f32);
        for frame in data.chunks_exact(self.channels) {
            let Some(slot) = self.recording.get(self.pos) else { break };
            let x = frame[self.channel].to_f32();
            let x = if x.is_finite() {
                peak = peak.max(x.abs());
                x
            } else {
                bad += 1;
                0.0
            };
            slot.store(x.to_bits(), Relaxed);
            self.pos += 1;
        }
        self.cells.recorded.store(self.pos as u64, Release);
        if self.pos >= self.recording.len() || self.cells.faded.load(Acquire) {
            self.cells.done.store(true, Release);
        }
        if bad > 0 {
            shared.nonfinite_inputs.fetch_add(bad, Relaxed);
        }
        BridgeCells::raise_peak(&shared.in_peak, peak);
        timer.finish(shared, frames);
    }

    /// [`record`](Self::record) for cpal's format-tagged buffer.
    pub fn record_data(&mut self, data: &cpal::Data, time: CallbackTime) {
        with_samples!(data, as_slice, |s| self.record(s, time));
    }
}

impl SplitHandle {
    /// Nanoseconds since the parts were made: the clock of [`CallbackTime::now_ns`] off JACK.
    pub fn now_ns(&self) -> u64 {
        self.origin.elapsed().as_nanos() as u64
    }

    /// Frames played so far.
    pub fn played_frames(&self) -> u64 {
        self.cells.played.load(Relaxed)
    }

    /// Frames recorded so far.
    pub fn recorded_frames(&self) -> u64 {
        self.cells.recorded.load(Acquire)
    }

    /// The recording is complete (or a stop has faded out).
    pub fn is_done(&self) -> bool {
        self.cells.done.load(Acquire)
    }

    /// Asks the player to fade out over [`STOP_FADE_MS`]; the recorder stops once the fade is over.
    pub fn request_stop(&self) {
        self.cells.stop.store(true, Release);
    }

    /// The played frame at which a stop's fade-out began, if one did.
    pub fn stopped_at_frames(&self) -> Option<u64> {
        let at = self.cells.stopped_at.load(Relaxed);
        (at != u64::MAX).then_some(at)
    }

    /// The time from the player's first callback to the callback that recorded the recording's first
    /// frame, ns (both on the callbacks' clock); `None` before both happened. The loop delay is the
    /// response's position in the recording plus this, within about a period of either device.
    pub fn start_offset_ns(&self) -> Option<i64> {
        if self.recorded_frames() == 0 {
            return None;
        }
        Some(self.cells.record_start_ns.load(Relaxed) as i64 - self.cells.play_start_ns.load(Relaxed) as i64)
    }

    /// The frames recorded so far, as f32. Allocates.
    pub fn recording(&self) -> Vec<f32> {
        let n = self.recorded_frames() as usize;
        self.recording[..n.min(self.recording.len())].iter().map(|v| f32::from_bits(v.load(Relaxed))).collect()
    }

    /// A snapshot of the counters.
    pub fn stats(&self) -> Stats {
        self.shared.snapshot(0, 0.0)
    }

    /// The fault an error callback reported, if any.
    pub fn fault(&self) -> Option<Fault> {
        self.shared.fault()
    }
}

/// Where and how `partita capture` opens split devices.
#[derive(Debug, Clone, Default)]
pub struct SplitOptions {
    /// Host name (`alsa`, `jack`, ...); the platform default for `None`.
    pub host: Option<String>,
    /// The input device (the microphone's).
    pub input: DeviceSelector,
    /// The output device (the loudspeaker's).
    pub output: DeviceSelector,
    /// Sample rate; the output device's default for `None`.
    pub sample_rate_hz: Option<u32>,
    /// A fixed period, frames, where the host lets us choose.
    pub device_frames: Option<u32>,
    /// The device channel recorded, 0-based.
    pub input_channel: usize,
    /// The device channel the signal goes to, 0-based.
    pub output_channel: usize,
    /// Ask SCHED_FIFO [`CALLBACK_PRIORITY`](crate::CALLBACK_PRIORITY) for both callback threads.
    pub realtime: bool,
}

/// Split devices opened and configured for a measurement (see the module docs).
#[derive(Debug)]
pub struct SplitCapture {
    devices: LiveDevices,
    input_channel: usize,
    output_channel: usize,
    realtime: bool,
}

impl SplitCapture {
    /// Picks the host, the devices and a configuration with at least the chosen channels. Allocates;
    /// talks to the host.
    ///
    /// # Errors
    /// Those of [`LiveDevices::open`].
    pub fn open(options: &SplitOptions) -> Result<Self, DeviceError> {
        let device_options = DeviceOptions {
            host: options.host.clone(),
            input: options.input.clone(),
            output: options.output.clone(),
            sample_rate_hz: options.sample_rate_hz,
            device_frames: options.device_frames,
            input_channels: Some(vec![options.input_channel]),
            output_channels: Some(vec![options.output_channel]),
        };
        let devices = LiveDevices::open(&device_options, 1, 1)?;
        Ok(Self {
            devices,
            input_channel: options.input_channel,
            output_channel: options.output_channel,
            realtime: options.realtime,
        })
    }

    /// The sample rate both streams run at.
    pub fn sample_rate_hz(&self) -> u32 {
        self.devices.sample_rate_hz()
    }

    /// The host's name.
    pub fn host_name(&self) -> &'static str {
        self.devices.host_name()
    }

    /// Starts both streams (input first): plays `signal` clamped to +-`ceiling`, then silence, and records
    /// `record_frames` frames from the first input callback after the first output callback. Allocates.
    ///
    /// # Errors
    /// [`DeviceError::Cpal`] when a stream cannot be built or started.
    ///
    /// # Panics
    /// When `ceiling` is not a positive level.
    pub fn start(self, signal: Vec<f32>, ceiling: f32, record_frames: usize) -> Result<SplitStream, DeviceError> {
        let rate = self.sample_rate_hz();
        let (input_channels, output_channels) = self.devices.device_channels();
        let SplitParts { mut player, mut recorder, handle } = SplitParts::new(
            signal,
            ceiling,
            record_frames,
            rate,
            (output_channels, self.output_channel),
            (input_channels, self.input_channel),
        );
        let (clock, errors) = (handle.clone(), handle.clone());
        let hooks = StreamHooks {
            now_ns: move || clock.now_ns(),
            on_error: move |kind, direction| errors.shared.note_error(kind, direction),
            promote: self.realtime.then(|| {
                let h = handle.clone();
                move || crate::realtime::promote_callback_thread(&h.shared)
            }),
        };
        let (streams, input, output) = self.devices.play_streams(
            hooks,
            move |data, time| recorder.record_data(data, time),
            move |data, time| player.play_data(data, time),
        )?;
        let info = SplitInfo { host: self.devices.host_name().to_string(), sample_rate_hz: rate, input, output };
        Ok(SplitStream { streams, handle, info, watch: [Watchdog::new(); 2] })
    }
}

/// What a started split measurement runs with.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SplitInfo {
    /// Host name.
    pub host: String,
    /// Sample rate, Hz.
    pub sample_rate_hz: u32,
    /// The recording side.
    pub input: SideInfo,
    /// The playing side.
    pub output: SideInfo,
}

/// What [`SplitStream::finish`] hands back.
#[derive(Debug, Clone)]
pub struct SplitRecording {
    /// The recorded input channel, from the first input callback after the output started.
    pub recording: Vec<f32>,
    /// The played frame at which a stop request began the fade-out, if one did.
    pub stopped_at_frames: Option<usize>,
    /// [`SplitHandle::start_offset_ns`].
    pub start_offset_ns: Option<i64>,
    /// The final counters.
    pub stats: Stats,
}

/// A running split measurement. Dropping it stops the streams (with a bounded wait).
pub struct SplitStream {
    streams: Vec<cpal::Stream>,
    handle: SplitHandle,
    info: SplitInfo,
    /// Per direction, input then output.
    watch: [Watchdog; 2],
}

impl std::fmt::Debug for SplitStream {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("SplitStream").field("info", &self.info).field("handle", &self.handle).finish_non_exhaustive()
    }
}

impl SplitStream {
    /// What the streams run with.
    pub fn info(&self) -> &SplitInfo {
        &self.info
    }

    /// The control handle.
    pub fn handle(&self) -> &SplitHandle {
        &self.handle
    }

    /// The fault that ended the measurement's usefulness, if any: a lost device, an invalidated stream,
    /// or a stream whose callbacks stopped for a second. Call it a few times a second.
    pub fn poll(&mut self) -> Option<Fault> {
        poll_stream_pair(&self.handle.shared, &mut self.watch)
    }

    /// Stops both streams (waiting at most about a second for the host) and returns the recording.
    pub fn finish(mut self) -> SplitRecording {
        release(std::mem::take(&mut self.streams));
        SplitRecording {
            recording: self.handle.recording(),
            stopped_at_frames: self.handle.stopped_at_frames().map(|v| v as usize),
            start_offset_ns: self.handle.start_offset_ns(),
            stats: self.handle.stats(),
        }
    }
}

impl Drop for SplitStream {
    fn drop(&mut self) {
        release(std::mem::take(&mut self.streams));
    }
}
