//! libFuzzer entry of the `ir_prepare` target; the body and its contract are `partita_fuzz::ir_prepare`.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| partita_fuzz::ir_prepare(data));
