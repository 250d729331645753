//! The signals `partita monitor` answers, as flags its loop polls. The one module of the command with
//! OS-specific code: on unix the handlers come from `signal-hook` (they only store to atomics); the
//! portable fallback (other targets, and the test-only `portable-fallback` feature) registers nothing,
//! so Ctrl-C ends the process the default way and the other signals do not exist.
//!
//! | signal            | effect                                                                    |
//! |-------------------|---------------------------------------------------------------------------|
//! | SIGINT, SIGTERM   | stop: the loop ends cleanly and prints its summary                        |
//! | the same, again   | once a stop was asked for, ends the process at once (exit 130 or 143)     |
//! | SIGUSR1           | toggle bypass                                                             |
//! | SIGUSR2           | end a safety mute                                                         |
//! | SIGHUP            | swap between `--ir` and `--alt-ir`                                        |

use std::sync::atomic::{AtomicBool, Ordering};
use std::sync::Arc;

/// Flags set by the signal handlers, read by the monitor loop. Each `take_*` returns whether its signal
/// arrived since the last take, and clears it; the stop request stays set once made.
#[derive(Debug, Default)]
pub struct Signals {
    stop: Arc<AtomicBool>,
    toggle_bypass: Arc<AtomicBool>,
    unmute: Arc<AtomicBool>,
    swap: Arc<AtomicBool>,
}

impl Signals {
    /// Installs the handlers (none in the portable fallback) and returns their flags, all clear.
    pub fn install() -> std::io::Result<Self> {
        let signals = Self::default();
        register(&signals)?;
        Ok(signals)
    }

    /// True once SIGINT or SIGTERM has arrived. Never cleared: it is also what arms the forced exit on
    /// the next one.
    pub fn stop_requested(&self) -> bool {
        self.stop.load(Ordering::SeqCst)
    }

    /// True when SIGUSR1 (toggle bypass) arrived since the last call.
    pub fn take_toggle_bypass(&self) -> bool {
        self.toggle_bypass.swap(false, Ordering::SeqCst)
    }

    /// True when SIGUSR2 (unmute) arrived since the last call.
    pub fn take_unmute(&self) -> bool {
        self.unmute.swap(false, Ordering::SeqCst)
    }

    /// True when SIGHUP (swap IRs) arrived since the last call.
    pub fn take_swap(&self) -> bool {
        self.swap.swap(false, Ordering::SeqCst)
    }
}

/// Unix: `signal-hook` actions that store to the flags (async-signal-safe). For SIGINT and SIGTERM the
/// conditional shutdown is registered before the flag, so the first signal only sets `stop` and any later
/// one finds it set and exits with 128 + the signal number, without the summary.
#[cfg(all(unix, not(feature = "portable-fallback")))]
fn register(signals: &Signals) -> std::io::Result<()> {
    use signal_hook::consts::{SIGHUP, SIGINT, SIGTERM, SIGUSR1, SIGUSR2};
    use signal_hook::flag;
    for sig in [SIGINT, SIGTERM] {
        flag::register_conditional_shutdown(sig, 128 + sig, Arc::clone(&signals.stop))?;
        flag::register(sig, Arc::clone(&signals.stop))?;
    }
    flag::register(SIGUSR1, Arc::clone(&signals.toggle_bypass))?;
    flag::register(SIGUSR2, Arc::clone(&signals.unmute))?;
    flag::register(SIGHUP, Arc::clone(&signals.swap))?;
    Ok(())
}

/// The portable fallback: registers nothing, so the flags stay clear and Ctrl-C ends the process the
/// default way (no summary).
#[cfg(any(not(unix), feature = "portable-fallback"))]
fn register(_: &Signals) -> std::io::Result<()> {
    Ok(())
}

#[cfg(test)]
mod tests {
    use super::Signals;

    #[test]
    #[cfg(all(unix, not(feature = "portable-fallback")))]
    fn each_signal_sets_its_flag_once() {
        use signal_hook::consts::{SIGHUP, SIGUSR1, SIGUSR2};
        use signal_hook::low_level::raise;
        let s = Signals::install().unwrap();
        assert!(!s.take_toggle_bypass() && !s.take_unmute() && !s.take_swap() && !s.stop_requested());
        // raise(3) runs the handler on this thread before it returns.
        raise(SIGUSR1).unwrap();
        assert!(s.take_toggle_bypass());
        assert!(!s.take_toggle_bypass(), "taken once");
        raise(SIGUSR2).unwrap();
        assert!(s.take_unmute() && !s.take_unmute());
        raise(SIGHUP).unwrap();
        assert!(s.take_swap() && !s.take_swap());
        assert!(!s.stop_requested(), "only SIGINT and SIGTERM stop");
    }

    /// Child side of `a_second_sigint_forces_exit`; does nothing unless that test started it.
    #[test]
    #[cfg(all(unix, not(feature = "portable-fallback")))]
    fn second_sigint_child() {
        use signal_hook::consts::SIGINT;
        use signal_hook::low_level::raise;
        if std::env::var_os("PARTITA_SIGNALS_CHILD").is_none() {
            return;
        }
        let s = Signals::install().unwrap();
        raise(SIGINT).unwrap();
        assert!(s.stop_requested(), "the first SIGINT asks for a stop");
        assert!(s.stop_requested(), "and the request stays");
        eprintln!("first SIGINT: stop requested, still running");
        raise(SIGINT).unwrap();
        unreachable!("the second SIGINT must end the process");
    }

    /// The first SIGINT only asks for a stop; the second ends the process at once with exit code 130. Runs
    /// in a child process (this test binary again, only `second_sigint_child`), since the exit is real.
    #[test]
    #[cfg(all(unix, not(feature = "portable-fallback")))]
    fn a_second_sigint_forces_exit() {
        let out = std::process::Command::new(std::env::current_exe().unwrap())
            .args(["--exact", "signals::tests::second_sigint_child", "--nocapture", "--test-threads=1"])
            .env("PARTITA_SIGNALS_CHILD", "1")
            .output()
            .unwrap();
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains("first SIGINT: stop requested, still running"), "{err}");
        assert_eq!(out.status.code(), Some(130), "{:?}: {err}", out.status);
    }

    #[test]
    #[cfg(any(not(unix), feature = "portable-fallback"))]
    fn fallback_registers_nothing() {
        let s = Signals::install().unwrap();
        assert!(!s.stop_requested() && !s.take_toggle_bypass() && !s.take_unmute() && !s.take_swap());
    }
}
