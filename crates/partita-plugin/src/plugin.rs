//! The plugin's main-thread side and its CLAP extensions: parameters, state, latency, audio ports, render
//! mode, preset loading. Everything here may allocate; loading and preparing an IR happens here (never on
//! the audio thread) and reaches the engine through `Control::swap` with a crossfade.

use std::cell::{Cell, RefCell};
use std::ffi::CStr;
use std::fmt::Write as _;
use std::io::{Read, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicU32, Ordering};
use std::sync::Arc;

use clack_extensions::audio_ports::{
    AudioPortFlags, AudioPortInfo, AudioPortInfoWriter, AudioPortType, PluginAudioPorts, PluginAudioPortsImpl,
};
use clack_extensions::latency::{PluginLatency, PluginLatencyImpl};
use clack_extensions::params::{
    HostParams, ParamDisplayWriter, ParamInfo, ParamInfoFlags, ParamInfoWriter, ParamRescanFlags,
    PluginMainThreadParams, PluginParams,
};
use clack_extensions::preset_discovery::prelude::{HostPresetLoad, Location, PluginPresetLoad, PluginPresetLoadImpl};
use clack_extensions::render::{PluginRender, PluginRenderImpl, RenderMode};
use clack_extensions::state::{PluginState, PluginStateImpl};
use clack_extensions::state_context::{PluginStateContext, PluginStateContextImpl, StateContextType};
use clack_extensions::tail::PluginTail;
use clack_plugin::events::event_types::ParamValueEvent;
use clack_plugin::prelude::*;
use clack_plugin::stream::{InputStream, OutputStream};
use partita_core::{Control, Event};

use crate::activation::mix_command;
use crate::params::{latency_name, parse_value, write_value, ParamId, ParamValues, Unit, PARAMS};
use crate::processor::Processor;
use crate::source::{engine_taps, ir_folder, make_ir, read_file_ir, wav_files, FileIr, IrSource, SPACE_NAMES};
use crate::state::{SavedFile, SavedState};

/// The plugin's stable CLAP id.
pub const PLUGIN_ID: &str = "org.partita.convolution";

/// The name hosts show.
pub const PLUGIN_NAME: &str = "Partita Convolution";

/// Crossfade of an IR switch, ms.
pub const SWAP_FADE_MS: f64 = 100.0;

/// The plugin type.
#[derive(Debug)]
pub struct PartitaPlugin;

impl Plugin for PartitaPlugin {
    type AudioProcessor<'a> = Processor<'a>;
    type Shared<'a> = Shared;
    type MainThread<'a> = MainThread<'a>;

    fn declare_extensions(builder: &mut PluginExtensions<Self>, _shared: Option<&Shared>) {
        builder
            .register::<PluginAudioPorts>()
            .register::<PluginParams>()
            .register::<PluginState>()
            .register::<PluginStateContext>()
            .register::<PluginLatency>()
            .register::<PluginTail>()
            .register::<PluginRender>()
            .register::<PluginPresetLoad>();
    }
}

/// The plugin's descriptor: id, name, vendor, version, features.
pub fn descriptor() -> PluginDescriptor {
    use clack_plugin::plugin::features::{AUDIO_EFFECT, REVERB, STEREO};
    PluginDescriptor::new(PLUGIN_ID, PLUGIN_NAME)
        .with_vendor("The Partita developers")
        .with_version(env!("CARGO_PKG_VERSION"))
        .with_description("Convolution with built-in synthetic spaces or WAV impulse responses")
        .with_features([AUDIO_EFFECT, REVERB, STEREO])
}

/// What every thread of an instance shares: atomics only (no lock the audio thread could wait on).
#[derive(Debug)]
pub struct Shared {
    /// Every parameter's value.
    pub params: ParamValues,
    /// WAV files of the IR folder when the instance was made (the IR file parameter's entries).
    pub ir_files: Vec<PathBuf>,
    /// Latency of the active engine, frames.
    pub(crate) latency_frames: AtomicU32,
    /// Length of the IR heard (or fading in), frames at the active rate.
    pub(crate) ir_frames: AtomicU32,
    /// The active rate.
    pub(crate) sample_rate_hz: AtomicU32,
    /// A parameter that changes the IR changed on the audio thread: the main thread rebuilds it.
    pub(crate) ir_dirty: AtomicBool,
    /// The latency mode changed on the audio thread: the main thread asks for a restart.
    pub(crate) latency_dirty: AtomicBool,
}

impl PluginShared<'_> for Shared {}

impl Shared {
    /// A new instance's shared state: default parameters, the IR folder's files listed. Reads a folder.
    pub fn new() -> Self {
        let ir_files = ir_folder().map(|f| wav_files(&f)).unwrap_or_default();
        Self {
            params: ParamValues::new(ir_files.len() as u32),
            ir_files,
            latency_frames: AtomicU32::new(0),
            ir_frames: AtomicU32::new(0),
            sample_rate_hz: AtomicU32::new(0),
            ir_dirty: AtomicBool::new(false),
            latency_dirty: AtomicBool::new(false),
        }
    }
}

impl Default for Shared {
    fn default() -> Self {
        Self::new()
    }
}

/// What the main thread keeps of an active engine.
pub(crate) struct Active {
    pub(crate) control: Control,
    pub(crate) sample_rate_hz: u32,
    pub(crate) true_stereo: bool,
    pub(crate) latency_mode: Option<usize>,
    pub(crate) offline: bool,
}

/// The main thread's side of an instance.
pub struct MainThread<'a> {
    pub(crate) host: HostMainThreadHandle<'a>,
    pub(crate) shared: &'a Shared,
    /// The IR source in use.
    pub(crate) source: RefCell<IrSource>,
    pub(crate) active: RefCell<Option<Active>>,
    /// The host renders offline (the render extension).
    pub(crate) offline: Cell<bool>,
}

impl std::fmt::Debug for MainThread<'_> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("MainThread").field("source", &self.source).finish_non_exhaustive()
    }
}

impl<'a> MainThread<'a> {
    /// A new instance's main-thread side: the default source (the custom room of the default parameters).
    pub fn new(host: HostMainThreadHandle<'a>, shared: &'a Shared) -> Self {
        let this = Self {
            host,
            shared,
            source: RefCell::new(IrSource::Space { index: 0, custom: (0.0, 0.0, 0.0) }),
            active: RefCell::new(None),
            offline: Cell::new(false),
        };
        *this.source.borrow_mut() = this.space_from_params();
        this
    }

    fn space_from_params(&self) -> IrSource {
        let p = &self.shared.params;
        IrSource::Space {
            index: p.index(ParamId::Space),
            custom: (p.get(ParamId::RoomVolume), p.get(ParamId::ReverbTime), p.get(ParamId::HfDecay)),
        }
    }

    /// Called when the engine is deactivated: the control handle goes with it.
    pub(crate) fn deactivated(&self) {
        *self.active.borrow_mut() = None;
    }

    /// Makes `source` the IR: when active, prepares it for the running engine and swaps it in with a
    /// crossfade, or asks the host for a restart when it needs another engine (true stereo after stereo,
    /// or longer than planned). Allocates.
    ///
    /// # Errors
    /// When the IR cannot be made; the source in use stays.
    pub fn set_source(&self, source: IrSource) -> Result<(), PluginError> {
        let mut active = self.active.borrow_mut();
        if let Some(a) = active.as_mut() {
            // IRs retired by earlier swaps are freed here (and in `on_main_thread`), off the audio thread.
            while a.control.next_event().is_some() {}
            let ir = make_ir(&source, a.sample_rate_hz)?;
            let fits = (ir.channels() < 4 || a.true_stereo) && ir.frames() <= a.control.max_ir_frames();
            let swapped = fits
                && a.control
                    .prepare(&engine_taps(&ir, a.true_stereo))
                    .ok()
                    .map(|prepared| a.control.swap(prepared, a.control.frames_for_ms(SWAP_FADE_MS)).is_ok())
                    .unwrap_or(false);
            if swapped {
                self.shared.ir_frames.store(ir.frames() as u32, Ordering::Relaxed);
            } else {
                self.host.request_restart();
            }
        }
        *self.source.borrow_mut() = source;
        Ok(())
    }

    /// Rebuilds the IR source from the parameters (space, room, IR file) and makes it the IR.
    fn source_params_changed(&self) -> Result<(), PluginError> {
        let file = self.shared.params.index(ParamId::IrFile);
        let source = match file.checked_sub(1).and_then(|k| self.shared.ir_files.get(k)) {
            Some(path) => IrSource::File(read_file_ir(path)?),
            None => self.space_from_params(),
        };
        self.set_source(source)
    }

    /// Sets the IR file parameter to `path`'s entry in the IR folder (0 when it is not there).
    fn show_file(&self, path: Option<&Path>) {
        let k = path.and_then(|p| self.shared.ir_files.iter().position(|f| f == p)).map_or(0, |k| k + 1);
        self.shared.params.set(ParamId::IrFile, k as f64);
    }

    /// Applies a change of latency mode or render mode: a different engine needs a restart.
    fn check_restart(&self) {
        if let Some(a) = self.active.borrow().as_ref() {
            if a.latency_mode != self.shared.params.latency_mode() || a.offline != self.offline.get() {
                self.host.request_restart();
            }
        }
    }

    fn save(&self, output: &mut OutputStream, embed: bool) -> Result<(), PluginError> {
        let params =
            ParamId::ALL.iter().filter(|&&id| id != ParamId::IrFile).map(|&id| (id as u32, self.shared.params.get(id)));
        let file = match &*self.source.borrow() {
            IrSource::File(f) => Some(SavedFile { path: f.path.clone(), audio: embed.then(|| (*f.audio).clone()) }),
            IrSource::Space { .. } => None,
        };
        let state = SavedState { params: params.collect(), file };
        output.write_all(&state.encode())?;
        Ok(())
    }

    fn load(&self, input: &mut InputStream) -> Result<(), PluginError> {
        let mut bytes = Vec::new();
        input.read_to_end(&mut bytes)?;
        let state = SavedState::decode(&bytes)?;
        // The source first: a missing file refuses the state before any parameter changes.
        let file = match state.file {
            None => None,
            Some(SavedFile { path, audio: Some(audio) }) => Some(FileIr { path, audio: Arc::new(audio) }),
            Some(SavedFile { path, audio: None }) => Some(read_file_ir(&path)?),
        };
        for (id, value) in state.params {
            if let Some(id) = ParamId::from_raw(id).filter(|&id| id != ParamId::IrFile) {
                self.shared.params.set(id, value);
            }
        }
        self.show_file(file.as_ref().map(|f| f.path.as_path()));
        let source = file.map_or_else(|| self.space_from_params(), IrSource::File);
        self.set_source(source)?;
        self.send_mix();
        self.check_restart();
        self.rescan_values();
        Ok(())
    }

    /// Sends every mix parameter to an active engine (after a state load).
    fn send_mix(&self) {
        if let Some(a) = self.active.borrow_mut().as_mut() {
            for id in ParamId::ALL.into_iter().filter(|id| id.is_mix()) {
                // A full queue (the audio thread not running) drops the change; the next activation reads
                // the parameters anyway.
                let _ = a.control.send(mix_command(&self.shared.params, id, a.sample_rate_hz));
            }
        }
    }

    fn rescan_values(&self) {
        if let Some(params) = self.host.get_extension::<HostParams>() {
            params.rescan(&self.host, ParamRescanFlags::VALUES);
        }
    }

    fn choice_name(&self, id: ParamId, index: usize) -> String {
        match id {
            ParamId::Latency => latency_name(index),
            ParamId::Space => SPACE_NAMES.get(index).map_or_else(|| index.to_string(), |s| s.to_string()),
            ParamId::IrFile => match index.checked_sub(1).and_then(|k| self.shared.ir_files.get(k)) {
                None => "None (built-in space)".to_string(),
                Some(p) => p.file_stem().map_or_else(|| p.display().to_string(), |s| s.to_string_lossy().into()),
            },
            _ => index.to_string(),
        }
    }
}

impl<'a> PluginMainThread<'a, Shared> for MainThread<'a> {
    fn on_main_thread(&self) {
        if let Some(a) = self.active.borrow_mut().as_mut() {
            // Retired IRs are freed here, off the audio thread.
            while let Some(event) = a.control.next_event() {
                drop::<Event>(event);
            }
        }
        if self.shared.latency_dirty.swap(false, Ordering::AcqRel) {
            self.check_restart();
        }
        if self.shared.ir_dirty.swap(false, Ordering::AcqRel) {
            // A file that cannot be read keeps the IR in use.
            let _ = self.source_params_changed();
        }
    }
}

impl PluginAudioPortsImpl for MainThread<'_> {
    fn count(&self, _is_input: bool) -> u32 {
        1
    }

    fn get(&self, index: u32, is_input: bool, writer: &mut AudioPortInfoWriter) {
        if index == 0 {
            writer.set(&AudioPortInfo {
                id: ClapId::new(0),
                name: if is_input { b"Input" } else { b"Output" },
                channel_count: 2,
                flags: AudioPortFlags::IS_MAIN,
                port_type: Some(AudioPortType::STEREO),
                in_place_pair: Some(ClapId::new(0)),
            });
        }
    }
}

impl PluginMainThreadParams for MainThread<'_> {
    fn count(&self) -> u32 {
        PARAMS.len() as u32
    }

    fn get_info(&self, param_index: u32, info: &mut ParamInfoWriter) {
        let Some(spec) = PARAMS.get(param_index as usize) else { return };
        let mut flags = ParamInfoFlags::empty();
        if spec.automatable {
            flags |= ParamInfoFlags::IS_AUTOMATABLE;
        }
        if matches!(spec.unit, Unit::Switch | Unit::Choice) {
            flags |= ParamInfoFlags::IS_STEPPED;
        }
        if spec.unit == Unit::Choice {
            flags |= ParamInfoFlags::IS_ENUM;
        }
        if spec.id == ParamId::Bypass {
            flags |= ParamInfoFlags::IS_BYPASS;
        }
        let (min, max) = self.shared.params.range(spec.id);
        info.set(&ParamInfo {
            id: ClapId::new(spec.id as u32),
            flags,
            cookie: Default::default(),
            name: spec.name.as_bytes(),
            module: spec.module.as_bytes(),
            min_value: min,
            max_value: max,
            default_value: spec.default,
        });
    }

    fn get_value(&self, param_id: ClapId) -> Option<f64> {
        ParamId::from_raw(param_id.get()).map(|id| self.shared.params.get(id))
    }

    fn value_to_text(&self, param_id: ClapId, value: f64, writer: &mut ParamDisplayWriter) -> std::fmt::Result {
        let id = ParamId::from_raw(param_id.get()).ok_or(std::fmt::Error)?;
        let mut text = String::new();
        write_value(&mut text, id, value, |id, k| self.choice_name(id, k))?;
        writer.write_str(&text)
    }

    fn text_to_value(&self, param_id: ClapId, text: &CStr) -> Option<f64> {
        let id = ParamId::from_raw(param_id.get())?;
        let text = text.to_str().ok()?;
        if id.spec().unit == Unit::Choice {
            let (_, max) = self.shared.params.range(id);
            if let Some(k) = (0..=max as usize).find(|&k| self.choice_name(id, k).eq_ignore_ascii_case(text.trim())) {
                return Some(k as f64);
            }
        }
        parse_value(id, text)
    }

    fn flush(&self, input_parameter_changes: &InputEvents, _output_parameter_changes: &mut OutputEvents) {
        let mut ir_changed = false;
        for event in input_parameter_changes {
            let Some(change) = event.as_event::<ParamValueEvent>() else { continue };
            let Some(id) = change.param_id().and_then(|id| ParamId::from_raw(id.get())) else { continue };
            if self.shared.params.set(id, change.value()).is_some() {
                ir_changed |= id.changes_ir();
            }
        }
        if ir_changed {
            let _ = self.source_params_changed();
        }
    }
}

impl PluginStateImpl for MainThread<'_> {
    /// A plain save (a host without the state-context extension) is taken for a project save: the file's
    /// samples are embedded.
    fn save(&self, output: &mut OutputStream) -> Result<(), PluginError> {
        MainThread::save(self, output, true)
    }

    fn load(&self, input: &mut InputStream) -> Result<(), PluginError> {
        MainThread::load(self, input)
    }
}

impl PluginStateContextImpl for MainThread<'_> {
    fn save(&self, output: &mut OutputStream, context_type: StateContextType) -> Result<(), PluginError> {
        MainThread::save(self, output, context_type == StateContextType::ForProject)
    }

    fn load(&self, input: &mut InputStream, _context_type: StateContextType) -> Result<(), PluginError> {
        MainThread::load(self, input)
    }
}

impl PluginLatencyImpl for MainThread<'_> {
    fn get(&self) -> u32 {
        self.shared.latency_frames.load(Ordering::Relaxed)
    }
}

impl PluginRenderImpl for MainThread<'_> {
    fn has_hard_realtime_requirement(&self) -> bool {
        false
    }

    fn set(&self, mode: RenderMode) -> Result<(), PluginError> {
        self.offline.set(mode == RenderMode::Offline);
        self.check_restart();
        Ok(())
    }
}

impl PluginPresetLoadImpl for MainThread<'_> {
    fn load_from_location(&self, location: Location, load_key: Option<&CStr>) -> Result<(), PluginError> {
        let Location::File { path } = location else {
            return Err(PluginError::Message("the plugin has no presets of its own; load a WAV file"));
        };
        let path = PathBuf::from(path.to_str().map_err(|_| PluginError::Message("the path is not UTF-8"))?);
        let result = read_file_ir(&path).map_err(PluginError::from).and_then(|file| {
            self.show_file(Some(&path));
            self.set_source(IrSource::File(file))
        });
        if let Some(ext) = self.host.get_extension::<HostPresetLoad>() {
            match &result {
                Ok(()) => ext.loaded(&self.host, location, load_key),
                Err(e) => {
                    let msg = std::ffi::CString::new(e.to_string().replace('\0', " ")).unwrap_or_default();
                    ext.on_error(&self.host, location, load_key, 0, Some(&msg));
                }
            }
        }
        self.rescan_values();
        result
    }
}
