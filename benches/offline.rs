//! Placeholder: the offline benchmark is being written.
fn main() {}
