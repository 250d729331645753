//! A private JACK server per test: `jackd --no-realtime` on the dummy driver, under a name of its own,
//! started and stopped by pid, so live tests need neither a sound card nor the user's server.
//!
//! Tests that use it hold [`serial`] for their whole run (one server at a time per test binary), start
//! the server with [`jack_or_skip`], and return early when that gives `None`: no server could be
//! started, which is a SKIP with a message, or a failure when `CI` is set. Needs `jackd`, `jack_lsp` and
//! `jack_bufsize` on the `PATH` (Debian: jackd2; `scripts/check` installs it). This module uses only
//! the command-line tools, not the `jack` crate.

use std::path::PathBuf;
use std::process::{Child, Command, Stdio};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Mutex, MutexGuard};
use std::time::{Duration, Instant};

/// Tests that start servers run one at a time (some set `JACK_DEFAULT_SERVER` for the process).
static SERIAL: Mutex<()> = Mutex::new(());
/// Numbers the servers of this process, so each one gets a fresh name.
static COUNTER: AtomicUsize = AtomicUsize::new(0);

/// How long a new server has to answer `jack_lsp` before it counts as not started.
const START_TIMEOUT: Duration = Duration::from_secs(10);

/// Holds the lock that runs JACK tests one at a time; keep the guard for the whole test. A test that
/// panicked while holding it does not poison it for the others.
pub fn serial() -> MutexGuard<'static, ()> {
    SERIAL.lock().unwrap_or_else(|e| e.into_inner())
}

/// A JACK server of our own: `jackd -n NAME --no-realtime -d dummy -r 48000 -p PERIOD`. Dropping it
/// stops it with SIGTERM (SIGKILL if it lingers) and removes its log.
#[derive(Debug)]
pub struct JackServer {
    /// The server name: pass it to clients as `JACK_DEFAULT_SERVER` (or see [`make_default`](Self::make_default)).
    pub name: String,
    child: Option<Child>,
    /// Killed with SIGKILL: its slot in JACK's server registry (/dev/shm, 8 slots) is left behind.
    killed: bool,
    /// jackd's stdout and stderr, shown when it fails to start, removed on drop.
    log: PathBuf,
}

impl JackServer {
    /// Starts a server at 48 kHz with `period` frames under a fresh name and waits until it answers
    /// (`jack_lsp -s NAME`).
    ///
    /// # Errors
    /// Why no server is running: jackd could not be spawned (not installed?), it exited at start, or
    /// it did not answer within 10 s. The message includes jackd's output when there is any.
    pub fn start(period: u32) -> Result<Self, String> {
        let name = format!("partita-test-{}-{}", std::process::id(), COUNTER.fetch_add(1, Ordering::SeqCst));
        Self::start_named(&name, period)
    }

    /// [`start`](Self::start) under the name `name`, e.g. to bring a killed server back (it takes over the
    /// dead one's registry slot).
    ///
    /// # Errors
    /// As [`start`](Self::start).
    pub fn start_named(name: &str, period: u32) -> Result<Self, String> {
        let name = name.to_string();
        let log = std::env::temp_dir().join(format!("{name}.log"));
        let log_file = std::fs::File::create(&log).map_err(|e| format!("cannot create {}: {e}", log.display()))?;
        let log_err = log_file.try_clone().map_err(|e| format!("cannot reopen {}: {e}", log.display()))?;
        let spawned = Command::new("jackd")
            .args(["-n", &name, "--no-realtime", "-d", "dummy", "-r", "48000", "-p", &period.to_string()])
            .stdin(Stdio::null())
            .stdout(log_file)
            .stderr(log_err)
            .spawn();
        let child = match spawned {
            Ok(c) => c,
            Err(e) => {
                let _ = std::fs::remove_file(&log);
                return Err(format!("cannot run jackd: {e}"));
            }
        };
        let mut server = Self { name, child: Some(child), killed: false, log };
        let deadline = Instant::now() + START_TIMEOUT;
        while Instant::now() < deadline {
            if let Some(c) = server.child.as_mut() {
                if let Ok(Some(status)) = c.try_wait() {
                    server.child = None;
                    return Err(format!("jackd exited at start ({status}); its output:\n{}", server.log_text()));
                }
            }
            let up = Command::new("jack_lsp")
                .args(["-s", &server.name])
                .env("JACK_NO_START_SERVER", "1")
                .stdout(Stdio::null())
                .stderr(Stdio::null())
                .status()
                .is_ok_and(|s| s.success());
            if up {
                return Ok(server);
            }
            std::thread::sleep(Duration::from_millis(50));
        }
        Err(format!("jackd did not answer within {START_TIMEOUT:?}; its output:\n{}", server.log_text()))
    }

    fn log_text(&self) -> String {
        std::fs::read_to_string(&self.log).map(|s| s.trim_end().to_string()).unwrap_or_default()
    }

    /// Makes this server the process's default for new JACK clients (cpal's among them): sets
    /// `JACK_DEFAULT_SERVER` and `JACK_NO_START_SERVER` in this process's environment.
    pub fn make_default(&self) {
        std::env::set_var("JACK_DEFAULT_SERVER", &self.name);
        std::env::set_var("JACK_NO_START_SERVER", "1");
    }

    /// The jackd process id, `None` once it has been killed.
    pub fn pid(&self) -> Option<u32> {
        self.child.as_ref().map(Child::id)
    }

    /// Changes the server's period with `jack_bufsize`.
    ///
    /// # Panics
    /// When `jack_bufsize` cannot be run or fails.
    pub fn set_period(&self, frames: u32) {
        let status = Command::new("jack_bufsize")
            .arg(frames.to_string())
            .env("JACK_DEFAULT_SERVER", &self.name)
            .env("JACK_NO_START_SERVER", "1")
            .stdout(Stdio::null())
            .status()
            .expect("jack_bufsize runs");
        assert!(status.success(), "jack_bufsize {frames} failed");
    }

    /// Kills the server at once (SIGKILL), as a crash would.
    pub fn kill_now(&mut self) {
        if let Some(mut c) = self.child.take() {
            let _ = c.kill();
            let _ = c.wait();
            self.killed = true;
        }
    }
}

/// Stops a server with SIGTERM (it then cleans its shared memory), SIGKILL if it lingers.
fn terminate(mut c: Child) {
    if let Ok(pid) = libc::pid_t::try_from(c.id()) {
        // SAFETY: kill(2) on our own child's pid (not yet reaped) with a valid signal number.
        unsafe {
            libc::kill(pid, libc::SIGTERM);
        }
    }
    let deadline = Instant::now() + Duration::from_secs(2);
    while Instant::now() < deadline {
        if let Ok(Some(_)) = c.try_wait() {
            return;
        }
        std::thread::sleep(Duration::from_millis(20));
    }
    let _ = c.kill();
    let _ = c.wait();
}

impl Drop for JackServer {
    fn drop(&mut self) {
        if self.killed {
            // A server of the same name takes over the dead one's registry slot; stopped cleanly, it
            // frees it. Without this, killed servers fill JACK's 8 slots ("Too many servers").
            // (The new server writes to the same log path and removes it when dropped.)
            if let Ok(mut again) = Self::start_named(&self.name, 256) {
                if let Some(c) = again.child.take() {
                    terminate(c);
                }
            }
            remove_client_semaphores(&self.name);
        } else if let Some(c) = self.child.take() {
            terminate(c);
        }
        let _ = std::fs::remove_file(&self.log);
    }
}

/// Removes the semaphores the clients of a killed server leave in /dev/shm
/// (`jack_sem.<uid>_<server>_<client>`); a clean stop removes them itself.
fn remove_client_semaphores(server: &str) {
    let Ok(dir) = std::fs::read_dir("/dev/shm") else { return };
    let tag = format!("_{server}_");
    for entry in dir.flatten() {
        let name = entry.file_name();
        let name = name.to_string_lossy();
        if name.starts_with("jack_sem.") && name.contains(&tag) {
            let _ = std::fs::remove_file(entry.path());
        }
    }
}

/// A server for a JACK test, or `None` after printing a SKIP line naming `test` and the reason.
///
/// # Panics
/// When no server could be started and `CI` is set: in CI a JACK test must run, never skip.
pub fn jack_or_skip(test: &str, period: u32) -> Option<JackServer> {
    use std::io::Write;
    match JackServer::start(period) {
        Ok(server) => Some(server),
        Err(why) => {
            let msg = format!(
                "{test}: SKIP: no JACK server could be started (is jackd installed? scripts/check installs \
                 jackd2): {why}"
            );
            assert!(std::env::var_os("CI").is_none(), "{msg}\nCI is set, so this is a failure");
            // Straight to stderr, so the test harness does not capture it.
            let _ = writeln!(std::io::stderr(), "\n*** {msg} ***\n");
            None
        }
    }
}
