//! Test support shared by Partita's test binaries and benches (not published).
//!
//! - [`TrapAllocator`]: a global allocator that counts allocations, reallocations and frees made while
//!   armed, either on the arming thread only ([`armed`]) or on every thread ([`armed_all_threads`]).
//!   It works the same in debug and release builds.
//! - [`ErrorBound`]: the DESIGN.md section 4 error bound (max error over reference peak, relative RMS).
//! - [`jack_server`] (unix): a private JACK server per test (dummy driver), skipped with a message when
//!   none can be started, a failure then under `CI`.
#![warn(missing_docs)]
#![deny(unsafe_op_in_unsafe_fn)]

#[cfg(unix)]
pub mod jack_server;

use std::alloc::{GlobalAlloc, Layout, System};
use std::cell::Cell;
use std::sync::atomic::{AtomicBool, AtomicU64, Ordering};

thread_local! {
    static ARMED_HERE: Cell<bool> = const { Cell::new(false) };
    /// Heap operations counted on this thread while armed here (other threads' traps never add to it).
    static HERE_COUNT: Cell<u64> = const { Cell::new(0) };
}
static ARMED_EVERYWHERE: AtomicBool = AtomicBool::new(false);
static VIOLATIONS: AtomicU64 = AtomicU64::new(0);

/// A global allocator that counts heap operations made while armed. Install it in a test binary:
///
/// ```ignore
/// #[global_allocator]
/// static ALLOC: partita_testkit::TrapAllocator = partita_testkit::TrapAllocator;
/// ```
#[derive(Debug, Clone, Copy, Default)]
pub struct TrapAllocator;

fn note() {
    if ARMED_HERE.try_with(Cell::get).unwrap_or(false) {
        let _ = HERE_COUNT.try_with(|c| c.set(c.get() + 1));
    }
    if ARMED_EVERYWHERE.load(Ordering::Relaxed) {
        VIOLATIONS.fetch_add(1, Ordering::Relaxed);
    }
}

// SAFETY: every method forwards to the system allocator unchanged; counting touches only atomics and a
// const-initialised thread-local (which never allocates).
unsafe impl GlobalAlloc for TrapAllocator {
    unsafe fn alloc(&self, layout: Layout) -> *mut u8 {
        note();
        // SAFETY: forwarded with the caller's layout.
        unsafe { System.alloc(layout) }
    }
    unsafe fn alloc_zeroed(&self, layout: Layout) -> *mut u8 {
        note();
        // SAFETY: forwarded with the caller's layout.
        unsafe { System.alloc_zeroed(layout) }
    }
    unsafe fn dealloc(&self, ptr: *mut u8, layout: Layout) {
        note();
        // SAFETY: `ptr` came from this allocator (i.e. System) with `layout`.
        unsafe { System.dealloc(ptr, layout) }
    }
    unsafe fn realloc(&self, ptr: *mut u8, layout: Layout, new_size: usize) -> *mut u8 {
        note();
        // SAFETY: `ptr` came from System with `layout`.
        unsafe { System.realloc(ptr, layout, new_size) }
    }
}

/// Runs `f` with the trap armed on the current thread; returns `f`'s value and the heap operations
/// `f` made on this thread.
pub fn armed<T>(f: impl FnOnce() -> T) -> (T, u64) {
    let before = HERE_COUNT.with(Cell::get);
    ARMED_HERE.with(|a| a.set(true));
    let out = f();
    ARMED_HERE.with(|a| a.set(false));
    (out, HERE_COUNT.with(Cell::get) - before)
}

/// Runs `f` with the trap armed on every thread of the process (engine workers included); returns
/// `f`'s value and the heap operations counted meanwhile. Use it in a test binary that runs one test at a
/// time (other tests' threads would be counted too).
pub fn armed_all_threads<T>(f: impl FnOnce() -> T) -> (T, u64) {
    let before = VIOLATIONS.load(Ordering::SeqCst);
    ARMED_EVERYWHERE.store(true, Ordering::SeqCst);
    let out = f();
    ARMED_EVERYWHERE.store(false, Ordering::SeqCst);
    (out, VIOLATIONS.load(Ordering::SeqCst) - before)
}

/// Error of a float32 result against a float64 reference.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ErrorBound {
    /// max |ours - reference| / max |reference|.
    pub max_over_peak: f64,
    /// sqrt(sum (ours - reference)^2 / sum reference^2).
    pub relative_rms: f64,
}

impl ErrorBound {
    /// Compares `ours` with `reference` over the reference's length (missing samples of `ours` count as
    /// zero, extra ones must be zero too and are compared against 0).
    pub fn measure(ours: &[f32], reference: &[f64]) -> Self {
        let peak = reference.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        let energy: f64 = reference.iter().map(|v| v * v).sum();
        let len = ours.len().max(reference.len());
        let (mut max_err, mut err_energy) = (0.0f64, 0.0f64);
        for i in 0..len {
            let a = ours.get(i).map_or(0.0, |&v| f64::from(v));
            let b = reference.get(i).copied().unwrap_or(0.0);
            let e = (a - b).abs();
            max_err = max_err.max(e);
            err_energy += e * e;
        }
        let max_over_peak = if peak > 0.0 { max_err / peak } else { max_err };
        let relative_rms = if energy > 0.0 { (err_energy / energy).sqrt() } else { err_energy.sqrt() };
        Self { max_over_peak, relative_rms }
    }

    /// DESIGN.md section 4: max error <= 2e-6 of the reference peak and relative RMS <= 1e-6.
    pub fn within_design_bound(&self) -> bool {
        self.max_over_peak <= 2e-6 && self.relative_rms <= 1e-6
    }

    /// Panics with `context` unless [`within_design_bound`](Self::within_design_bound).
    ///
    /// # Panics
    /// When the bound is exceeded.
    pub fn assert_design_bound(&self, context: &str) {
        assert!(
            self.within_design_bound(),
            "{context}: max error {:.3e} of peak (bound 2e-6), relative RMS {:.3e} (bound 1e-6)",
            self.max_over_peak,
            self.relative_rms
        );
    }
}

/// The spectrum of `x` zero-padded (or cut) to `n` frames: bins 0 to n / 2 of a real FFT in f64, unscaled.
/// Allocates.
pub fn spectrum(x: &[f32], n: usize) -> Vec<realfft::num_complex::Complex64> {
    let fft = realfft::RealFftPlanner::<f64>::new().plan_fft_forward(n);
    let mut buf: Vec<f64> = x.iter().take(n).map(|&v| f64::from(v)).collect();
    buf.resize(n, 0.0);
    let mut out = fft.make_output_vec();
    fft.process(&mut buf, &mut out).expect("buffer sizes from the plan");
    out
}

/// The Python interpreter with the pinned reference libraries, from `PARTITA_PYTHON` (which
/// `scripts/check` sets to its venv at `target/py`). Without it, prints a loud SKIP line naming `what`
/// straight to stderr (so the harness does not capture it) and returns `None`; under `CI` it panics
/// instead, so a reference check can never be skipped silently in CI.
///
/// # Panics
/// When `PARTITA_PYTHON` is unset and `CI` is set.
pub fn reference_python(what: &str) -> Option<std::path::PathBuf> {
    use std::io::Write;
    match std::env::var_os("PARTITA_PYTHON") {
        Some(p) => Some(std::path::PathBuf::from(p)),
        None if std::env::var_os("CI").is_some() => {
            panic!("PARTITA_PYTHON is not set under CI: run the tests through scripts/check ({what})")
        }
        None => {
            let _ = writeln!(
                std::io::stderr(),
                "\n*** SKIP {what}: PARTITA_PYTHON is not set (scripts/check sets it up) ***\n"
            );
            None
        }
    }
}

/// A fresh, empty scratch folder `root/group/name` for one test (emptied when it exists). Tests pass
/// `env!("CARGO_TARGET_TMPDIR")` as `root`, so the folders stay under `target/`.
///
/// # Panics
/// When the folder cannot be emptied or created.
pub fn scratch_dir(root: &str, group: &str, name: &str) -> std::path::PathBuf {
    let dir = std::path::PathBuf::from(root).join(group).join(name);
    if dir.exists() {
        std::fs::remove_dir_all(&dir).unwrap_or_else(|e| panic!("cannot empty {}: {e}", dir.display()));
    }
    std::fs::create_dir_all(&dir).unwrap_or_else(|e| panic!("cannot create {}: {e}", dir.display()));
    dir
}
