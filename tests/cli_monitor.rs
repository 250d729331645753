//! `partita monitor` and `partita devices` against a private JACK server (dummy driver,
//! `partita_testkit::jack_server`), one per test, run one at a time. Built only with `--features jack`;
//! without a startable server the tests skip with a message, which is a failure when `CI` is set.
#![cfg(feature = "jack")]

use std::path::{Path, PathBuf};
use std::process::{Command, Output, Stdio};
use std::time::{Duration, Instant};

use partita_testkit::jack_server::{jack_or_skip, serial};

fn partita(server: &str) -> Command {
    let mut c = Command::new(env!("CARGO_BIN_EXE_partita"));
    c.env("JACK_DEFAULT_SERVER", server).env("JACK_NO_START_SERVER", "1").stdin(Stdio::null());
    c
}

fn scratch(test: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("partita-cli-monitor-{}-{test}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// A synthetic stereo IR of `seconds` at 48 kHz.
fn write_ir(dir: &Path, seconds: f64) -> PathBuf {
    let frames = (seconds * 48_000.0) as usize;
    let chans: Vec<Vec<f32>> = (0..2)
        .map(|c| {
            partita_core::synth::decaying_noise(frames, frames as f64 * 0.8, 3 + c).iter().map(|v| 0.3 * v).collect()
        })
        .collect();
    let path = dir.join("ir.wav");
    partita_io::write_wav_atomic(&path, &chans, 48_000, partita_io::SampleFormat::F32, partita_io::Dither::OFF)
        .unwrap();
    path
}

fn text(o: &Output) -> (String, String) {
    (String::from_utf8_lossy(&o.stdout).into_owned(), String::from_utf8_lossy(&o.stderr).into_owned())
}

/// `partita monitor --seconds 5` with a 2 s stereo IR at block 256 (server period 256) runs, exits 0,
/// prints the caution and a summary (no status line: stderr is not a terminal) and writes the JSON
/// summary with zero overruns of ours. A functional check with a generous budget.
#[test]
fn monitor_runs_for_seconds_and_reports_zero_overruns() {
    let _serial = serial();
    let Some(server) = jack_or_skip("monitor_runs_for_seconds_and_reports_zero_overruns", 256) else { return };
    let dir = scratch("seconds");
    let ir = write_ir(&dir, 2.0);
    let json = dir.join("summary.json");
    let run = || {
        let t = Instant::now();
        let out = partita(&server.name)
            .args(["monitor", "--host", "jack", "--ir"])
            .arg(&ir)
            .args(["--block", "256", "--seconds", "5", "--summary-json"])
            .arg(&json)
            .output()
            .unwrap();
        let (_, err) = text(&out);
        eprintln!("{err}");
        assert!(out.status.success(), "exit {:?}: {err}", out.status);
        assert!(t.elapsed() < Duration::from_secs(30), "took {:?}", t.elapsed());
        assert!(err.contains("CAUTION") && err.contains("headphones") && err.contains("feedback"), "{err}");
        assert!(err.contains("summary:") && err.contains("overruns"), "{err}");
        assert!(err.contains("schedule auto (headroom 8%): sync"), "the default schedule, named: {err}");
        assert!(!err.contains('\r'), "no status line when stderr is not a terminal");
        serde_json::from_str::<serde_json::Value>(&std::fs::read_to_string(&json).unwrap()).unwrap()
    };
    let mut v = run();
    if v["overruns"] != 0 {
        // A non-real-time server on a busy machine can miss a cycle; one more run must be clean.
        eprintln!("WARNING: {} overruns ({} server xruns); running again", v["overruns"], v["xruns"]);
        v = run();
    }
    for key in [
        "xruns",
        "overruns",
        "drift_corrections",
        "late_results",
        "nonfinite_samples",
        "latency_ms",
        "mean_load_pct",
        "seconds",
    ] {
        assert!(v.get(key).is_some_and(|x| x.is_number()), "summary lacks `{key}`: {v}");
    }
    assert_eq!(v["overruns"], 0, "{v}");
    assert_eq!(v["drift_corrections"], 0, "{v}");
    assert_eq!(v["nonfinite_samples"], 0, "{v}");
    assert_eq!(v["host"], "JACK");
    assert_eq!(v["block_frames"], 256);
    // The default schedule is the planner's choice; its levels' schedules are reported.
    assert!(v["schedules"].as_str().is_some_and(|s| s.starts_with("sync")), "{v}");
    let seconds = v["seconds"].as_f64().unwrap();
    assert!((4.5..6.0).contains(&seconds), "{seconds} s of audio");
    // One duplex JACK client: the latency is exact, the engine's 256 frames plus the capture (one period)
    // and playback (two periods) latencies the dummy driver reports for the physical ports.
    assert_eq!(v["engine_side"], "duplex", "{v}");
    assert_eq!(v["capture_latency_frames"], 256, "{v}");
    assert_eq!(v["playback_latency_frames"], 512, "{v}");
    assert_eq!(v["latency_frames"], 1024, "{v}");
    let latency = v["latency_ms"].as_f64().unwrap();
    assert!((latency - 1024.0 / 48.0).abs() < 1e-6, "latency {latency} ms");
    assert!(v["callback_us"]["p99"].as_f64().is_some_and(|p| p > 0.0), "{v}");
    assert!(v["realtime"].is_null(), "no real-time priority unless asked: {v}");
    let _ = std::fs::remove_dir_all(&dir);
}

/// At a 64-frame period with `--zero-latency` the latency is 192 frames (4.000 ms): capture 64 +
/// engine 0 + playback 128; `--no-connect` leaves the ports unconnected and says so.
#[test]
fn monitor_zero_latency_at_period_64_and_no_connect() {
    let _serial = serial();
    let Some(server) = jack_or_skip("monitor_zero_latency_at_period_64_and_no_connect", 64) else { return };
    let dir = scratch("zero64");
    let ir = write_ir(&dir, 1.0);
    let json = dir.join("summary.json");
    let out = partita(&server.name)
        .args(["monitor", "--host", "jack", "--zero-latency", "--seconds", "2", "--ir"])
        .arg(&ir)
        .arg("--summary-json")
        .arg(&json)
        .output()
        .unwrap();
    let (_, err) = text(&out);
    eprintln!("{err}");
    assert!(out.status.success(), "{err}");
    assert!(err.contains("latency: 192 frames (4.000 ms) = capture 64 + engine 0 + playback 128"), "{err}");
    let v: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    assert_eq!(v["latency_frames"], 192, "{v}");
    assert!(v["input_device"].as_str().is_some_and(|s| s.contains("system:capture_1")), "{v}");
    let out = partita(&server.name)
        .args(["monitor", "--host", "jack", "--no-connect", "--seconds", "1", "--ir"])
        .arg(&ir)
        .arg("--summary-json")
        .arg(&json)
        .output()
        .unwrap();
    let (_, err) = text(&out);
    assert!(out.status.success(), "{err}");
    assert!(err.contains("in (not connected) -> out (not connected)"), "{err}");
    let out = partita(&server.name)
        .args(["monitor", "--host", "jack", "--ring-margin", "64", "--seconds", "1", "--ir"])
        .arg(&ir)
        .output()
        .unwrap();
    let (_, err) = text(&out);
    assert!(!out.status.success() && err.contains("--ring-margin does not apply to JACK"), "{err}");
    let _ = std::fs::remove_dir_all(&dir);
}

/// The server is killed mid-run: monitor says so and exits non-zero within 2 s.
#[test]
fn monitor_exits_nonzero_soon_after_the_server_dies() {
    let _serial = serial();
    let Some(mut server) = jack_or_skip("monitor_exits_nonzero_soon_after_the_server_dies", 256) else { return };
    let dir = scratch("killed");
    let ir = write_ir(&dir, 0.5);
    let json = dir.join("summary.json");
    let child = partita(&server.name)
        .args(["monitor", "--host", "jack", "--ir"])
        .arg(&ir)
        .args(["--seconds", "60", "--summary-json"])
        .arg(&json)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    std::thread::sleep(Duration::from_millis(2500));
    server.kill_now();
    let killed = Instant::now();
    let (tx, rx) = std::sync::mpsc::channel();
    let pid = child.id();
    std::thread::spawn(move || {
        let _ = tx.send(child.wait_with_output());
    });
    let out = match rx.recv_timeout(Duration::from_secs(2)) {
        Ok(out) => out.unwrap(),
        Err(_) => {
            // SAFETY: kill(2) on our own child's pid.
            unsafe {
                libc::kill(pid as libc::pid_t, libc::SIGKILL);
            }
            panic!("partita monitor still running 2 s after the server died");
        }
    };
    let took = killed.elapsed();
    let (_, err) = text(&out);
    eprintln!("exited after {took:?}:\n{err}");
    assert!(!out.status.success(), "a dead server must give a non-zero exit");
    assert!(err.contains("partita: error:"), "{err}");
    assert!(err.contains("JACK server stopped") || err.contains("stopped calling back"), "{err}");
    let v: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    assert!(v["fault"].is_string(), "{v}");
    let _ = std::fs::remove_dir_all(&dir);
}

/// `--reconnect`: the server is killed mid-run and started again under the same name; monitor says so,
/// reconnects, runs to `--seconds` and exits 0 with the fault survived named in the summary.
#[test]
fn monitor_reconnects_after_the_server_comes_back() {
    let _serial = serial();
    let Some(mut server) = jack_or_skip("monitor_reconnects_after_the_server_comes_back", 256) else { return };
    let dir = scratch("reconnect");
    let ir = write_ir(&dir, 0.5);
    let json = dir.join("summary.json");
    let child = partita(&server.name)
        .args(["monitor", "--host", "jack", "--reconnect", "--seconds", "9", "--ir"])
        .arg(&ir)
        .arg("--summary-json")
        .arg(&json)
        .stdout(Stdio::piped())
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    std::thread::sleep(Duration::from_millis(2500));
    let name = server.name.clone();
    server.kill_now();
    std::thread::sleep(Duration::from_millis(1500));
    let again = partita_testkit::jack_server::JackServer::start_named(&name, 256).expect("the server comes back");
    let out = child.wait_with_output().unwrap();
    let (_, err) = text(&out);
    eprintln!("{err}");
    assert!(out.status.success(), "exit {:?}", out.status);
    assert!(err.contains("--reconnect: retrying every second"), "{err}");
    assert!(err.contains("reconnected"), "{err}");
    let v: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    assert_eq!(v["reconnects"], 1, "{v}");
    assert!(v["faults_survived"][0].as_str().is_some_and(|f| f.contains("JACK server stopped")), "{v}");
    assert!(v["fault"].is_null(), "{v}");
    drop(again);
    drop(server);
    let _ = std::fs::remove_dir_all(&dir);
}

/// Without a server the command fails with one clear line saying so.
#[test]
fn monitor_without_a_server_says_so() {
    let _serial = serial();
    let dir = scratch("noserver");
    let ir = write_ir(&dir, 0.1);
    let out = partita("partita-no-such-server").args(["monitor", "--host", "jack", "--ir"]).arg(&ir).output().unwrap();
    let (_, err) = text(&out);
    assert!(!out.status.success());
    assert!(err.contains("is the JACK server running"), "{err}");
    let out =
        partita("partita-no-such-server").args(["monitor", "--host", "nosuchhost", "--ir"]).arg(&ir).output().unwrap();
    let (_, err) = text(&out);
    assert!(!out.status.success());
    assert!(err.contains("no audio host `nosuchhost`") && err.contains("JACK"), "{err}");
    let _ = std::fs::remove_dir_all(&dir);
}

/// `partita devices` lists the JACK server's devices with their configuration, as text and JSON.
#[test]
fn devices_lists_the_jack_devices() {
    let _serial = serial();
    let Some(server) = jack_or_skip("devices_lists_the_jack_devices", 128) else { return };
    let out = partita(&server.name).args(["devices", "--host", "jack"]).output().unwrap();
    let (text_out, err) = text(&out);
    assert!(out.status.success(), "{err}");
    assert!(text_out.contains("JACK Input") && text_out.contains("JACK Output"), "{text_out}");
    assert!(text_out.contains("48000 Hz, f32, period 128 frames"), "{text_out}");
    let out = partita(&server.name).args(["devices", "--host", "jack", "--json"]).output().unwrap();
    let v: serde_json::Value = serde_json::from_slice(&out.stdout).unwrap();
    let devices = v["hosts"][0]["devices"].as_array().unwrap();
    assert_eq!(devices.len(), 2, "{v}");
    assert_eq!(devices[0]["input_configs"][0]["buffer_frames"]["min"], 128, "{v}");
}

/// `--alt-ir` with SIGHUP: the running engine swaps to the other IR through its control API (prepared
/// off the audio thread, crossfaded), and the summary counts the swap as requested and completed.
#[test]
fn sighup_swaps_to_the_alternative_ir() {
    use std::io::{BufRead, BufReader};
    let _serial = serial();
    let Some(server) = jack_or_skip("sighup_swaps_to_the_alternative_ir", 256) else { return };
    let dir = scratch("swap");
    let ir = write_ir(&dir, 0.5);
    let alt = dir.join("alt.wav");
    let chans: Vec<Vec<f32>> = (0..2)
        .map(|c| partita_core::synth::decaying_noise(12_000, 6_000.0, 40 + c).iter().map(|v| 0.2 * v).collect())
        .collect();
    partita_io::write_wav_atomic(&alt, &chans, 48_000, partita_io::SampleFormat::F32, partita_io::Dither::OFF).unwrap();
    let json = dir.join("summary.json");
    let mut child = partita(&server.name)
        .args(["monitor", "--host", "jack", "--block", "256", "--seconds", "6", "--swap-fade-ms", "100", "--ir"])
        .arg(&ir)
        .arg("--alt-ir")
        .arg(&alt)
        .arg("--summary-json")
        .arg(&json)
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    // The signal handlers are in place once the engine line is printed.
    let mut err = BufReader::new(child.stderr.take().unwrap());
    let mut log = String::new();
    let mut line = String::new();
    while err.read_line(&mut line).unwrap_or(0) > 0 {
        log.push_str(&line);
        if line.starts_with("engine:") {
            assert!(line.contains("SIGHUP swaps"), "{line}");
            break;
        }
        line.clear();
    }
    std::thread::sleep(Duration::from_millis(1000));
    // SAFETY: kill(2) on our own child's pid with a valid signal number.
    unsafe {
        libc::kill(child.id() as libc::pid_t, libc::SIGHUP);
    }
    let mut rest = String::new();
    let _ = std::io::Read::read_to_string(&mut err, &mut rest);
    log.push_str(&rest);
    let status = child.wait().unwrap();
    eprintln!("{log}");
    assert!(status.success(), "exit {status:?}: {log}");
    let v: serde_json::Value = serde_json::from_str(&std::fs::read_to_string(&json).unwrap()).unwrap();
    assert_eq!(v["swaps_requested"], 1, "{v}");
    assert_eq!(v["swaps_completed"], 1, "{v}");
    assert_eq!(v["nonfinite_samples"], 0, "{v}");
    assert!(log.contains("IR swaps     1 requested, 1 completed"), "{log}");
    let _ = std::fs::remove_dir_all(&dir);
}

/// SIGINT (Ctrl-C) ends a running monitor cleanly: exit 0, the summary printed, well before `--seconds`.
/// (That a second one forces the exit is checked without a server, in src/signals.rs.)
#[test]
fn sigint_stops_cleanly_with_a_summary() {
    let _serial = serial();
    let Some(server) = jack_or_skip("sigint_stops_cleanly_with_a_summary", 256) else { return };
    let dir = scratch("sigint");
    let ir = write_ir(&dir, 0.5);
    let mut child = partita(&server.name)
        .args(["monitor", "--host", "jack", "--block", "256", "--seconds", "60", "--ir"])
        .arg(&ir)
        .stderr(Stdio::piped())
        .spawn()
        .unwrap();
    let mut err = std::io::BufReader::new(child.stderr.take().unwrap());
    let mut log = String::new();
    let mut line = String::new();
    while std::io::BufRead::read_line(&mut err, &mut line).unwrap_or(0) > 0 {
        log.push_str(&line);
        if line.starts_with("engine:") {
            break;
        }
        line.clear();
    }
    std::thread::sleep(Duration::from_millis(1000));
    let sent = Instant::now();
    // SAFETY: kill(2) on our own child's pid with a valid signal number.
    unsafe {
        libc::kill(child.id() as libc::pid_t, libc::SIGINT);
    }
    let mut rest = String::new();
    let _ = std::io::Read::read_to_string(&mut err, &mut rest);
    log.push_str(&rest);
    let status = child.wait().unwrap();
    eprintln!("stopped {:?} after SIGINT:\n{log}", sent.elapsed());
    assert!(status.success(), "exit {status:?}: {log}");
    assert!(sent.elapsed() < Duration::from_secs(10), "took {:?}", sent.elapsed());
    assert!(log.contains("summary:") && log.contains("overruns"), "{log}");
    let _ = std::fs::remove_dir_all(&dir);
}
