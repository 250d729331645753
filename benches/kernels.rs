//! Placeholder: the kernels benchmark is being written.
fn main() {}
