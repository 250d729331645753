//! libFuzzer entry of the `sweep_sidecar` target; the body and its contract are `partita_fuzz::sweep_sidecar`.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| partita_fuzz::sweep_sidecar(data));
