//! Test support for device tests: a private JACK server per test (dummy driver, from
//! `partita_testkit::jack_server`), a JACK test client that plays into and records from Partita's
//! ports, and lag search.
#![allow(dead_code)]

pub use partita_testkit::jack_server::{serial, JackServer};

/// A private server (`partita_testkit::jack_server`) made the process's default for new JACK clients,
/// cpal's among them; `None` after a SKIP message (a failure when `CI` is set).
pub fn jack_or_skip(test: &str, period: u32) -> Option<JackServer> {
    let server = partita_testkit::jack_server::jack_or_skip(test, period)?;
    server.make_default();
    Some(server)
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
        let (cin, cout) = partita_device::jack_client_names();
        let plays = (0..playlist.channels.len()).map(|i| format!("{cin}:in_{i}")).collect();
        let recs = (0..record_ports).map(|i| format!("{cout}:out_{i}")).collect();
        Self::start_with(playlist, capacity, plays, recs)
    }

    /// A client whose `play_N` port feeds `play_to[N]` and whose `rec_N` port records `record_from[N]`.
    pub fn start_with(playlist: Playlist, capacity: usize, play_to: Vec<String>, record_from: Vec<String>) -> Self {
        Self::start_named("partita_test_client", playlist, capacity, play_to, record_from)
    }

    /// [`start_with`](Self::start_with) under a client name of the caller's.
    pub fn start_named(
        name: &str,
        playlist: Playlist,
        capacity: usize,
        play_to: Vec<String>,
        record_from: Vec<String>,
    ) -> Self {
        let record_ports = record_from.len();
        let (client, _) = jack::Client::new(name, jack::ClientOptions::NO_START_SERVER).expect("test client");
        let play: Vec<_> = (0..playlist.channels.len())
            .map(|i| client.register_port(&format!("play_{i}"), jack::AudioOut::default()).unwrap())
            .collect();
        let rec: Vec<_> = (0..record_ports)
            .map(|i| client.register_port(&format!("rec_{i}"), jack::AudioIn::default()).unwrap())
            .collect();
        let me = client.name().to_string();
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
        for (i, to) in play_to.iter().enumerate().take(n_play) {
            c.connect_ports_by_name(&format!("{me}:play_{i}"), to).expect("connect play");
        }
        for (i, from) in record_from.iter().enumerate() {
            c.connect_ports_by_name(from, &format!("{me}:rec_{i}")).expect("connect rec");
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
