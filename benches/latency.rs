//! Placeholder: the latency benchmark is being written.
fn main() {}
