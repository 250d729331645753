//! What a closed standard output does to the command. Rust's runtime ignores SIGPIPE, so a write to a pipe
//! whose reader has gone (`partita analyze ir.wav | head -1`) fails with EPIPE, on which `println!` panics.
//! The file commands take the default disposition back, as Unix filters have it: the process ends quietly
//! on SIGPIPE (status 141 in a shell), as it does on Ctrl-C. The live commands keep ignoring it, so a
//! closed audio-server socket comes back as an error they report (a stopped JACK server ends `monitor` with
//! a line and its summary) instead of ending the process.

/// Restores SIGPIPE's default disposition: a write to a closed pipe ends the process. Unix only; nothing in
/// the portable fallback.
pub fn end_on_closed_pipe() {
    #[cfg(all(unix, not(feature = "portable-fallback")))]
    // SAFETY: signal(2) with SIG_DFL installs no handler (no code that would have to be async-signal-safe);
    // main calls this before the command starts any thread.
    unsafe {
        libc::signal(libc::SIGPIPE, libc::SIG_DFL);
    }
}
