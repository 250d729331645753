//! The test host: a small CLAP host on clack-host that loads the plugin (in-process through its clack
//! entry, or a built bundle), sets parameters, activates, processes host calls with parameter events and
//! counts the heap operations made on the process thread (partita-testkit's trap must be the test
//! binary's global allocator).
#![allow(dead_code)]

use std::ffi::CStr;
use std::sync::atomic::{AtomicBool, Ordering};

use clack_extensions::params::PluginParams;
use clack_host::events::event_types::ParamValueEvent;
use clack_host::prelude::*;
use partita_core::synth::Noise;
use partita_plugin::params::ParamId;

/// What the plugin asked of the host.
#[derive(Debug, Default)]
pub struct Requests {
    pub restart: AtomicBool,
    pub callback: AtomicBool,
}

impl SharedHandler<'_> for Requests {
    fn request_restart(&self) {
        self.restart.store(true, Ordering::SeqCst);
    }
    fn request_process(&self) {}
    fn request_callback(&self) {
        self.callback.store(true, Ordering::SeqCst);
    }
}

#[derive(Debug)]
pub struct TestHost;

impl HostHandlers for TestHost {
    type Shared<'a> = Requests;
    type MainThread<'a> = ();
    type AudioProcessor<'a> = ();
}

pub fn host_info() -> HostInfo {
    HostInfo::new("Partita test host", "The Partita developers", "https://example.invalid", "0.1.0").unwrap()
}

/// The plugin's entry linked into the test binary.
pub fn in_process_entry() -> PluginEntry {
    PluginEntry::load_from_clack::<partita_plugin::PartitaEntry>(c"/partita-test/partita.clap").unwrap()
}

pub fn new_instance(entry: &PluginEntry) -> PluginInstance<TestHost> {
    PluginInstance::<TestHost>::new(|_| Requests::default(), |_| (), entry, c"org.partita.convolution", &host_info())
        .unwrap()
}

/// A parameter change event at frame `time`.
pub fn change(time: u32, id: ParamId, value: f64) -> ParamValueEvent {
    ParamValueEvent::new(time, ClapId::new(id as u32), Pckn::match_all(), value)
}

/// Sets parameters of an inactive instance through the params extension's flush.
pub fn set_params(instance: &mut PluginInstance<TestHost>, values: &[(ParamId, f64)]) {
    let params: PluginParams = instance.plugin_handle().get_extension().expect("params extension");
    let mut buffer = EventBuffer::new();
    for &(id, v) in values {
        buffer.push(&change(0, id, v));
    }
    let mut out = EventBuffer::new();
    let mut handle = instance.inactive_plugin_handle().expect("inactive");
    params.flush(&mut handle, &buffer.as_input(), &mut OutputEvents::from_buffer(&mut out));
}

/// Runs the main-thread callback when the plugin asked for one.
pub fn main_thread_callback(instance: &mut PluginInstance<TestHost>) -> bool {
    let asked = instance.access_shared_handler(|r| r.callback.swap(false, Ordering::SeqCst));
    if asked {
        instance.call_on_main_thread_callback();
    }
    asked
}

pub fn restart_requested(instance: &PluginInstance<TestHost>) -> bool {
    instance.access_shared_handler(|r| r.restart.swap(false, Ordering::SeqCst))
}

pub fn activate(instance: &mut PluginInstance<TestHost>, rate: f64, max: u32) -> StartedPluginAudioProcessor<TestHost> {
    let config = PluginAudioConfiguration { sample_rate: rate, min_frames_count: 1, max_frames_count: max };
    instance.activate(|_, _| (), config).unwrap().start_processing().unwrap()
}

/// Seeded call sizes from 1 to `max`: 1, a few small odd sizes, then random ones (rarely powers of two).
pub fn random_sizes(seed: u64, max: usize) -> impl FnMut() -> usize {
    let mut noise = Noise::new(seed);
    let mut k = 0;
    move || {
        k += 1;
        match k {
            1 => 1,
            2 => 3,
            3 => max,
            4 => 1,
            _ => noise.range(1, max + 1).min(max),
        }
    }
}

/// A stream through a started processor: the buffers and event list preallocated so that each host call
/// allocates nothing on the host's side either.
pub struct Stream {
    pub max: usize,
    input: [Vec<f32>; 2],
    output: [Vec<f32>; 2],
    in_ports: AudioPorts,
    out_ports: AudioPorts,
    events: EventBuffer,
    out_events: EventBuffer,
    /// Heap operations counted on this (the process) thread during host calls.
    pub heap_ops: u64,
    /// Host calls made.
    pub calls: usize,
}

impl Stream {
    pub fn new(max: usize) -> Self {
        Self {
            max,
            input: [vec![0.0; max], vec![0.0; max]],
            output: [vec![0.0; max], vec![0.0; max]],
            in_ports: AudioPorts::with_capacity(2, 1),
            out_ports: AudioPorts::with_capacity(2, 1),
            events: EventBuffer::with_capacity(64),
            out_events: EventBuffer::with_capacity(64),
            heap_ops: 0,
            calls: 0,
        }
    }

    /// Processes `input` (two channels) in calls of `sizes()` frames, with `changes` (absolute frame,
    /// parameter, value) delivered as events inside the call that holds their frame. Returns the output.
    pub fn run(
        &mut self,
        processor: &mut StartedPluginAudioProcessor<TestHost>,
        input: &[Vec<f32>],
        mut sizes: impl FnMut() -> usize,
        changes: &[(usize, ParamId, f64)],
    ) -> [Vec<f32>; 2] {
        let total = input[0].len();
        let mut out = [vec![0.0f32; total], vec![0.0f32; total]];
        let mut at = 0;
        while at < total {
            let n = sizes().min(total - at).min(self.max);
            for (buf, x) in self.input.iter_mut().zip(input) {
                buf[..n].copy_from_slice(&x[at..at + n]);
            }
            self.events.clear();
            for &(frame, id, value) in changes.iter().filter(|c| c.0 >= at && c.0 < at + n) {
                self.events.push(&change((frame - at) as u32, id, value));
            }
            self.out_events.clear();
            let Self { input, output, in_ports, out_ports, events, out_events, .. } = self;
            let ((), ops) = partita_testkit::armed(|| {
                let ins = in_ports.with_input_buffers([AudioPortBuffer {
                    latency: 0,
                    channels: AudioPortBufferType::f32_input_only(
                        input.iter_mut().map(|b| InputChannel::variable(&mut b[..n])),
                    ),
                }]);
                let mut outs = out_ports.with_output_buffers([AudioPortBuffer {
                    latency: 0,
                    channels: AudioPortBufferType::f32_output_only(output.iter_mut().map(|b| &mut b[..n])),
                }]);
                processor
                    .process(
                        &ins,
                        &mut outs,
                        &events.as_input(),
                        &mut OutputEvents::from_buffer(out_events),
                        None,
                        None,
                    )
                    .unwrap();
            });
            self.heap_ops += ops;
            self.calls += 1;
            for (y, buf) in out.iter_mut().zip(&self.output) {
                y[at..at + n].copy_from_slice(&buf[..n]);
            }
            at += n;
        }
        out
    }
}

/// Seeded noise, two channels.
pub fn noise(frames: usize, seed: u64) -> Vec<Vec<f32>> {
    vec![Noise::new(seed).vec(frames), Noise::new(seed + 1000).vec(frames)]
}

/// The plugin's id as a C string.
pub const PLUGIN_ID: &CStr = c"org.partita.convolution";
