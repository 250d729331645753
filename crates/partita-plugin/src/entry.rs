//! The CLAP entry: the plugin factory (one plugin) and the preset-discovery factory, whose provider
//! declares `.wav` files and the IR folder so a host's browser can list impulse responses and load them
//! through the preset-load extension.

use std::ffi::{CStr, CString};

use clack_extensions::preset_discovery::prelude::*;
use clack_plugin::entry::prelude::*;
use clack_plugin::plugin::PluginInstance;
use clack_plugin::prelude::*;

use crate::plugin::{descriptor, MainThread, PartitaPlugin, Shared, PLUGIN_ID};
use crate::source::ir_folder;

/// Id of the preset-discovery provider.
pub const PROVIDER_ID: &str = "org.partita.convolution.impulse-responses";

/// The entry the library exports as `clap_entry`.
pub struct PartitaEntry {
    plugins: PluginFactoryWrapper<PluginFactory>,
    presets: PresetDiscoveryFactoryWrapper<PresetFactory>,
}

impl std::fmt::Debug for PartitaEntry {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str("PartitaEntry")
    }
}

impl Entry for PartitaEntry {
    fn new(_bundle_path: Option<&CStr>) -> Result<Self, EntryLoadError> {
        Ok(Self {
            plugins: PluginFactoryWrapper::new(PluginFactory { descriptor: descriptor() }),
            presets: PresetDiscoveryFactoryWrapper::new(PresetFactory {
                descriptor: ProviderDescriptor::new(PROVIDER_ID, "Partita impulse responses")
                    .with_vendor("The Partita developers"),
            }),
        })
    }

    fn declare_factories<'a>(&'a self, builder: &mut EntryFactories<'a>) {
        builder.register_factory(&self.plugins).register_factory(&self.presets);
    }
}

struct PluginFactory {
    descriptor: PluginDescriptor,
}

impl PluginFactoryImpl for PluginFactory {
    fn plugin_count(&self) -> u32 {
        1
    }

    fn plugin_descriptor(&self, index: u32) -> Option<&PluginDescriptor> {
        (index == 0).then_some(&self.descriptor)
    }

    fn create_plugin<'a>(&'a self, host_info: HostInfo<'a>, plugin_id: &CStr) -> Option<PluginInstance<'a>> {
        (plugin_id.to_bytes() == PLUGIN_ID.as_bytes()).then(|| {
            PluginInstance::new::<PartitaPlugin>(
                host_info,
                &self.descriptor,
                |_host| Ok(Shared::new()),
                |host, shared| Ok(MainThread::new(host, shared)),
            )
        })
    }
}

struct PresetFactory {
    descriptor: ProviderDescriptor,
}

impl PresetDiscoveryFactoryImpl for PresetFactory {
    fn provider_count(&self) -> u32 {
        1
    }

    fn provider_descriptor(&self, index: u32) -> Option<&ProviderDescriptor> {
        (index == 0).then_some(&self.descriptor)
    }

    fn create_provider<'a>(&'a self, indexer: IndexerInfo<'a>, provider_id: &CStr) -> Option<ProviderInstance<'a>> {
        (provider_id.to_bytes() == PROVIDER_ID.as_bytes())
            .then(|| ProviderInstance::new(indexer, &self.descriptor, |indexer| Ok(WavProvider::declare(indexer))))
    }
}

/// The preset-discovery provider: each `.wav` file is one preset, named after the file.
struct WavProvider;

impl WavProvider {
    fn declare(mut indexer: Indexer<'_>) -> Self {
        let _ = indexer.declare_filetype(FileType {
            name: c"Impulse response (WAV)",
            description: Some(c"A mono, stereo or true-stereo (LL, LR, RL, RR) impulse response"),
            file_extension: Some(c"wav"),
        });
        if let Some(folder) = ir_folder().and_then(|f| CString::new(f.to_string_lossy().into_owned()).ok()) {
            let _ = indexer.declare_location(LocationInfo {
                name: c"Partita IR folder",
                flags: Flags::IS_USER_CONTENT,
                location: Location::File { path: &folder },
            });
        }
        Self
    }
}

impl<'a> ProviderImpl<'a> for WavProvider {
    fn get_metadata(&mut self, location: Location, receiver: &mut MetadataReceiver) -> Result<(), PluginError> {
        let Location::File { path } = location else { return Ok(()) };
        let path = std::path::Path::new(path.to_str().map_err(|_| PluginError::Message("path is not UTF-8"))?);
        let is_wav = path.extension().is_some_and(|x| x.eq_ignore_ascii_case("wav"));
        if !is_wav {
            return Ok(());
        }
        let name = path.file_stem().map(|s| s.to_string_lossy().into_owned()).unwrap_or_default();
        let name = CString::new(name).unwrap_or_default();
        let id = CString::new(PLUGIN_ID).expect("no NUL in the id");
        if let Ok(preset) = receiver.begin_preset(Some(&name), None) {
            preset.add_plugin_id(UniversalPluginId::clap(&id)).set_flags(Flags::IS_USER_CONTENT);
        }
        Ok(())
    }
}
