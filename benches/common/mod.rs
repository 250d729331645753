//! Shared by the `harness = false` benches: quick-mode detection, the output directory, Markdown tables,
//! CSV files, synthetic stereo IRs and the machine line quoted with every result.
#![allow(dead_code)] // each bench uses a different subset

use std::fmt::Write as _;
use std::path::PathBuf;

use partita_core::synth::decaying_noise;
use partita_core::ImpulseResponse;

/// Sample rate of every bench.
pub const RATE_HZ: u32 = 48_000;

/// Quick mode: `cargo test --benches` (no `--bench` argument) or `PARTITA_BENCH_QUICK=1`. The bench then
/// runs a few cells in seconds and writes the same outputs, so it never rots.
pub fn quick_mode() -> bool {
    let forced = std::env::var("PARTITA_BENCH_QUICK").is_ok_and(|v| !v.is_empty() && v != "0");
    forced || !std::env::args().any(|a| a == "--bench")
}

/// `target/partita-bench` (under `CARGO_TARGET_DIR` when set), created if missing.
pub fn out_dir() -> PathBuf {
    let target = std::env::var_os("CARGO_TARGET_DIR")
        .map(PathBuf::from)
        .unwrap_or_else(|| PathBuf::from(env!("CARGO_MANIFEST_DIR")).join("target"));
    let dir = target.join("partita-bench");
    std::fs::create_dir_all(&dir).unwrap_or_else(|e| panic!("cannot create {}: {e}", dir.display()));
    dir
}

/// A stereo decaying-noise IR of `seconds` at 48 kHz: two independent channels (seeds differ) whose
/// envelope falls 60 dB over 80% of the length, first tap 1 (as a room's direct sound).
pub fn stereo_ir(seconds: f64, seed: u64) -> ImpulseResponse {
    let frames = (seconds * f64::from(RATE_HZ)).round() as usize;
    let rt60 = 0.8 * frames as f64;
    let channels = (0..2).map(|c| decaying_noise(frames, rt60, seed + c)).collect();
    ImpulseResponse::new(channels, RATE_HZ).expect("synthetic taps are finite and non-empty")
}

/// `nproc`-style core count, CPU model and date, for the heading of every result.
pub fn machine_line() -> String {
    let cores = std::thread::available_parallelism().map_or(1, |n| n.get());
    let model = std::fs::read_to_string("/proc/cpuinfo")
        .ok()
        .and_then(|s| {
            s.lines()
                .find(|l| l.starts_with("model name"))
                .map(|l| l.split(':').nth(1).unwrap_or("").trim().to_string())
        })
        .unwrap_or_else(|| "unknown CPU".to_string());
    let date = std::process::Command::new("date")
        .arg("-u")
        .arg("+%Y-%m-%d %H:%M UTC")
        .output()
        .ok()
        .map(|o| String::from_utf8_lossy(&o.stdout).trim().to_string())
        .unwrap_or_default();
    format!("{cores} cores, {model}, kernel {}, {date}", partita_core::Kernel::detect().name())
}

/// The 1-minute system load average (`/proc/loadavg`), to show when other work shared the machine.
pub fn load_average() -> f64 {
    std::fs::read_to_string("/proc/loadavg")
        .ok()
        .and_then(|s| s.split_whitespace().next().and_then(|v| v.parse().ok()))
        .unwrap_or(f64::NAN)
}

/// A Markdown table built row by row.
#[derive(Debug)]
pub struct Table {
    header: Vec<String>,
    rows: Vec<Vec<String>>,
}

impl Table {
    pub fn new(header: &[&str]) -> Self {
        Self { header: header.iter().map(|s| s.to_string()).collect(), rows: Vec::new() }
    }

    pub fn row(&mut self, cells: Vec<String>) {
        assert_eq!(cells.len(), self.header.len(), "table row width");
        self.rows.push(cells);
    }

    pub fn render(&self) -> String {
        let mut s = String::new();
        let _ = writeln!(s, "| {} |", self.header.join(" | "));
        let _ = writeln!(s, "|{}|", self.header.iter().map(|_| "---").collect::<Vec<_>>().join("|"));
        for r in &self.rows {
            let _ = writeln!(s, "| {} |", r.join(" | "));
        }
        s
    }
}

/// A CSV file with a fixed header; values are written as given (numbers, or plain words without commas).
#[derive(Debug)]
pub struct Csv {
    path: PathBuf,
    text: String,
    columns: usize,
}

impl Csv {
    pub fn new(path: PathBuf, header: &[&str]) -> Self {
        Self { path, text: format!("{}\n", header.join(",")), columns: header.len() }
    }

    pub fn row(&mut self, cells: &[String]) {
        assert_eq!(cells.len(), self.columns, "csv row width");
        debug_assert!(cells.iter().all(|c| !c.contains(',')));
        self.text.push_str(&cells.join(","));
        self.text.push('\n');
    }

    pub fn write(&self) -> PathBuf {
        std::fs::write(&self.path, &self.text).unwrap_or_else(|e| panic!("cannot write {}: {e}", self.path.display()));
        self.path.clone()
    }
}

/// Median of a non-empty sample (mean of the middle two for an even count).
pub fn median(v: &[f64]) -> f64 {
    let mut s = v.to_vec();
    s.sort_by(f64::total_cmp);
    let n = s.len();
    if n % 2 == 1 {
        s[n / 2]
    } else {
        0.5 * (s[n / 2 - 1] + s[n / 2])
    }
}
