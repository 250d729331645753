//! # partita-plugin
//!
//! Partita's engine as a CLAP audio effect ("Partita Convolution", id `org.partita.convolution`): stereo in,
//! stereo out, mono, stereo and true-stereo impulse responses from built-in synthetic spaces
//! ([`source::SPACE_NAMES`], rendered by partita-room) or WAV files (the preset-load extension, and the
//! IR file parameter over the folder of [`source::ir_folder`]). Parameters: [`params::PARAMS`]; saved
//! state: [`state`]. Built on clack-plugin; `scripts/bundle-plugin` turns the library into
//! `target/bundled/partita.clap`.
//!
//! The library is a cdylib (the plugin a host loads) and an rlib, which the test host links in-process:
//!
//! ```
//! use partita_plugin::params::{ParamId, ParamValues};
//! let values = ParamValues::new(0);
//! assert_eq!(values.get(ParamId::Wet), 30.0);
//! assert_eq!(partita_plugin::PLUGIN_ID, "org.partita.convolution");
//! ```
//!
//! Real time: the audio thread runs the `process` of [`processor::Processor`], which copies the host's buffers
//! into scratch allocated at activation, hands parameter events to the engine as commands at their
//! sample positions ([`partita_core::Engine::send`]) and runs the engine; no allocation, lock, I/O or
//! wait. IRs are made and prepared on the main thread and swapped in with a crossfade.
#![warn(missing_docs)]
#![deny(unsafe_op_in_unsafe_fn)]

pub mod activation;
pub mod entry;
pub mod params;
pub mod plugin;
pub mod processor;
pub mod source;
pub mod state;

pub use entry::PartitaEntry;
pub use plugin::{PartitaPlugin, PLUGIN_ID, PLUGIN_NAME};

clack_plugin::clack_export_entry!(PartitaEntry);
