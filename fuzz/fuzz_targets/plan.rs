//! libFuzzer entry of the `plan` target; the body and its contract are `partita_fuzz::plan`.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| partita_fuzz::plan(data));
