//! # partita-fuzz
//!
//! The bodies of Partita's fuzz targets: one function per boundary that takes bytes or text from outside,
//! each asserting the boundary's contract (a clear error, or a result that passes the same checks a
//! hand-made input would, within a documented memory bound), not merely the absence of a crash.
//!
//! Two callers run them: the cargo-fuzz targets in `fuzz/fuzz_targets/` (nightly, libFuzzer; `scripts/fuzz
//! TARGET SECONDS`) and the replay test `tests/replay.rs`, which runs every committed input of
//! `fuzz/corpus/<target>/` and `fuzz/regressions/<target>/` on stable as part of `scripts/check`. Adding a
//! target is one function here, one line in [`TARGETS`], one file in `fuzz/fuzz_targets/` and one
//! `[[bin]]` in `fuzz/Cargo.toml`, and a corpus folder. docs/fuzzing.md has the contracts and the campaigns.
//!
//! This crate links partita-ffi's counting allocator (feature `test-alloc-count`) as the global allocator
//! of every binary that uses it, to measure the peak memory an input makes a parser take ([`memory`]).
#![warn(missing_docs)]
#![deny(unsafe_op_in_unsafe_fn)]

mod ffi;
pub mod input;
mod ir;
pub mod memory;
mod plan;
mod plugin_state;
mod routing;
mod sweep;
mod wav;

pub use ffi::c_abi;
pub use ir::ir_prepare;
pub use plan::plan;
pub use plugin_state::plugin_state;
pub use routing::routing_text;
pub use sweep::sweep_sidecar;
pub use wav::wav_reader;

/// One fuzz target: its name (the binary in `fuzz/fuzz_targets/` and the folders under `fuzz/corpus/` and
/// `fuzz/regressions/`) and its body, which panics when the contract is broken.
pub type Target = (&'static str, fn(&[u8]));

/// Every target, in the order the replay runs them.
pub const TARGETS: &[Target] = &[
    ("wav_reader", wav_reader),
    ("ir_prepare", ir_prepare),
    ("plan", plan),
    ("routing_text", routing_text),
    ("sweep_sidecar", sweep_sidecar),
    ("c_abi", c_abi),
    ("plugin_state", plugin_state),
];

/// Checks the one-line error message of a refused input: it names `name` first, says something, and is
/// one line of bounded length (no input echoed whole).
///
/// # Panics
/// When the message breaks that rule.
pub fn check_message(message: &str, name: &str) {
    assert!(message.starts_with(&format!("{name}: ")), "the message does not name {name}: {message:?}");
    assert!(message.len() > name.len() + 4, "an empty message: {message:?}");
    assert!(!message.contains('\n'), "a message of several lines: {message:?}");
    assert!(message.len() <= 1024, "a message of {} bytes: {message:.200?}", message.len());
}
