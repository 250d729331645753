//! Test support for device tests: a private JACK server per test (dummy driver), a JACK test client
//! that plays into and records from Partita's ports, and lag search.
#![allow(dead_code)]

use std::process::{Child, Command, Stdio};
use std::sync::atomic::{AtomicUsize, Ordering};
use std::sync::{Mutex, MutexGuard};
use std::time::{Duration, Instant};

/// Device tests run one at a time (they set JACK_DEFAULT_SERVER for the process).
static SERIAL: Mutex<()> = Mutex::new(());
static COUNTER: AtomicUsize = AtomicUsize::new(0);

pub fn serial() -> MutexGuard<'static, ()> {
    SERIAL.lock().unwrap_or_else(|e| e.into_inner())
}

/// A JACK server of our own: `jackd -n NAME --no-realtime -d dummy -r 48000 -p PERIOD`, stopped by its
/// pid on drop.
pub struct JackServer {
    pub name: String,
    child: Option<Child>,
    /// Killed with SIGKILL: its slot in JACK's server registry (/dev/shm, 8 slots) is left behind.
    killed: bool,
    /// jackd's output, removed on drop.
    log: std::path::PathBuf,
}

impl JackServer {
    /// Starts a server and waits until it answers (`jack_lsp -s NAME`); `None` when jackd is missing or
    /// the server does not come up within 10 s.
    pub fn start(period: u32) -> Option<Self> {
        let name = format!("partita-test-{}-{}", std::process::id(), COUNTER.fetch_add(1, Ordering::SeqCst));
        Self::start_named(&name, period)
    }

    fn start_named(name: &str, period: u32) -> Option<Self> {
        let name = name.to_string();
        let log = std::env::temp_dir().join(format!("{name}.log"));
        let log_file = std::fs::File::create(&log).ok()?;
        let child = Command::new("jackd")
            .args(["-n", &name, "--no-realtime", "-d", "dummy", "-r", "48000", "-p", &period.to_string()])
            .stdin(Stdio::null())
            .stdout(log_file.try_clone().ok()?)
            .stderr(log_file)
            .spawn()
            .ok()?;
        let mut server = Self { name, child: Some(child), killed: false, log: log.clone() };
        let deadline = Instant::now() + Duration::from_secs(10);
        while Instant::now() < deadline {
            if let Some(c) = server.child.as_mut() {
                if let Ok(Some(_)) = c.try_wait() {
                    eprintln!("jackd exited at start; log: {}", std::fs::read_to_string(&log).unwrap_or_default());
                    server.child = None;
                    return None;
                }
            }
            let ok = Command::new("jack_lsp")
                .args(["-s", &server.name])
                .env("JACK_NO_START_SERVER", "1")
                .stdout(Stdio::null())
                .stderr(Stdio::null())
                .status()
                .is_ok_and(|s| s.success());
            if ok {
                return Some(server);
            }
            std::thread::sleep(Duration::from_millis(50));
        }
        None
    }

    /// Makes this server the process's default for new JACK clients (cpal's among them).
    pub fn make_default(&self) {
        std::env::set_var("JACK_DEFAULT_SERVER", &self.name);
        std::env::set_var("JACK_NO_START_SERVER", "1");
    }

    pub fn pid(&self) -> Option<u32> {
        self.child.as_ref().map(|c| c.id())
    }

    /// Changes the server's period with `jack_bufsize`.
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
    // SAFETY: kill(2) on our own child's pid with a valid signal number.
    unsafe {
        libc::kill(c.id() as libc::pid_t, libc::SIGTERM);
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
        let _ = std::fs::remove_file(&self.log);
        if self.killed {
            // A server of the same name takes over the dead one's registry slot; stopped cleanly, it
            // frees it. Without this, killed servers fill JACK's 8 slots ("Too many servers").
            if let Some(mut again) = Self::start_named(&self.name, 256) {
                if let Some(c) = again.child.take() {
                    terminate(c);
                }
            }
            return;
        }
        if let Some(c) = self.child.take() {
            terminate(c);
        }
    }
}

/// A server for a device test, or `None` with a SKIP message; with `CI` set, no server is a failure.
pub fn jack_or_skip(test: &str, period: u32) -> Option<JackServer> {
    match JackServer::start(period) {
        Some(s) => {
            s.make_default();
            Some(s)
        }
        None => {
            let msg = format!(
                "{test}: SKIP: no JACK server could be started (is jackd installed? scripts/check installs jackd2)"
            );
            assert!(std::env::var_os("CI").is_none(), "{msg}; CI is set, so this is a failure");
            eprintln!("{msg}");
            None
        }
    }
}

/// What the test client plays, port by port, from frame `start` of its own timeline.
pub struct Playlist {
    pub start: usize,
    pub channels: Vec<Vec<f32>>,
}

struct ClientState {
    play: Vec<jack::Port<jack::AudioOut>>,
    rec: Vec<jack::Port<jack::AudioIn>>,
    playlist: Playlist,
    recording: Vec<Vec<f32>>,
    pos: usize,
    capacity: usize,
}

impl jack::ProcessHandler for ClientState {
    fn process(&mut self, _: &jack::Client, ps: &jack::ProcessScope) -> jack::Control {
        let n = ps.n_frames() as usize;
        for (c, port) in self.play.iter_mut().enumerate() {
            let out = port.as_mut_slice(ps);
            let sig = &self.playlist.channels[c];
            for (i, y) in out.iter_mut().enumerate() {
                let k = (self.pos + i).wrapping_sub(self.playlist.start);
                *y = if self.pos + i >= self.playlist.start && k < sig.len() { sig[k] } else { 0.0 };
            }
        }
        for (c, port) in self.rec.iter().enumerate() {
            let x = port.as_slice(ps);
            let r = &mut self.recording[c];
            let room = self.capacity - r.len();
            r.extend_from_slice(&x[..n.min(room)]);
        }
        self.pos += n;
        jack::Control::Continue
    }
}

/// A JACK client with `play_N` ports connected to Partita's inputs and `rec_N` ports fed by Partita's
/// outputs. It records up to `capacity` frames per port on its own timeline.
pub struct TestClient {
    client: jack::AsyncClient<(), ClientState>,
}

impl TestClient {
    pub fn start(playlist: Playlist, record_ports: usize, capacity: usize) -> Self {
        let (client, _) =
            jack::Client::new("partita_test_client", jack::ClientOptions::NO_START_SERVER).expect("test client");
        let play: Vec<_> = (0..playlist.channels.len())
            .map(|i| client.register_port(&format!("play_{i}"), jack::AudioOut::default()).unwrap())
            .collect();
        let rec: Vec<_> = (0..record_ports)
            .map(|i| client.register_port(&format!("rec_{i}"), jack::AudioIn::default()).unwrap())
            .collect();
        let me = client.name().to_string();
        let (cin, cout) = partita_device::jack_client_names();
        let state = ClientState {
            play,
            rec,
            playlist,
            recording: (0..record_ports).map(|_| Vec::with_capacity(capacity)).collect(),
            pos: 0,
            capacity,
        };
        let n_play = state.play.len();
        let active = client.activate_async((), state).expect("activate test client");
        let c = active.as_client();
        for i in 0..n_play {
            c.connect_ports_by_name(&format!("{me}:play_{i}"), &format!("{cin}:in_{i}")).expect("connect play");
        }
        for i in 0..record_ports {
            c.connect_ports_by_name(&format!("{cout}:out_{i}"), &format!("{me}:rec_{i}")).expect("connect rec");
        }
        Self { client: active }
    }

    /// Frames the client has processed.
    pub fn stop(self) -> Vec<Vec<f32>> {
        let (_, _, state) = self.client.deactivate().expect("deactivate");
        state.recording
    }
}

/// The lag (within `lags`) at which `rec[n] = want[n - lag]` best over `window` (indices of `rec`),
/// and the error bound there.
pub fn best_lag(
    rec: &[f32],
    want: &[f64],
    window: std::ops::Range<usize>,
    lags: std::ops::Range<usize>,
) -> (usize, partita_testkit::ErrorBound) {
    let mut best = (usize::MAX, f64::INFINITY);
    for lag in lags {
        if window.start < lag {
            continue;
        }
        let mut err = 0.0;
        for n in window.clone().step_by(7) {
            let d = f64::from(rec[n]) - want.get(n - lag).copied().unwrap_or(0.0);
            err += d * d;
            if err > best.1 {
                break;
            }
        }
        if err < best.1 {
            best = (lag, err);
        }
    }
    let lag = best.0;
    let ours: Vec<f32> = rec[window.clone()].to_vec();
    let reference: Vec<f64> = window.map(|n| want.get(n - lag).copied().unwrap_or(0.0)).collect();
    (lag, partita_testkit::ErrorBound::measure(&ours, &reference))
}
