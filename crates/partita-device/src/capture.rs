//! A JACK client that plays a prepared signal on one port and records another port in the same process
//! callback (feature `jack`): the measurement stream of `partita capture`.
//!
//! One client and one callback for both directions: output frame `n` and input frame `n` belong to the
//! same cycle, so a response's position in the recording, minus its position in what was played, is the
//! loop delay exactly in frames (JACK's latencies of the connected ports, the graph's own cycle delay
//! and the acoustic path), and takes played back to back are aligned by their position in the one
//! stream, with no drift between them.
//!
//! - [`JackCapture::open`] creates the client (not yet active) with ports `out_1` and `in_1`; the caller
//!   reads the server's rate and period and prepares the signal at that rate.
//! - [`JackCapture::start`] activates it with the signal and a recording length, then connects the
//!   ports ([`PortChoice`]: a physical port by index, a port by name, or none).
//! - The process callback copies the signal to the output port, clamped to a hard ceiling (the
//!   signal's own peak level), and the input port into the recording; both buffers are allocated and
//!   written before activation. It never allocates, locks or waits. No fade-in and no runaway mute
//!   (a sweep brings its own fade-in, and its level is fixed before it starts): only the ceiling.
//! - [`CaptureStream::request_stop`] (Ctrl-C) makes the callback fade the output out over
//!   [`STOP_FADE_MS`](crate::STOP_FADE_MS) with a raised-cosine ramp, then play silence and stop recording.
//! - A server that goes away, a sample-rate change (it would make the recording useless) or a callback
//!   that stops coming is a [`Fault`]. [`CaptureStream::finish`] closes the client with a bounded wait and
//!   hands back the recording.
// Only to implement jack's `NotificationHandler::shutdown`, an `unsafe fn` by the trait's signature; this
// module has no unsafe block.
#![allow(unsafe_code)]

use std::sync::atomic::Ordering::{Acquire, Relaxed, Release};
use std::sync::atomic::{AtomicBool, AtomicU64};
use std::sync::Arc;

use jack::{AudioIn, AudioOut, Client, ClientStatus, Control, Port, ProcessScope};

use crate::bridge::CallbackTimer;
use crate::duplex::{connect_client, off_thread_bounded, physical_ports, CLOSE_WAIT};
use crate::error::{DeviceError, Direction};
use crate::split::SignalSource;
use crate::stats::{BridgeCells, Fault, Stats, Watchdog};

/// What one of the capture client's ports connects to.
#[derive(Debug, Clone, PartialEq, Eq)]
pub enum PortChoice {
    /// The server's physical port of this index (0-based, in the server's order).
    Physical(usize),
    /// A port by its full name, e.g. `system:playback_3` or another client's port.
    Named(String),
    /// No connection (a patchbay makes it).
    Unconnected,
}

/// How the capture client is set up.
#[derive(Debug, Clone)]
pub struct CaptureOptions {
    /// The JACK client name (the server may add a suffix when it is taken). Default `partita-capture`.
    pub client_name: String,
    /// Where `out_1` (the signal) goes. Default the first physical playback port.
    pub output: PortChoice,
    /// What `in_1` (the microphone) records. Default the first physical capture port.
    pub input: PortChoice,
    /// Ask for SCHED_FIFO [`CALLBACK_PRIORITY`](crate::CALLBACK_PRIORITY) on the first callback.
    pub realtime: bool,
}

impl Default for CaptureOptions {
    fn default() -> Self {
        Self {
            client_name: "partita-capture".into(),
            output: PortChoice::Physical(0),
            input: PortChoice::Physical(0),
            realtime: false,
        }
    }
}

/// Flags and counters the callbacks and the control thread share.
struct CaptureCells {
    /// Stream frames processed (played and recorded) so far.
    position: AtomicU64,
    /// Frames recorded when the stream ended (the recording length or the stop point): valid once
    /// `done` is set.
    recorded: AtomicU64,
    /// Set by the control thread: fade out and stop.
    stop: AtomicBool,
    /// The stream frame at which the fade-out began (`u64::MAX`: none).
    stopped_at: AtomicU64,
    /// Recording complete (or stopped): the callback only plays silence from here on.
    done: AtomicBool,
}

/// The process handler: everything the callback touches, allocated before activation.
struct Process {
    shared: Arc<BridgeCells>,
    cells: Arc<CaptureCells>,
    out: Port<AudioOut>,
    inp: Port<AudioIn>,
    source: SignalSource,
    recording: Vec<f32>,
    realtime: bool,
}

impl jack::ProcessHandler for Process {
    fn process(&mut self, _: &Client, ps: &ProcessScope) -> Control {
        if self.realtime {
            self.realtime = false;
            crate::realtime::promote_callback_thread(&self.shared);
        }
        let timer = CallbackTimer::start(true);
        let shared = &*self.shared;
        let frames = ps.n_frames() as usize;
        shared.callbacks_in.fetch_add(1, Relaxed);
        shared.callbacks_out.fetch_add(1, Relaxed);
        shared.frames_out.fetch_add(frames as u64, Relaxed);
        shared.out_period.store(frames as u32, Relaxed);
        let out = self.out.as_mut_slice(ps);
        if self.cells.done.load(Relaxed) {
            out.fill(0.0);
            timer.finish(shared, frames);
            return Control::Continue;
        }
        if self.cells.stop.load(Acquire) {
            if let Some(at) = self.source.begin_stop() {
                self.cells.stopped_at.store(at, Relaxed);
            }
        }
        let inp = self.inp.as_slice(ps);
        let (mut bad, mut in_peak, mut out_peak) = (0u64, 0.0f32, 0.0f32);
        let mut ended = false;
        for (i, y) in out.iter_mut().enumerate() {
            let n = self.source.pos as usize;
            let v = self.source.next_sample();
            *y = v;
            out_peak = out_peak.max(v.abs());
            if let Some(r) = self.recording.get_mut(n) {
                let x = inp[i];
                *r = if x.is_finite() {
                    in_peak = in_peak.max(x.abs());
                    x
                } else {
                    bad += 1;
                    0.0
                };
            }
            let pos = self.source.pos;
            if !ended && (pos as usize >= self.recording.len() || self.source.faded()) {
                // The recording is complete, or the fade-out is over: record no further.
                ended = true;
                self.cells.recorded.store(pos.min(self.recording.len() as u64), Relaxed);
                self.cells.done.store(true, Release);
            }
        }
        self.cells.position.store(self.source.pos, Relaxed);
        if bad > 0 {
            shared.nonfinite_inputs.fetch_add(bad, Relaxed);
        }
        BridgeCells::raise_peak(&shared.in_peak, in_peak);
        BridgeCells::raise_peak(&shared.out_peak, out_peak);
        timer.finish(shared, frames);
        Control::Continue
    }
}

/// The notification handler: atomics only.
struct Notifications {
    shared: Arc<BridgeCells>,
    rate_hz: u32,
}

impl jack::NotificationHandler for Notifications {
    // SAFETY (of the implementation): the trait asks that the method do only what is safe in a signal
    // handler; it stores to atomics and nothing else.
    unsafe fn shutdown(&mut self, _status: ClientStatus, _reason: &str) {
        self.shared.set_fault(Fault::ServerStopped);
    }

    fn sample_rate(&mut self, _: &Client, rate: jack::Frames) -> Control {
        // A recording at two rates is no measurement.
        if rate != self.rate_hz {
            self.shared.set_fault(Fault::StreamInvalidated(Direction::Input));
        }
        Control::Continue
    }

    fn xrun(&mut self, _: &Client) -> Control {
        self.shared.host_xruns.fetch_add(1, Relaxed);
        Control::Continue
    }
}

/// The capture client with its ports registered, not yet processing. See the module docs.
pub struct JackCapture {
    client: Client,
    out: Port<AudioOut>,
    inp: Port<AudioIn>,
    /// Our output's destination and our input's source, resolved at open.
    output_to: Option<String>,
    input_from: Option<String>,
    realtime: bool,
}

impl std::fmt::Debug for JackCapture {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("JackCapture")
            .field("client", &self.client.name())
            .field("output_to", &self.output_to)
            .field("input_from", &self.input_from)
            .finish_non_exhaustive()
    }
}

fn jack_error(context: &str, e: jack::Error) -> DeviceError {
    DeviceError::Jack(format!("{context}: {e}"))
}

/// The port a [`PortChoice`] names among the server's `physical` ports of one direction, checked to
/// exist.
fn resolve(
    client: &Client,
    choice: &PortChoice,
    physical: &[String],
    what: &str,
) -> Result<Option<String>, DeviceError> {
    match choice {
        PortChoice::Unconnected => Ok(None),
        PortChoice::Physical(i) => physical.get(*i).cloned().map(Some).ok_or_else(|| {
            DeviceError::ChannelMap(format!(
                "no physical {what} port {} on this server (it has {}: {}); choose another channel, name a \
                 port, or leave it unconnected",
                i + 1,
                physical.len(),
                physical.join(", ")
            ))
        }),
        PortChoice::Named(name) => match client.port_by_name(name) {
            Some(_) => Ok(Some(name.clone())),
            None => Err(DeviceError::ChannelMap(format!("no JACK port `{name}` (jack_lsp lists the ports)"))),
        },
    }
}

impl JackCapture {
    /// Opens a client on the default JACK server (`JACK_DEFAULT_SERVER`), registers `out_1` and `in_1`,
    /// and checks that the ports to connect exist. Never starts a server. Allocates; talks to the
    /// server.
    ///
    /// # Errors
    /// [`DeviceError::Jack`] when no server answers or a port cannot be registered;
    /// [`DeviceError::ChannelMap`] when a port to connect does not exist.
    pub fn open(options: &CaptureOptions) -> Result<Self, DeviceError> {
        let client = connect_client(&options.client_name, "")?;
        let (capture_ports, playback_ports) = physical_ports(&client);
        let output_to = resolve(&client, &options.output, &playback_ports, "playback")?;
        let input_from = resolve(&client, &options.input, &capture_ports, "capture")?;
        let out = client.register_port("out_1", AudioOut::default()).map_err(|e| jack_error("registering out_1", e))?;
        let inp = client.register_port("in_1", AudioIn::default()).map_err(|e| jack_error("registering in_1", e))?;
        Ok(Self { client, out, inp, output_to, input_from, realtime: options.realtime })
    }

    /// The server's sample rate, Hz.
    pub fn sample_rate_hz(&self) -> u32 {
        self.client.sample_rate()
    }

    /// The server's period, frames.
    pub fn period_frames(&self) -> u32 {
        self.client.buffer_size()
    }

    /// The client's name as the server gave it.
    pub fn client_name(&self) -> String {
        self.client.name().to_string()
    }

    /// Starts the stream: plays `signal` from its first frame, clamped to +-`ceiling`, then silence, and
    /// records `record_frames` frames from the same first cycle; then connects the ports. Allocates (the
    /// recording, written once here so the callback never faults a fresh page).
    ///
    /// # Errors
    /// [`DeviceError::Jack`] when the client cannot be activated or a connection fails.
    ///
    /// # Panics
    /// When `ceiling` is not finite and positive.
    pub fn start(self, signal: Vec<f32>, ceiling: f32, record_frames: usize) -> Result<CaptureStream, DeviceError> {
        let Self { client, out, inp, output_to, input_from, realtime } = self;
        let rate = client.sample_rate();
        let period = client.buffer_size();
        let shared = Arc::new(BridgeCells::new(rate, 0));
        let cells = Arc::new(CaptureCells {
            position: AtomicU64::new(0),
            recorded: AtomicU64::new(0),
            stop: AtomicBool::new(false),
            stopped_at: AtomicU64::new(u64::MAX),
            done: AtomicBool::new(false),
        });
        // `vec![0.0; n]` may come from calloc's untouched zero pages; resize writes every one.
        let mut recording = Vec::with_capacity(record_frames);
        recording.resize(record_frames, 0.0f32);
        let process = Process {
            shared: Arc::clone(&shared),
            cells: Arc::clone(&cells),
            out,
            inp,
            source: SignalSource::new(signal, ceiling, rate),
            recording,
            realtime,
        };
        let notifications = Notifications { shared: Arc::clone(&shared), rate_hz: rate };
        let active =
            client.activate_async(notifications, process).map_err(|e| jack_error("activating the JACK client", e))?;
        let name = active.as_client().name().to_string();
        let (out_name, in_name) = (format!("{name}:out_1"), format!("{name}:in_1"));
        let mut connections = Vec::new();
        let c = active.as_client();
        if let Some(dst) = &output_to {
            c.connect_ports_by_name(&out_name, dst).map_err(|e| jack_error(&format!("connecting {dst}"), e))?;
            connections.push((out_name.clone(), dst.clone()));
        }
        if let Some(src) = &input_from {
            c.connect_ports_by_name(src, &in_name).map_err(|e| jack_error(&format!("connecting {src}"), e))?;
            connections.push((src.clone(), in_name.clone()));
        }
        Ok(CaptureStream {
            client: Some(active),
            shared,
            cells,
            info: CaptureInfo { client: name, sample_rate_hz: rate, period_frames: period, connections },
            record_frames,
            watch: Watchdog::new(),
        })
    }
}

/// What a started capture stream runs with.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct CaptureInfo {
    /// The client's name.
    pub client: String,
    /// Sample rate, Hz.
    pub sample_rate_hz: u32,
    /// Period at start, frames.
    pub period_frames: u32,
    /// Connections made, `(source, destination)` port names.
    pub connections: Vec<(String, String)>,
}

/// The latencies JACK reports for the capture client's connected ports, frames (the larger end of each
/// range): what the server and its drivers add, without the graph's cycle delay or the acoustic path.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct PortLatency {
    /// Capture latency of `in_1`: from the physical input to our callback.
    pub capture_frames: u32,
    /// Playback latency of `out_1`: from our callback to the physical output.
    pub playback_frames: u32,
}

impl PortLatency {
    /// Their sum, frames.
    pub fn total_frames(&self) -> u32 {
        self.capture_frames + self.playback_frames
    }
}

/// What [`CaptureStream::finish`] hands back.
#[derive(Debug, Clone)]
pub struct Capture {
    /// The recorded input, from the first cycle: the full length asked for, or up to the stop.
    pub recording: Vec<f32>,
    /// The stream frame at which a stop request began the fade-out, if one did.
    pub stopped_at_frames: Option<usize>,
    /// The final counters.
    pub stats: Stats,
}

/// A running capture stream. Dropping it closes the client (with a bounded wait).
pub struct CaptureStream {
    client: Option<jack::AsyncClient<Notifications, Process>>,
    shared: Arc<BridgeCells>,
    cells: Arc<CaptureCells>,
    info: CaptureInfo,
    record_frames: usize,
    watch: Watchdog,
}

impl std::fmt::Debug for CaptureStream {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("CaptureStream").field("info", &self.info).finish_non_exhaustive()
    }
}

impl CaptureStream {
    /// What the stream started with.
    pub fn info(&self) -> &CaptureInfo {
        &self.info
    }

    /// Stream frames played and recorded so far.
    pub fn position_frames(&self) -> u64 {
        self.cells.position.load(Relaxed)
    }

    /// The recording is complete (or a stop has faded out): call [`finish`](Self::finish).
    pub fn is_done(&self) -> bool {
        self.cells.done.load(Acquire)
    }

    /// Asks the callback to fade the output out over [`STOP_FADE_MS`](crate::STOP_FADE_MS) and stop recording.
    pub fn request_stop(&self) {
        self.cells.stop.store(true, Release);
    }

    /// The latencies JACK reports for our connected ports (see [`PortLatency`]).
    pub fn port_latency(&self) -> PortLatency {
        let Some(c) = &self.client else { return PortLatency::default() };
        let c = c.as_client();
        let range = |port: &str, mode| c.port_by_name(port).map_or(0, |p| p.get_latency_range(mode).1);
        PortLatency {
            capture_frames: range(&format!("{}:in_1", self.info.client), jack::LatencyType::Capture),
            playback_frames: range(&format!("{}:out_1", self.info.client), jack::LatencyType::Playback),
        }
    }

    /// A snapshot of the counters.
    pub fn stats(&self) -> Stats {
        self.shared.snapshot(0, 0.0)
    }

    /// The control thread's part; call it a few times a second. Returns the fault that ended the
    /// stream's usefulness, if any: the server went away, the rate changed, or the callback stopped for
    /// a second.
    pub fn poll(&mut self) -> Option<Fault> {
        if let Some(f) = self.shared.fault() {
            return Some(f);
        }
        if self.watch.stalled(self.shared.callbacks_out.load(Relaxed)) {
            self.shared.set_fault(Fault::Stalled(Direction::Output));
            return self.shared.fault();
        }
        None
    }

    /// Closes the client (waiting at most a second for the server) and returns the recording, cut to
    /// what was recorded.
    ///
    /// # Errors
    /// [`DeviceError::Jack`] when the server did not hand the client back in time (the recording is
    /// then lost with it).
    pub fn finish(mut self) -> Result<Capture, DeviceError> {
        let done = self.cells.done.load(Acquire);
        let process = close_bounded(self.client.take())
            .ok_or_else(|| DeviceError::Jack(format!("the server did not release the client within {CLOSE_WAIT:?}")))?;
        let recorded = if done {
            self.cells.recorded.load(Relaxed) as usize
        } else {
            (self.cells.position.load(Relaxed) as usize).min(self.record_frames)
        };
        let mut recording = process.map(|p| p.recording).unwrap_or_default();
        recording.truncate(recorded);
        let stopped_at = self.cells.stopped_at.load(Relaxed);
        Ok(Capture {
            recording,
            stopped_at_frames: (stopped_at != u64::MAX).then_some(stopped_at as usize),
            stats: self.stats(),
        })
    }
}

impl Drop for CaptureStream {
    fn drop(&mut self) {
        let _ = close_bounded(self.client.take());
    }
}

/// Deactivates and closes `client` on a thread of its own ([`off_thread_bounded`]). Returns `None` on
/// timeout, else the process handler when the server handed it back.
fn close_bounded(client: Option<jack::AsyncClient<Notifications, Process>>) -> Option<Option<Process>> {
    let client = client?;
    off_thread_bounded(move || {
        client.deactivate().ok().map(|(c, _, p)| {
            drop(c);
            p
        })
    })
}
