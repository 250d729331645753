//! One JACK client with input and output ports and the engine inside its process callback: no ring, no
//! drift correction, no second client (feature `jack`).
//!
//! cpal opens one JACK client per stream, so its path needs a ring between the two and a period of
//! margin in it. Here the server hands one callback both the input and the output buffers of a cycle:
//! the input-to-output latency is the engine's latency plus the latencies of the ports we connect to,
//! exactly, and the client tells JACK so through a latency callback (the `jack` crate does not wrap
//! `jack_set_latency_callback`; it is called through `jack-sys` here), so latency-compensating hosts
//! can align it.
//!
//! - [`JackDuplex::open`] creates the client (not yet active) and registers its ports; the caller reads
//!   the server's rate and period from it, loads the IR at that rate and plans for that period.
//! - [`JackDuplex::start`] activates it with the engine and connects the ports (by default to the
//!   first physical ports, through the same [`ChannelMap`] the cpal path uses).
//! - The process callback copies each port's buffer into chunk-sized scratch, runs the engine and the
//!   [safety stage](crate::safety), and writes the output ports. It never allocates, locks or waits.
//! - A period change the engine can take (it fits `max_host_frames`, and no worker level is shorter
//!   than twice the new period: the planner's host-period rule) keeps the engine. Otherwise, and on a
//!   sample-rate change, the callback outputs silence and raises a request; [`DuplexStream::poll`] (the
//!   control thread) builds a new engine with the caller's rebuild function and hands it over through a
//!   wait-free queue; it starts with the safety stage's fade-in. The old engine comes back the same way
//!   and is dropped on the control thread. Port latencies are recomputed after a rebuild.
//! - A server that goes away (shutdown callback) or stops calling back (watchdog) is a [`Fault`].
//! - `realtime`: the callback thread asks for SCHED_FIFO on its first callback (unless it already runs
//!   real-time, as it does under a real-time JACK server); the result is in [`Stats::callback_priority`].
#![allow(unsafe_code)]

use std::sync::atomic::Ordering::{Acquire, Relaxed, Release};
use std::sync::atomic::{AtomicBool, AtomicU32, AtomicU64};
use std::sync::Arc;
use std::time::Duration;

use jack::{AudioIn, AudioOut, Client, ClientOptions, ClientStatus, Control, Port, PortFlags, ProcessScope};
use partita_core::{Engine, Monitor};
use ringbuf::traits::{Consumer, Observer, Producer, Split};
use ringbuf::{HeapCons, HeapProd, HeapRb};

use crate::bridge::{BridgeOptions, CallbackTimer, Stage, MAX_ENGINE_CHANNELS};
use crate::channels::ChannelMap;
use crate::error::{DeviceError, Direction};
use crate::safety::SafetyOptions;
use crate::stats::{BridgeCells, Fault, Peaks, Stats, Watchdog};

/// How the duplex client is set up.
#[derive(Debug, Clone)]
pub struct DuplexOptions {
    /// The JACK client name (the server may add a suffix when it is taken). Default `partita`.
    pub client_name: String,
    /// Connect our ports to the server's physical ports. Default true.
    pub connect: bool,
    /// Physical capture port (0-based, in the server's order) of each engine input; `0, 1, ...` for
    /// `None` (as the cpal path's [`ChannelMap::default_for`]).
    pub input_channels: Option<Vec<usize>>,
    /// Physical playback port of each engine output.
    pub output_channels: Option<Vec<usize>>,
    /// The safety stage.
    pub safety: SafetyOptions,
    /// Ask for SCHED_FIFO [`CALLBACK_PRIORITY`](crate::CALLBACK_PRIORITY) on the first callback.
    pub realtime: bool,
}

impl Default for DuplexOptions {
    fn default() -> Self {
        Self {
            client_name: "partita".into(),
            connect: true,
            input_channels: None,
            output_channels: None,
            safety: SafetyOptions::default(),
            realtime: false,
        }
    }
}

/// Builds an engine for `(sample_rate_hz, period_frames)` on the control thread after a rate change or
/// a period change the running engine cannot take.
pub type RebuildFn = Box<dyn FnMut(u32, usize) -> Result<Engine, String> + Send>;

/// The client's ports as raw pointers, for the latency callback (which runs on JACK's notification
/// thread and sees only this).
struct LatencyPorts {
    ins: Vec<PortPtr>,
    outs: Vec<PortPtr>,
    /// The engine's latency, frames (changes only when a rebuild changes the block).
    engine_frames: AtomicU32,
}

/// A port pointer owned by our client.
struct PortPtr(*mut jack_sys::jack_port_t);

// SAFETY: a jack_port_t pointer is a handle the JACK library lets any thread of the client use in the
// latency API; we only pass it to jack_port_{get,set}_latency_range while the client is alive.
unsafe impl Send for PortPtr {}
// SAFETY: as above; the pointer itself is never written after construction.
unsafe impl Sync for PortPtr {}

impl LatencyPorts {
    fn range(port: &PortPtr, mode: jack_sys::jack_latency_callback_mode_t) -> (u32, u32) {
        let mut r = jack_sys::jack_latency_range_t { min: 0, max: 0 };
        // SAFETY: `port.0` is a port of our client, registered before the callback was set and alive
        // as long as the client (the context outlives it); `r` is a valid out-parameter.
        unsafe { jack_sys::jack_port_get_latency_range(port.0, mode, &mut r) };
        (r.min, r.max)
    }

    /// JACK's latency callback: the capture latency of our outputs is the largest of our inputs' plus the
    /// engine's; the playback latency of our inputs is the largest of our outputs' plus the engine's.
    fn update(&self, mode: jack_sys::jack_latency_callback_mode_t) {
        let e = self.engine_frames.load(Relaxed);
        let (from, to) =
            if mode == jack_sys::JackCaptureLatency { (&self.ins, &self.outs) } else { (&self.outs, &self.ins) };
        let (mut lo, mut hi) = (u32::MAX, 0u32);
        for p in from {
            let (a, b) = Self::range(p, mode);
            lo = lo.min(a);
            hi = hi.max(b);
        }
        if from.is_empty() {
            lo = 0;
        }
        let mut r = jack_sys::jack_latency_range_t { min: lo.saturating_add(e), max: hi.saturating_add(e) };
        for p in to {
            // SAFETY: as in `range`; JACK copies the range.
            unsafe { jack_sys::jack_port_set_latency_range(p.0, mode, &mut r) };
        }
    }
}

/// The C entry point JACK calls for latency recomputation.
///
/// # Safety
/// `arg` is the `LatencyPorts` registered with it, which outlives the client.
unsafe extern "C" fn on_latency(mode: jack_sys::jack_latency_callback_mode_t, arg: *mut libc::c_void) {
    // SAFETY: see the function's contract; only shared references are made.
    let ports = unsafe { &*(arg as *const LatencyPorts) };
    // A panic must not cross the C boundary; there is nothing to report it to, so it is dropped.
    let _ = std::panic::catch_unwind(std::panic::AssertUnwindSafe(|| ports.update(mode)));
}

/// Flags and figures the notification thread, the process thread and the control thread share.
struct DuplexCells {
    /// A rate or period the running engine cannot take: 0, or the new period in frames.
    rebuild_period: AtomicU32,
    /// The rate the rebuild is for (0: the current one).
    rebuild_rate: AtomicU32,
    /// The process callback is holding silence until a new engine arrives.
    holding: AtomicBool,
    /// Rebuilds requested, and done.
    rebuilds: AtomicU64,
    /// The server's current period and rate, as the callbacks last saw them.
    period: AtomicU32,
    rate: AtomicU32,
}

/// The process handler: everything the callback touches.
struct Process {
    shared: Arc<BridgeCells>,
    cells: Arc<DuplexCells>,
    ins: Vec<Port<AudioIn>>,
    outs: Vec<Port<AudioOut>>,
    stage: Option<Box<Stage>>,
    /// Engine input k's scratch (its port's samples, non-finite ones replaced by 0).
    planar: Vec<Vec<f32>>,
    chunk: usize,
    incoming: HeapCons<Box<Stage>>,
    retired: HeapProd<Box<Stage>>,
    realtime: bool,
}

/// The notification handler.
struct Notifications {
    shared: Arc<BridgeCells>,
    cells: Arc<DuplexCells>,
}

impl jack::NotificationHandler for Notifications {
    unsafe fn shutdown(&mut self, _status: ClientStatus, _reason: &str) {
        // Atomics only: this runs like a signal handler.
        self.shared.set_fault(Fault::ServerStopped);
    }

    fn sample_rate(&mut self, _: &Client, rate: jack::Frames) -> Control {
        let old = self.cells.rate.swap(rate, Relaxed);
        if old != 0 && old != rate {
            self.cells.rebuild_rate.store(rate, Relaxed);
            self.cells.holding.store(true, Relaxed);
            let period = self.cells.period.load(Relaxed).max(1);
            self.cells.rebuild_period.store(period, Release);
        }
        Control::Continue
    }

    fn xrun(&mut self, _: &Client) -> Control {
        self.shared.host_xruns.fetch_add(1, Relaxed);
        Control::Continue
    }
}

impl Process {
    /// Whether the running engine can take host calls of `frames`.
    fn fits(stage: &Stage, frames: usize) -> bool {
        let e = &stage.engine;
        frames <= e.max_host_frames() && (frames <= e.host_period_frames() || e.worker_threads() == 0)
    }
}

impl jack::ProcessHandler for Process {
    fn process(&mut self, _: &Client, ps: &ProcessScope) -> Control {
        if self.realtime {
            self.realtime = false;
            crate::realtime::promote_callback_thread(&self.shared);
        }
        let timer = CallbackTimer::start(true);
        #[cfg(feature = "test-hooks")]
        crate::bridge::test_stall(&self.shared);
        let shared = &*self.shared;
        let frames = ps.n_frames() as usize;
        shared.callbacks_in.fetch_add(1, Relaxed);
        shared.callbacks_out.fetch_add(1, Relaxed);
        shared.frames_out.fetch_add(frames as u64, Relaxed);
        shared.in_period.store(frames as u32, Relaxed);
        shared.out_period.store(frames as u32, Relaxed);

        // A new engine from the control thread: swap it in when the old one has somewhere to go (it is
        // never dropped here).
        if self.retired.vacant_len() > 0 {
            if let Some(new) = self.incoming.try_pop() {
                if let Some(old) = self.stage.replace(new) {
                    let _ = self.retired.try_push(old);
                }
                self.cells.holding.store(false, Relaxed);
            }
        }
        let holding = self.cells.holding.load(Relaxed);
        let stage = match &mut self.stage {
            Some(s) if !holding => s,
            _ => {
                for p in &mut self.outs {
                    p.as_mut_slice(ps).fill(0.0);
                }
                timer.finish(shared, frames);
                return Control::Continue;
            }
        };
        let (mut bad, mut peak) = (0u64, 0.0f32);
        let mut done = 0;
        while done < frames {
            let len = (frames - done).min(self.chunk);
            for (plane, port) in self.planar.iter_mut().zip(&self.ins) {
                let src = &port.as_slice(ps)[done..done + len];
                for (y, &v) in plane[..len].iter_mut().zip(src) {
                    *y = if v.is_finite() {
                        peak = peak.max(v.abs());
                        v
                    } else {
                        bad += 1;
                        0.0
                    };
                }
            }
            stage.run(&self.planar, len, shared);
            for (port, y) in self.outs.iter_mut().zip(&stage.outs) {
                port.as_mut_slice(ps)[done..done + len].copy_from_slice(&y[..len]);
            }
            done += len;
        }
        if bad > 0 {
            shared.nonfinite_inputs.fetch_add(bad, Relaxed);
        }
        BridgeCells::raise_peak(&shared.in_peak, peak);
        timer.finish(shared, frames);
        Control::Continue
    }

    fn buffer_size(&mut self, _: &Client, size: jack::Frames) -> Control {
        // Called on the process thread between cycles (and once before the first).
        let old = self.cells.period.swap(size, Relaxed);
        let keep = self.stage.as_deref().is_none_or(|s| Self::fits(s, size as usize));
        if old != 0 && old != size && !keep {
            self.cells.holding.store(true, Relaxed);
            self.cells.rebuild_period.store(size, Release);
        }
        Control::Continue
    }
}

/// A JACK client with its ports registered, not yet processing. See the module docs.
pub struct JackDuplex {
    client: Client,
    ins: Vec<Port<AudioIn>>,
    outs: Vec<Port<AudioOut>>,
    map: ChannelMap,
    capture_ports: Vec<String>,
    playback_ports: Vec<String>,
    options: DuplexOptions,
}

impl std::fmt::Debug for JackDuplex {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("JackDuplex")
            .field("client", &self.client.name())
            .field("inputs", &self.ins.len())
            .field("outputs", &self.outs.len())
            .field("map", &self.map)
            .finish_non_exhaustive()
    }
}

fn jack_error(context: &str, e: jack::Error) -> DeviceError {
    DeviceError::Jack(format!("{context}: {e}"))
}

impl JackDuplex {
    /// Opens a client on the default JACK server (`JACK_DEFAULT_SERVER`), registers `in_1..` and
    /// `out_1..` ports for an engine of `engine_inputs` x `engine_outputs`, and checks the channel map
    /// against the server's physical ports. Never starts a server. Allocates; talks to the server.
    ///
    /// # Errors
    /// [`DeviceError::Jack`] when no server answers or a port cannot be registered;
    /// [`DeviceError::ChannelMap`] when the ports asked for do not exist.
    pub fn open(options: &DuplexOptions, engine_inputs: usize, engine_outputs: usize) -> Result<Self, DeviceError> {
        for channels in [engine_inputs, engine_outputs] {
            if channels > MAX_ENGINE_CHANNELS {
                return Err(DeviceError::TooManyChannels { channels, max: MAX_ENGINE_CHANNELS });
            }
        }
        let client = connect_client(&options.client_name, ", or choose another --host")?;
        let (capture_ports, playback_ports) = physical_ports(&client);
        let map = if options.connect {
            // The map needs at least one port each way; with none we connect nothing.
            let (din, dout) = (capture_ports.len().max(1), playback_ports.len().max(1));
            ChannelMap::from_lists(
                options.input_channels.as_deref(),
                options.output_channels.as_deref(),
                din,
                dout,
                engine_inputs,
                engine_outputs,
            )?
        } else {
            ChannelMap::default_for(1, 1, engine_inputs, engine_outputs)
        };
        let ins = (1..=engine_inputs)
            .map(|k| client.register_port(&format!("in_{k}"), AudioIn::default()))
            .collect::<Result<Vec<_>, _>>()
            .map_err(|e| jack_error("registering an input port", e))?;
        let outs = (1..=engine_outputs)
            .map(|k| client.register_port(&format!("out_{k}"), AudioOut::default()))
            .collect::<Result<Vec<_>, _>>()
            .map_err(|e| jack_error("registering an output port", e))?;
        Ok(Self { client, ins, outs, map, capture_ports, playback_ports, options: options.clone() })
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

    /// Starts processing with `engine` (built for this server's rate and period) and connects the ports.
    /// `rebuild` makes a new engine when the rate changes or the period outgrows this one. Allocates.
    ///
    /// # Errors
    /// [`DeviceError::Jack`] when the client cannot be activated or a connection fails; a mismatch of
    /// the engine's channels with the ports.
    pub fn start(self, engine: Engine, rebuild: RebuildFn) -> Result<DuplexStream, DeviceError> {
        let Self { client, ins, outs, map, capture_ports, playback_ports, options } = self;
        if engine.inputs() != ins.len() || engine.outputs() != outs.len() {
            return Err(DeviceError::ChannelMap(format!(
                "the engine is {} x {} but the client has {} input and {} output ports",
                engine.inputs(),
                engine.outputs(),
                ins.len(),
                outs.len()
            )));
        }
        let rate = client.sample_rate();
        let period = client.buffer_size();
        let latency = Box::new(LatencyPorts {
            ins: ins.iter().map(|p| PortPtr(p.raw())).collect(),
            outs: outs.iter().map(|p| PortPtr(p.raw())).collect(),
            engine_frames: AtomicU32::new(engine.latency_frames() as u32),
        });
        // SAFETY: the client is valid and not yet active (JACK requires the callback to be set before
        // activation); `latency` is boxed, so its address is stable, and the `DuplexStream` keeps it
        // until after the client is closed (or leaks both when the client cannot be closed).
        let rc = unsafe {
            jack_sys::jack_set_latency_callback(
                client.raw(),
                Some(on_latency),
                &*latency as *const LatencyPorts as *mut libc::c_void,
            )
        };
        if rc != 0 {
            return Err(DeviceError::Jack(format!("cannot set the latency callback (error {rc})")));
        }
        let bridge_options = BridgeOptions { safety: options.safety, ..BridgeOptions::new(rate, 1, 1) };
        let shared = Arc::new(BridgeCells::new(rate, engine.latency_frames()));
        let cells = Arc::new(DuplexCells {
            rebuild_period: AtomicU32::new(0),
            rebuild_rate: AtomicU32::new(0),
            holding: AtomicBool::new(false),
            rebuilds: AtomicU64::new(0),
            period: AtomicU32::new(0),
            rate: AtomicU32::new(0),
        });
        let chunk = engine.max_host_frames().min(8192);
        let monitors = vec![engine.monitor()];
        let m = engine.inputs();
        let stage = Box::new(Stage::new(engine, chunk, &bridge_options));
        let (to_audio, incoming) = HeapRb::<Box<Stage>>::new(1).split();
        let (retired, from_audio) = HeapRb::<Box<Stage>>::new(2).split();
        let process = Process {
            shared: Arc::clone(&shared),
            cells: Arc::clone(&cells),
            ins,
            outs,
            stage: Some(stage),
            planar: vec![vec![0.0; chunk]; m],
            chunk,
            incoming,
            retired,
            realtime: options.realtime,
        };
        let notifications = Notifications { shared: Arc::clone(&shared), cells: Arc::clone(&cells) };
        let active =
            client.activate_async(notifications, process).map_err(|e| jack_error("activating the JACK client", e))?;
        let name = active.as_client().name().to_string();
        let mut connections = Vec::new();
        if options.connect {
            let c = active.as_client();
            for (k, &d) in map.inputs.iter().enumerate() {
                if let Some(src) = capture_ports.get(d) {
                    let dst = format!("{name}:in_{}", k + 1);
                    c.connect_ports_by_name(src, &dst).map_err(|e| jack_error(&format!("connecting {src}"), e))?;
                    connections.push((src.clone(), dst));
                }
            }
            for (d, o) in map.outputs.iter().enumerate() {
                if let (Some(o), Some(dst)) = (o, playback_ports.get(d)) {
                    let src = format!("{name}:out_{}", o + 1);
                    c.connect_ports_by_name(&src, dst).map_err(|e| jack_error(&format!("connecting {dst}"), e))?;
                    connections.push((src, dst.clone()));
                }
            }
        }
        let mut stream = DuplexStream {
            client: Some(active),
            latency: Some(latency),
            shared,
            cells,
            to_audio,
            from_audio,
            rebuild,
            monitors,
            info: DuplexInfo { client: name, sample_rate_hz: rate, period_frames: period, connections },
            watch: Watchdog::new(),
            rebuild_error: None,
        };
        stream.settle_latency();
        stream.record_latency();
        Ok(stream)
    }
}

/// What a started duplex stream runs with.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DuplexInfo {
    /// The client's name.
    pub client: String,
    /// Sample rate at start, Hz.
    pub sample_rate_hz: u32,
    /// Period at start, frames.
    pub period_frames: u32,
    /// Connections made, `(source, destination)` port names.
    pub connections: Vec<(String, String)>,
}

/// Input-to-output latency as JACK reports it for the connected ports, frames.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct DuplexLatency {
    /// Capture latency of the ports feeding our inputs (largest).
    pub capture_frames: u32,
    /// The engine's latency.
    pub engine_frames: u32,
    /// Playback latency of the ports our outputs feed (largest).
    pub playback_frames: u32,
}

impl DuplexLatency {
    /// The total, frames.
    pub fn total_frames(&self) -> u32 {
        self.capture_frames + self.engine_frames + self.playback_frames
    }
}

/// The longest [`JackDuplex::start`] waits for JACK to recompute the latencies of new connections.
const LATENCY_SETTLE: std::time::Duration = std::time::Duration::from_millis(500);

/// A running duplex JACK client. Dropping it closes the client (with a bounded wait, so a dead server
/// cannot hang the caller).
pub struct DuplexStream {
    client: Option<jack::AsyncClient<Notifications, Process>>,
    latency: Option<Box<LatencyPorts>>,
    shared: Arc<BridgeCells>,
    cells: Arc<DuplexCells>,
    to_audio: HeapProd<Box<Stage>>,
    from_audio: HeapCons<Box<Stage>>,
    rebuild: RebuildFn,
    /// Monitors of every engine the stream has run (the current one last): counters of retired
    /// engines stay in the totals.
    monitors: Vec<Monitor>,
    info: DuplexInfo,
    watch: Watchdog,
    rebuild_error: Option<String>,
}

impl std::fmt::Debug for DuplexStream {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("DuplexStream").field("info", &self.info).finish_non_exhaustive()
    }
}

impl DuplexStream {
    /// What the stream started with.
    pub fn info(&self) -> &DuplexInfo {
        &self.info
    }

    /// The input-to-output latency JACK reports for our ports: the capture latency on our output
    /// ports (which our latency callback sets to the upstream capture latency plus the engine's) plus
    /// the playback latency of the ports we feed.
    pub fn latency(&self) -> DuplexLatency {
        let Some(l) = &self.latency else { return DuplexLatency::default() };
        let engine = l.engine_frames.load(Relaxed);
        let capture = l.ins.iter().map(|p| LatencyPorts::range(p, jack_sys::JackCaptureLatency).1).max();
        let playback = l.outs.iter().map(|p| LatencyPorts::range(p, jack_sys::JackPlaybackLatency).1).max();
        DuplexLatency {
            capture_frames: capture.unwrap_or(0),
            engine_frames: engine,
            playback_frames: playback.unwrap_or(0),
        }
    }

    /// After connecting: waits until the server has recomputed our ports' latencies for the connections
    /// just made, so the figures read at start are theirs (the server does it after the connections, on its
    /// own thread, and under load a read right after connecting can come first). Settled means the same figures
    /// twice 20 ms apart, nonzero on each side that has connections; at most [`LATENCY_SETTLE`].
    fn settle_latency(&self) {
        let (ins, outs) = {
            let mine = format!("{}:", self.info.client);
            let c = &self.info.connections;
            (c.iter().any(|(_, b)| b.starts_with(&mine)), c.iter().any(|(a, _)| a.starts_with(&mine)))
        };
        if !ins && !outs {
            return;
        }
        let deadline = std::time::Instant::now() + LATENCY_SETTLE;
        let mut last = self.latency();
        while std::time::Instant::now() < deadline {
            std::thread::sleep(std::time::Duration::from_millis(20));
            let now = self.latency();
            let filled = (!ins || now.capture_frames > 0) && (!outs || now.playback_frames > 0);
            if now == last && filled {
                break;
            }
            last = now;
        }
    }

    fn record_latency(&mut self) {
        let total = self.latency().total_frames();
        let rate = match self.cells.rate.load(Relaxed) {
            0 => self.info.sample_rate_hz,
            r => r,
        };
        self.shared.record_latency((f64::from(total) * 1e9 / f64::from(rate)) as u64);
    }

    /// A snapshot of the counters (the latency figures are JACK's port latencies, sampled at each
    /// [`poll`](Self::poll)).
    pub fn stats(&self) -> Stats {
        let late = self.monitors.iter().map(Monitor::late_results).sum::<u64>();
        let cpu = self.monitors.iter().map(Monitor::worker_cpu_seconds).sum::<f64>();
        self.shared.snapshot(late, cpu)
    }

    /// Input and output peaks since the last call.
    pub fn take_peaks(&self) -> Peaks {
        self.shared.take_peaks()
    }

    /// Ends a safety mute (see [`BridgeHandle::unmute`](crate::BridgeHandle::unmute)).
    pub fn unmute(&self) {
        self.shared.unmute.store(true, Relaxed);
    }

    /// Rebuilds done after a rate or period change.
    pub fn rebuilds(&self) -> u64 {
        self.cells.rebuilds.load(Relaxed)
    }

    /// The control thread's part; call it a few times a second. Serves a rebuild request, drops
    /// engines the callback retired, samples the latency, and returns the fault that ended the stream's
    /// usefulness, if any: the server went away, a rebuild failed, or the callback stopped for a
    /// second.
    pub fn poll(&mut self) -> Option<Fault> {
        // Engines the callback handed back: dropped here (their worker threads are joined here too).
        while let Some(old) = self.from_audio.try_pop() {
            drop(old);
        }
        let period = self.cells.rebuild_period.swap(0, Acquire);
        if period != 0 && self.to_audio.is_empty() {
            let rate = match self.cells.rebuild_rate.swap(0, Relaxed) {
                0 => self.cells.rate.load(Relaxed),
                r => r,
            };
            match (self.rebuild)(rate, period as usize) {
                Ok(engine) => {
                    let bridge_options = BridgeOptions::new(rate, 1, 1);
                    let chunk = engine.max_host_frames().min(8192);
                    if let Some(l) = &self.latency {
                        l.engine_frames.store(engine.latency_frames() as u32, Relaxed);
                    }
                    self.monitors.push(engine.monitor());
                    let stage = Box::new(Stage::new(engine, chunk, &bridge_options));
                    // Cannot be full: it was checked empty above, and only this thread pushes.
                    let _ = self.to_audio.try_push(stage);
                    self.cells.rebuilds.fetch_add(1, Relaxed);
                    if let Some(c) = &self.client {
                        // SAFETY: the client is alive (we hold it); JACK then calls our latency callback.
                        unsafe { jack_sys::jack_recompute_total_latencies(c.as_client().raw()) };
                    }
                }
                Err(e) => {
                    self.rebuild_error = Some(e);
                    self.shared.set_fault(Fault::RebuildFailed);
                }
            }
        } else if period != 0 {
            // A hand-over is still pending: ask again on the next poll.
            self.cells.rebuild_period.store(period, Release);
        }
        self.record_latency();
        if let Some(f) = self.shared.fault() {
            return Some(f);
        }
        if self.watch.stalled(self.shared.callbacks_out.load(Relaxed)) {
            self.shared.set_fault(Fault::Stalled(Direction::Output));
            return self.shared.fault();
        }
        None
    }

    /// Why the last rebuild failed, if one did.
    pub fn rebuild_error(&self) -> Option<&str> {
        self.rebuild_error.as_deref()
    }

    /// Test hook (feature `test-hooks`): the next callback spins for `stall` before its work.
    #[cfg(feature = "test-hooks")]
    pub fn stall_next_callback(&self, stall: Duration) {
        self.shared.stall_ns.store(stall.as_nanos() as u64, Relaxed);
    }

    /// Test hook (feature `test-hooks`): the engine's next output gets a NaN before the safety stage.
    #[cfg(feature = "test-hooks")]
    pub fn inject_nonfinite_output(&self) {
        self.shared.inject_nonfinite.store(true, Relaxed);
    }

    /// Closes the client and returns the final counters. Waits at most about a second for the server.
    pub fn stop(mut self) -> Stats {
        self.close();
        self.stats()
    }

    fn close(&mut self) {
        let Some(client) = self.client.take() else { return };
        let latency = self.latency.take();
        // On timeout the thread keeps the client and the latency context; both are then leaked with it,
        // never freed while JACK might still call back.
        let _ = off_thread_bounded(move || {
            drop(client);
            drop(latency);
        });
        while self.from_audio.try_pop().is_some() {}
    }
}

impl Drop for DuplexStream {
    fn drop(&mut self) {
        self.close();
    }
}

/// How long closing a JACK client may take before the caller goes on without it.
pub(crate) const CLOSE_WAIT: Duration = Duration::from_secs(1);

/// Runs `close` (deactivating and closing a JACK client) on a thread of its own and waits at most
/// [`CLOSE_WAIT`]: a dead server may never let go of a client. Returns `None` on timeout, when the thread
/// keeps whatever `close` owns (leaked rather than freed while JACK might still call back), or when no
/// thread could be started (then `close` was dropped unrun, with what it owns).
pub(crate) fn off_thread_bounded<T: Send + 'static>(close: impl FnOnce() -> T + Send + 'static) -> Option<T> {
    let (tx, rx) = std::sync::mpsc::channel();
    std::thread::Builder::new()
        .name("partita-jack-close".into())
        .spawn(move || {
            let _ = tx.send(close());
        })
        .ok()?;
    rx.recv_timeout(CLOSE_WAIT).ok()
}

/// A new client `name` on the default JACK server (`JACK_DEFAULT_SERVER`), never starting one. `hint`
/// ends the error message (what else the user can do).
pub(crate) fn connect_client(name: &str, hint: &str) -> Result<Client, DeviceError> {
    let (client, _status) = Client::new(name, ClientOptions::NO_START_SERVER).map_err(|e| {
        DeviceError::Jack(format!(
            "cannot connect to a JACK server ({e}); is the JACK server running (JACK_DEFAULT_SERVER={})? Start \
             one with jackd or your desktop's sound server{hint}",
            std::env::var("JACK_DEFAULT_SERVER").unwrap_or_else(|_| "default".into())
        ))
    })?;
    Ok(client)
}

/// The server's physical audio ports: capture ports (sources of sound) and playback ports, in its order.
pub(crate) fn physical_ports(client: &Client) -> (Vec<String>, Vec<String>) {
    let audio = Some("32 bit float mono audio");
    (
        client.ports(None, audio, PortFlags::IS_PHYSICAL | PortFlags::IS_OUTPUT),
        client.ports(None, audio, PortFlags::IS_PHYSICAL | PortFlags::IS_INPUT),
    )
}
