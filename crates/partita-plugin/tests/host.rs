//! The plugin in a CLAP host (clack-host, in-process through the plugin's clack entry), on the paths a DAW
//! takes: descriptor, parameters and ports; activation at 44.1 and 48 kHz with a maximum block of 1024 and
//! reactivation at a new rate; random host call sizes against the direct-form oracle of the chosen IR;
//! automation ramps; state saved and loaded bit-identically; an IR switched through preset-load with a
//! crossfade; offline rendering. Every host call runs with the allocation trap armed on the process
//! thread, and every test asserts that it counted nothing.

mod support;

use std::ffi::CString;
use std::path::{Path, PathBuf};
use std::sync::OnceLock;
use std::time::Instant;

use clack_extensions::audio_ports::{AudioPortInfoBuffer, PluginAudioPorts};
use clack_extensions::latency::PluginLatency;
use clack_extensions::params::{ParamInfoBuffer, ParamInfoFlags, PluginParams};
use clack_extensions::preset_discovery::prelude::*;
use clack_extensions::preset_discovery::provider::Provider;
use clack_extensions::render::{PluginRender, RenderMode};
use clack_extensions::state::PluginState;
use clack_extensions::state_context::{PluginStateContext, StateContextType};
use clack_extensions::tail::{PluginTail, TailLength};
use clack_host::prelude::*;
use partita_core::{naive, ImpulseResponse};
use partita_io::{write_wav, Dither, SampleFormat};
use partita_plugin::params::ParamId;
use partita_plugin::source::{engine_taps, make_ir, read_file_ir, IrSource, IR_FOLDER_ENV};
use partita_testkit::ErrorBound;
use support::*;

#[global_allocator]
static ALLOC: partita_testkit::TrapAllocator = partita_testkit::TrapAllocator;

/// The IR folder of these tests (set before any instance lists it): two stereo WAVs, a true-stereo one
/// and a mono one (24-bit).
fn ir_folder() -> &'static Path {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let dir = partita_testkit::scratch_dir(env!("CARGO_TARGET_TMPDIR"), "plugin", "irs");
        let taps = |seed: u64, frames: usize| partita_core::synth::decaying_noise(frames, 4000.0, seed);
        let four: Vec<Vec<f32>> = (0..4).map(|c| taps(10 + c, 9000)).collect();
        write_wav(&dir.join("b-true-stereo.wav"), &four, 48_000, SampleFormat::F32, Dither::default()).unwrap();
        let two: Vec<Vec<f32>> = (0..2).map(|c| taps(20 + c, 12_000)).collect();
        write_wav(&dir.join("a-stereo.wav"), &two, 48_000, SampleFormat::F32, Dither::default()).unwrap();
        let other: Vec<Vec<f32>> = (0..2).map(|c| taps(30 + c, 7000)).collect();
        write_wav(&dir.join("c-stereo.wav"), &other, 44_100, SampleFormat::F32, Dither::default()).unwrap();
        write_wav(&dir.join("d-mono.wav"), &[taps(40, 5000)], 48_000, SampleFormat::Pcm24, Dither::default()).unwrap();
        // Every test calls this before making an instance, so no instance reads the variable before it is set.
        std::env::set_var(IR_FOLDER_ENV, &dir);
        dir
    })
}

/// Output of the plugin by the direct form: `gain * (wet * (x conv h)[n - latency] + dry * x[n - latency])`
/// with `h` the engine's taps of `ir` (the pairs of its routing).
fn oracle(
    input: &[Vec<f32>],
    ir: &ImpulseResponse,
    latency: usize,
    (wet, dry): (f64, f64),
    total: usize,
) -> Vec<Vec<f64>> {
    let true_stereo = ir.channels() == 4;
    let taps = engine_taps(ir, true_stereo);
    let pairs: &[(usize, usize, usize)] =
        if true_stereo { &[(0, 0, 0), (0, 1, 1), (1, 0, 2), (1, 1, 3)] } else { &[(0, 0, 0), (1, 1, 1)] };
    let conv = naive::convolve_routed(input, taps.as_planar(), pairs, 2);
    (0..2)
        .map(|o| {
            (0..total)
                .map(|n| {
                    let Some(m) = n.checked_sub(latency) else { return 0.0 };
                    let w = conv[o].get(m).copied().unwrap_or(0.0);
                    let x = input[o].get(m).map_or(0.0, |&v| f64::from(v));
                    wet * w + dry * x
                })
                .collect()
        })
        .collect()
}

fn padded(x: &[Vec<f32>], total: usize) -> Vec<Vec<f32>> {
    x.iter().map(|c| c.iter().copied().chain(std::iter::repeat(0.0)).take(total).collect()).collect()
}

fn latency_of(instance: &mut PluginInstance<TestHost>) -> usize {
    let ext: PluginLatency = instance.plugin_handle().get_extension().unwrap();
    ext.get(&instance.plugin_handle()) as usize
}

fn preset_load(instance: &mut PluginInstance<TestHost>, path: &Path) {
    let ext: PluginPresetLoad = instance.plugin_handle().get_extension().expect("preset-load extension");
    let c = CString::new(path.to_str().unwrap()).unwrap();
    ext.load_from_location(&instance.plugin_handle(), Location::File { path: &c }, None).expect("preset loaded");
}

#[test]
fn descriptor_ports_parameters_and_discovery_are_as_documented() {
    let folder = ir_folder();
    let entry = in_process_entry();
    let factory = entry.get_plugin_factory().unwrap();
    let d = factory.plugin_descriptors().next().unwrap();
    assert_eq!(d.id().unwrap(), PLUGIN_ID);
    assert_eq!(d.name().unwrap().to_str().unwrap(), "Partita Convolution");
    let features: Vec<String> = d.features().map(|f| f.to_string_lossy().into_owned()).collect();
    assert_eq!(features, ["audio-effect", "reverb", "stereo"]);

    let mut instance = new_instance(&entry);
    let handle = instance.plugin_handle();
    let ports: PluginAudioPorts = handle.get_extension().unwrap();
    for is_input in [true, false] {
        assert_eq!(ports.count(&handle, is_input), 1);
        let mut buf = AudioPortInfoBuffer::new();
        let info = ports.get(&handle, 0, is_input, &mut buf).unwrap();
        assert_eq!(info.channel_count, 2);
    }
    let params: PluginParams = handle.get_extension().unwrap();
    let mut seen = Vec::new();
    for i in 0..params.count(&handle) {
        let mut buf = ParamInfoBuffer::new();
        let info = params.get_info(&handle, i, &mut buf).unwrap();
        let name = String::from_utf8_lossy(info.name).into_owned();
        seen.push((info.id.get(), name, info.min_value, info.max_value, info.default_value));
        assert_eq!(params.get_value(&handle, info.id), Some(info.default_value), "a new instance has the defaults");
        let automatable = info.flags.contains(ParamInfoFlags::IS_AUTOMATABLE);
        assert_eq!(automatable, info.id.get() <= 4, "only the mix parameters are automatable");
    }
    let want: Vec<(u32, String, f64, f64, f64)> = [
        (0, "Wet", 0.0, 100.0, 30.0),
        (1, "Dry", 0.0, 100.0, 100.0),
        (2, "Pre-delay", 0.0, 250.0, 0.0),
        (3, "Output gain", -24.0, 12.0, 0.0),
        (4, "Bypass", 0.0, 1.0, 0.0),
        (5, "Latency", 0.0, 5.0, 0.0),
        (6, "Space", 0.0, 3.0, 0.0),
        (7, "Room volume", 20.0, 20_000.0, 800.0),
        (8, "Reverb time", 0.2, 8.0, 1.6),
        (9, "HF decay", 0.2, 1.0, 0.6),
        (10, "IR file", 0.0, 4.0, 0.0),
    ]
    .into_iter()
    .map(|(i, n, a, b, c)| (i, n.to_string(), a, b, c))
    .collect();
    assert_eq!(seen, want);
    let text = |id: ParamId, v: f64| {
        let mut buf = [0u8; 64];
        let s = params.value_to_text(&handle, ClapId::new(id as u32), v, &mut buf).unwrap();
        String::from_utf8_lossy(s).into_owned()
    };
    assert_eq!(text(ParamId::Space, 2.0), "Timber barn");
    assert_eq!(text(ParamId::Latency, 0.0), "Zero latency");
    assert_eq!(text(ParamId::IrFile, 2.0), "b-true-stereo");
    assert_eq!(text(ParamId::OutputGain, -3.0), "-3.0 dB");
    assert_eq!(params.text_to_value(&handle, ClapId::new(ParamId::Space as u32), c"tiled stairwell"), Some(1.0));

    // The preset-discovery provider declares WAV files and the IR folder, and names a file after it.
    #[derive(Default)]
    struct Indexer(Vec<String>, Vec<String>);
    impl IndexerImpl for Indexer {
        fn declare_filetype(&mut self, t: FileType) -> Result<(), HostError> {
            self.0.push(t.file_extension.unwrap().to_string_lossy().into_owned());
            Ok(())
        }
        fn declare_location(&mut self, l: LocationInfo) -> Result<(), HostError> {
            self.1.push(l.location.file_path().unwrap().to_string_lossy().into_owned());
            Ok(())
        }
        fn declare_soundpack(&mut self, _: Soundpack) -> Result<(), HostError> {
            Ok(())
        }
    }
    #[derive(Default)]
    struct Receiver(Vec<String>);
    impl MetadataReceiverImpl for Receiver {
        fn on_error(&mut self, _: i32, _: Option<&std::ffi::CStr>) {}
        fn begin_preset(&mut self, name: Option<&std::ffi::CStr>, _: Option<&std::ffi::CStr>) -> Result<(), HostError> {
            self.0.push(name.unwrap().to_string_lossy().into_owned());
            Ok(())
        }
        fn add_plugin_id(&mut self, id: UniversalPluginId) {
            self.0.push(id.id.to_string_lossy().into_owned());
        }
        fn set_soundpack_id(&mut self, _: &std::ffi::CStr) {}
        fn set_flags(&mut self, _: Flags) {}
        fn add_creator(&mut self, _: &std::ffi::CStr) {}
        fn set_description(&mut self, _: &std::ffi::CStr) {}
        fn set_timestamps(&mut self, _: Option<Timestamp>, _: Option<Timestamp>) {}
        fn add_feature(&mut self, _: &std::ffi::CStr) {}
        fn add_extra_info(&mut self, _: &std::ffi::CStr, _: &std::ffi::CStr) {}
    }
    let factory: PresetDiscoveryFactory = entry.get_factory().unwrap();
    let provider_id = factory.provider_descriptors().next().unwrap().id().unwrap().to_owned();
    let mut provider = Provider::instantiate(Indexer::default(), &entry, &provider_id, &host_info()).unwrap();
    assert_eq!(provider.indexer().0, ["wav"]);
    assert_eq!(provider.indexer().1, [folder.to_string_lossy().into_owned()]);
    let file = CString::new(folder.join("a-stereo.wav").to_str().unwrap()).unwrap();
    let mut receiver = Receiver::default();
    provider.get_metadata(Location::File { path: &file }, &mut receiver);
    assert_eq!(receiver.0, ["a-stereo", "org.partita.convolution"]);
}

/// Random host calls (1 frame, odd sizes, up to 1024) against the direct form: the default mix on the
/// default custom room (a short reverb time, so the oracle is quick), and wet only on a true-stereo and a
/// mono WAV loaded through preset-load; at 44.1 and 48 kHz (deactivated and reactivated at the new rate),
/// with zero latency and a 256-frame block. Nothing is allocated on the process thread.
#[test]
fn host_calls_match_the_direct_form_at_both_rates_and_latency_modes() {
    let folder = ir_folder();
    let entry = in_process_entry();
    let mut heap_ops = 0;
    let mut worst = (0.0f64, 0.0f64);
    for wav in [None, Some("b-true-stereo.wav"), Some("d-mono.wav")] {
        let mut instance = new_instance(&entry);
        let (source, mix) = if let Some(name) = wav {
            let path = folder.join(name);
            preset_load(&mut instance, &path);
            set_params(&mut instance, &[(ParamId::Wet, 100.0), (ParamId::Dry, 0.0)]);
            (IrSource::File(read_file_ir(&path).unwrap()), (1.0, 0.0))
        } else {
            set_params(&mut instance, &[(ParamId::ReverbTime, 0.35)]);
            (IrSource::Space { index: 0, custom: (800.0, 0.35, 0.6) }, (0.3, 1.0))
        };
        for (latency_index, latency) in [(0.0, 0), (3.0, 256)] {
            set_params(&mut instance, &[(ParamId::Latency, latency_index)]);
            for rate in [44_100u32, 48_000] {
                let ir = make_ir(&source, rate).unwrap();
                let mut processor = activate(&mut instance, f64::from(rate), 1024);
                assert_eq!(latency_of(&mut instance), latency);
                let frames = rate as usize / 3;
                let total = frames + ir.frames() + latency + 100;
                let input = padded(&noise(frames, u64::from(rate)), total);
                let mut stream = Stream::new(1024);
                let got = stream.run(&mut processor, &input, random_sizes(u64::from(rate) + 7, 1024), &[]);
                heap_ops += stream.heap_ops;
                let want = oracle(&input, &ir, latency, mix, total);
                for o in 0..2 {
                    let e = ErrorBound::measure(&got[o], &want[o]);
                    worst = (worst.0.max(e.max_over_peak), worst.1.max(e.relative_rms));
                    e.assert_design_bound(&format!("{wav:?}, {rate} Hz, latency {latency}, output {o}"));
                }
                instance.deactivate(processor.stop_processing());
            }
        }
    }
    println!("worst error: max {:.2e} of the peak, relative RMS {:.2e}", worst.0, worst.1);
    println!("heap operations on the process thread: {heap_ops}");
    assert_eq!(heap_ops, 0, "the plugin's audio path touched the heap");
}

/// Automation: on a constant input with wet 0, dry and output gain changes and bypass ramp linearly over
/// 10 ms (the engine's parameter ramp) from within one engine block after the event's frame: no step
/// between samples is larger than the change over the ramp's length, and each reaches its target.
#[test]
fn parameter_events_ramp_without_steps() {
    ir_folder();
    let entry = in_process_entry();
    let mut instance = new_instance(&entry);
    set_params(&mut instance, &[(ParamId::Wet, 0.0), (ParamId::ReverbTime, 0.3)]);
    let rate = 44_100.0;
    let mut processor = activate(&mut instance, rate, 1024);
    let ramp = (0.010 * rate) as usize; // 441 frames
    let block = 64; // zero-latency mode's engine block
    let total = 30_000;
    let input = vec![vec![0.5f32; total]; 2];
    let changes = [
        (4000, ParamId::Dry, 0.0),
        (10_000, ParamId::Dry, 100.0),
        (16_000, ParamId::OutputGain, -12.0),
        (22_000, ParamId::Bypass, 1.0),
    ];
    let mut stream = Stream::new(1024);
    let got = stream.run(&mut processor, &input, random_sizes(5, 700), &changes);
    let g = 10f64.powf(-12.0 / 20.0);
    for y in &got {
        let y: Vec<f64> = y.iter().map(|&v| f64::from(v)).collect();
        let largest_change = 0.5f64.max(0.5 * (1.0 - g));
        let step = y.windows(2).map(|w| (w[1] - w[0]).abs()).fold(0.0, f64::max);
        assert!(step <= largest_change / ramp as f64 * 1.001, "step {step} > {}", largest_change / ramp as f64);
        // The first change: flat until the event, then it moves within one block.
        let start = y.iter().position(|&v| (v - 0.5).abs() > 1e-6).unwrap();
        assert!((4000..4000 + block).contains(&start), "dry change starts at {start}");
        assert!(y[4000 + block + ramp..10_000].iter().all(|&v| v.abs() < 1e-6), "dry 0 reached");
        assert!(y[10_000 + block + ramp..16_000].iter().all(|&v| (v - 0.5).abs() < 1e-6), "dry 100 % reached");
        assert!(y[16_000 + block + ramp..22_000].iter().all(|&v| (v - 0.5 * g).abs() < 1e-6), "-12 dB reached");
        assert!(y[22_000 + block + ramp..].iter().all(|&v| (v - 0.5).abs() < 1e-6), "bypass: the input alone");
    }
    assert_eq!(stream.heap_ops, 0);
    instance.deactivate(processor.stop_processing());
}

/// A project save (parameters, the WAV path and its samples) loaded into a new instance gives
/// bit-identical output; a preset save stores the path alone; a state from a newer version is refused.
#[test]
fn state_round_trips_bit_identically_and_refuses_newer_versions() {
    let folder = ir_folder();
    let entry = in_process_entry();
    let mut a = new_instance(&entry);
    // The file is copied so that it can vanish: the project must not need it.
    let copy = folder.join("gone.wav.tmp");
    std::fs::copy(folder.join("c-stereo.wav"), &copy).unwrap();
    preset_load(&mut a, &copy);
    let values = [(ParamId::Wet, 55.0), (ParamId::Dry, 40.0), (ParamId::PreDelay, 12.5), (ParamId::OutputGain, -4.0)];
    set_params(&mut a, &values);
    let context: PluginStateContext = a.plugin_handle().get_extension().unwrap();
    let mut project = Vec::new();
    context.save(&a.plugin_handle(), &mut project, StateContextType::ForProject).unwrap();
    let mut preset = Vec::new();
    context.save(&a.plugin_handle(), &mut preset, StateContextType::ForPreset).unwrap();
    assert!(project.len() > preset.len() + 7000 * 2 * 4, "the project embeds the samples");
    std::fs::remove_file(&copy).unwrap();

    let mut b = new_instance(&entry);
    let state: PluginState = b.plugin_handle().get_extension().unwrap();
    state.load(&b.plugin_handle(), &mut project.as_slice()).unwrap();
    let params: PluginParams = b.plugin_handle().get_extension().unwrap();
    for (id, v) in values {
        assert_eq!(params.get_value(&b.plugin_handle(), ClapId::new(id as u32)), Some(v));
    }
    // The preset save names the file, which is gone: refused, and nothing changes.
    let mut c = new_instance(&entry);
    let state_c: PluginState = c.plugin_handle().get_extension().unwrap();
    assert!(state_c.load(&c.plugin_handle(), &mut preset.as_slice()).is_err());

    let input = noise(20_000, 9);
    let mut outputs = Vec::new();
    for instance in [&mut a, &mut b] {
        let mut processor = activate(instance, 48_000.0, 512);
        let mut stream = Stream::new(512);
        outputs.push(stream.run(&mut processor, &input, random_sizes(3, 512), &[]));
        assert_eq!(stream.heap_ops, 0);
        instance.deactivate(processor.stop_processing());
    }
    assert!(outputs[0][0].iter().any(|&v| v != 0.0));
    assert!(outputs[0] == outputs[1], "loaded state sounds different");

    let mut newer = project.clone();
    newer[8..12].copy_from_slice(&(partita_plugin::state::STATE_VERSION + 1).to_le_bytes());
    let mut d = new_instance(&entry);
    let state_d: PluginState = d.plugin_handle().get_extension().unwrap();
    assert!(state_d.load(&d.plugin_handle(), &mut newer.as_slice()).is_err(), "a newer state is refused");
}

/// Switching the IR through preset-load while processing: the output is the old IR's direct form before
/// the switch, the new one's after the crossfade, and in between moves monotonically from one to the
/// other over the documented 100 ms (it starts once every result released before the switch is out).
#[test]
fn preset_load_switches_the_ir_with_a_crossfade() {
    let folder = ir_folder();
    let entry = in_process_entry();
    let mut instance = new_instance(&entry);
    set_params(&mut instance, &[(ParamId::Wet, 100.0), (ParamId::Dry, 0.0), (ParamId::ReverbTime, 0.25)]);
    let rate = 48_000u32;
    let ir_a = make_ir(&IrSource::Space { index: 0, custom: (800.0, 0.25, 0.6) }, rate).unwrap();
    let path_b = folder.join("a-stereo.wav");
    let ir_b = make_ir(&IrSource::File(read_file_ir(&path_b).unwrap()), rate).unwrap();
    let mut processor = activate(&mut instance, f64::from(rate), 1024);
    let total = 130_000;
    let input = noise(total, 17);
    let switch_at = 20_000;
    let mut stream = Stream::new(1024);
    let mut got = stream.run(
        &mut processor,
        &[input[0][..switch_at].to_vec(), input[1][..switch_at].to_vec()],
        random_sizes(1, 1024),
        &[],
    );
    preset_load(&mut instance, &path_b);
    let rest = stream.run(
        &mut processor,
        &[input[0][switch_at..].to_vec(), input[1][switch_at..].to_vec()],
        random_sizes(2, 1024),
        &[],
    );
    for c in 0..2 {
        got[c].extend_from_slice(&rest[c]);
    }
    assert_eq!(stream.heap_ops, 0);
    let ya = oracle(&input, &ir_a, 0, (1.0, 0.0), total);
    let yb = oracle(&input, &ir_b, 0, (1.0, 0.0), total);
    let fade = (0.1 * f64::from(rate)) as usize;
    for o in 0..2 {
        ErrorBound::measure(&got[o][..switch_at], &ya[o][..switch_at]).assert_design_bound("before the switch");
        // The crossfade starts where the last result released before the switch ends (at most the planned
        // IR length, one second, later).
        let settled = switch_at + rate as usize + fade;
        ErrorBound::measure(&got[o][settled..], &yb[o][settled..]).assert_design_bound("after the crossfade");
        // The weight of the new IR where the two outputs differ clearly.
        let peak = yb[o].iter().fold(0.0f64, |m, v| m.max(v.abs()));
        let w: Vec<(usize, f64)> = (switch_at..settled)
            .filter(|&n| (yb[o][n] - ya[o][n]).abs() > 0.2 * peak)
            .map(|n| (n, (f64::from(got[o][n]) - ya[o][n]) / (yb[o][n] - ya[o][n])))
            .collect();
        assert!(w.iter().all(|&(_, w)| (-1e-3..=1.0 + 1e-3).contains(&w)), "weights outside [0, 1]");
        assert!(w.windows(2).all(|p| p[1].1 >= p[0].1 - 1e-3), "the crossfade goes one way");
        let first = w.iter().find(|p| p.1 > 0.01).unwrap().0;
        let last = w.iter().rev().find(|p| p.1 < 0.99).unwrap().0;
        assert!(last - first <= fade && last - first >= fade * 8 / 10, "crossfade over {} frames", last - first);
    }
    instance.deactivate(processor.stop_processing());
}

/// The host's offline render (the render extension): 20 s of audio through the 3-second timber barn in
/// calls of 1024 frames, faster than real time, and no result dropped: 400 output samples spread over the
/// whole render match the direct form.
#[test]
fn offline_render_is_faster_than_real_time_and_drops_nothing() {
    ir_folder();
    let entry = in_process_entry();
    let mut instance = new_instance(&entry);
    set_params(&mut instance, &[(ParamId::Space, 2.0), (ParamId::Latency, 5.0)]);
    let render: PluginRender = instance.plugin_handle().get_extension().unwrap();
    render.set(&instance.plugin_handle(), RenderMode::Offline).unwrap();
    let rate = 48_000u32;
    let ir = make_ir(&IrSource::Space { index: 2, custom: (0.0, 0.0, 0.0) }, rate).unwrap();
    let mut processor = activate(&mut instance, f64::from(rate), 1024);
    let latency = latency_of(&mut instance);
    assert_eq!(latency, 1024);
    let seconds = 20.0;
    let total = (seconds * f64::from(rate)) as usize;
    let input = noise(total, 77);
    let mut stream = Stream::new(1024);
    let start = Instant::now();
    let got = stream.run(&mut processor, &input, || 1024, &[]);
    let elapsed = start.elapsed().as_secs_f64();
    println!("offline: {seconds} s of audio in {elapsed:.2} s: {:.1}x real time", seconds / elapsed);
    assert!(elapsed < seconds, "offline render slower than real time: {elapsed} s");
    assert_eq!(stream.heap_ops, 0);
    let mut picks = partita_core::synth::Noise::new(4);
    let at: Vec<usize> = (0..400).map(|_| picks.range(latency, total)).collect();
    for o in 0..2 {
        let h = ir.channel(o);
        let want: Vec<f64> = at
            .iter()
            .map(|&n| {
                let m = n - latency;
                let wet: f64 = (0..h.len().min(m + 1)).map(|k| f64::from(h[k]) * f64::from(input[o][m - k])).sum();
                0.3 * wet + f64::from(input[o][m])
            })
            .collect();
        let ours: Vec<f32> = at.iter().map(|&n| got[o][n]).collect();
        ErrorBound::measure(&ours, &want).assert_design_bound("offline render");
    }
    instance.deactivate(processor.stop_processing());
}

/// Latency and tail: the latency mode is applied at activation only (a change while active asks the host
/// for a restart); the tail is the IR length plus the pre-delay; the render mode asks for a restart too;
/// an IR file chosen with the IR file parameter while active swaps in (same routing) or asks for a
/// restart (true stereo after stereo).
#[test]
fn latency_tail_and_restarts() {
    ir_folder();
    let entry = in_process_entry();
    let mut instance = new_instance(&entry);
    set_params(&mut instance, &[(ParamId::ReverbTime, 0.4), (ParamId::PreDelay, 20.0)]);
    let mut processor = activate(&mut instance, 48_000.0, 256);
    assert_eq!(latency_of(&mut instance), 0);
    let ir = make_ir(&IrSource::Space { index: 0, custom: (800.0, 0.4, 0.6) }, 48_000).unwrap();
    let tail: PluginTail = processor.plugin_handle().get_extension().unwrap();
    assert_eq!(tail.get(&processor.plugin_handle()), TailLength::Finite(ir.frames() as u32 + 960));

    let mut stream = Stream::new(256);
    let input = noise(4096, 3);
    stream.run(&mut processor, &input, || 256, &[(100, ParamId::Latency, 4.0)]);
    assert!(main_thread_callback(&mut instance), "the audio thread asked for the main thread");
    assert!(restart_requested(&instance), "a new latency mode needs a restart");
    assert_eq!(latency_of(&mut instance), 0, "unchanged until reactivation");
    instance.deactivate(processor.stop_processing());
    let mut processor = activate(&mut instance, 48_000.0, 256);
    assert_eq!(latency_of(&mut instance), 512);

    // A stereo file swaps in without a restart; the true-stereo one needs another engine.
    stream.run(&mut processor, &input, || 256, &[(10, ParamId::IrFile, 1.0)]);
    assert!(main_thread_callback(&mut instance));
    assert!(!restart_requested(&instance), "a stereo IR fits the running engine");
    stream.run(&mut processor, &input, || 256, &[(10, ParamId::IrFile, 2.0)]);
    assert!(main_thread_callback(&mut instance));
    assert!(restart_requested(&instance), "true stereo after stereo needs a restart");
    assert_eq!(stream.heap_ops, 0);
    instance.deactivate(processor.stop_processing());
    let mut processor = activate(&mut instance, 48_000.0, 256);
    let render: PluginRender = instance.plugin_handle().get_extension().unwrap();
    render.set(&instance.plugin_handle(), RenderMode::Offline).unwrap();
    assert!(restart_requested(&instance), "offline rendering plans anew");
    let _ = &mut processor;
    instance.deactivate(processor.stop_processing());
}

/// The trap sees the plugin's own code through the host calls: a plugin call that allocates (formatting a
/// parameter's text, a main-thread call) counts, so the zero counts of the audio path above are real.
#[test]
fn the_trap_counts_allocations_made_inside_the_plugin() {
    ir_folder();
    let entry = in_process_entry();
    let mut instance = new_instance(&entry);
    let handle = instance.plugin_handle();
    let params: PluginParams = handle.get_extension().unwrap();
    let mut buf = [0u8; 64];
    let (text, ops) = partita_testkit::armed(|| {
        params.value_to_text(&handle, ClapId::new(ParamId::Space as u32), 1.0, &mut buf).map(|s| s.len())
    });
    assert_eq!(text.unwrap(), "Tiled stairwell".len());
    assert!(ops >= 1, "the trap missed the plugin's allocation");
}
