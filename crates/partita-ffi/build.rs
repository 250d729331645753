//! Gives the shared library a versioned soname (libpartita_ffi.so.1 for ABI version 1) on Linux.
fn main() {
    let os = std::env::var("CARGO_CFG_TARGET_OS").unwrap_or_default();
    if os == "linux" {
        println!("cargo:rustc-cdylib-link-arg=-Wl,-soname,libpartita_ffi.so.1");
    }
}
