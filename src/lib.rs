#![doc = include_str!("../README.md")]
#![warn(missing_docs)]
#![deny(unsafe_op_in_unsafe_fn)]

pub use partita_core as core;
pub use partita_io as io;
pub use partita_room as room;

pub mod calibration;
pub mod decay_plot;
pub mod demo_files;
pub mod measure;
pub mod sweep_file;
