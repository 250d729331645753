//! libFuzzer entry of the `c_abi` target; the body and its contract are `partita_fuzz::c_abi`.
#![no_main]

libfuzzer_sys::fuzz_target!(|data: &[u8]| partita_fuzz::c_abi(data));
