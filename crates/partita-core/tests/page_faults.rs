//! No page faults inside `process()` (docs/DESIGN.md, R5): every buffer the audio thread or a worker
//! touches is written once when the engine is built (and the worker threads touch their stacks when they
//! start), so the kernel never has to map a fresh page during a callback. A first-touch page fault costs
//! microseconds and, under memory pressure, far more (common practice for real-time Linux: prefault
//! everything, as mlock-based guides say; from memory).
//!
//! Counted with `getrusage(RUSAGE_SELF).ru_minflt` (every thread of this process) across every `process()`
//! call from an engine's first call through two periods of its largest level, a swap and its whole
//! crossfade, on every schedule with the default options. The IR is long enough that its level buffers
//! exceed glibc's mmap threshold (128 KiB), so they are fresh pages, never recycled ones.
//!
//! Before counting, a twin engine of the same plan runs the same calls: the machine code and the test
//! thread's stack are then warm, and the count is about the measured engine's own memory. The twin stays
//! alive, so nothing it freed is handed to the measured engine. A test hook that skips the prefaulting
//! makes the count non-zero: the check can fail.
//!
//! One test in this binary: the counter covers every thread of the process.

#![cfg(unix)]

mod support;

use partita_core::synth::decaying_noise;
use partita_core::{
    hooks, prefault_stack, Control, Engine, ImpulseResponse, Planner, PreparedIr, Routing, Schedule, Shape,
};
use support::{auto_plan, choice_name};

const BLOCK: usize = 64;
const FADE_FRAMES: usize = 4800;

fn minor_faults() -> u64 {
    // SAFETY: getrusage writes into the zeroed, writable struct it is given.
    let mut usage: libc::rusage = unsafe { std::mem::zeroed() };
    // SAFETY: RUSAGE_SELF is a valid `who`; `usage` is valid for writes.
    let rc = unsafe { libc::getrusage(libc::RUSAGE_SELF, &mut usage) };
    assert_eq!(rc, 0, "getrusage failed");
    usage.ru_minflt as u64
}

fn ir(seed: u64) -> ImpulseResponse {
    // 2 s stereo at 48 kHz: its larger levels hold megabytes of spectra and delay line.
    let taps = (0..2).map(|c| decaying_noise(96_000, 30_000.0, seed + c).iter().map(|v| 0.3 * v).collect()).collect();
    ImpulseResponse::new(taps, 48_000).unwrap()
}

/// An engine for `schedule` with its control handle and a second IR prepared for a swap.
fn build(choice: Option<Schedule>) -> (Engine, Control, PreparedIr, usize) {
    let (a, b) = (ir(1), ir(3));
    let plan = match choice {
        Some(schedule) => Planner::new().block_frames(BLOCK).schedule(schedule).plan(a.frames()).unwrap(),
        None => auto_plan(false, a.frames(), BLOCK, Shape { inputs: 2, outputs: 2, paths: 2 }, BLOCK),
    };
    let largest = plan.levels.iter().map(|l| l.block_frames).max().unwrap();
    let mut engine = Engine::new(&plan, &a, Routing::Stereo, 256).unwrap();
    let control = engine.control().unwrap();
    let prepared = control.prepare(&b).unwrap();
    (engine, control, prepared, largest)
}

/// Minor page faults of every thread, summed over `calls` `process()` calls alone (the slices of each call
/// are made outside the counted region). Host calls alternate 64 and 100 frames: one block, and a size
/// that is neither a divisor nor a multiple of it.
fn count_calls(engine: &mut Engine, calls: usize, x: &[Vec<f32>], y: &mut [Vec<f32>]) -> u64 {
    let mut faults = 0;
    for k in 0..calls {
        let n = if k % 2 == 0 { 64 } else { 100 };
        let ins: Vec<&[f32]> = x.iter().map(|c| &c[..n]).collect();
        let mut outs: Vec<&mut [f32]> = y.iter_mut().map(|c| &mut c[..n]).collect();
        let before = minor_faults();
        engine.process(&ins, &mut outs).unwrap();
        faults += minor_faults() - before;
    }
    faults
}

/// Counts the faults inside `process()` from an engine's first call through two periods of its largest
/// level, a swap, its crossfade and two more periods.
fn faults_across_process(engine: &mut Engine, control: &mut Control, prepared: PreparedIr, largest: usize) -> u64 {
    let schedule = engine.plan().levels.last().map(|l| l.schedule);
    let x: Vec<Vec<f32>> = (0..2).map(|c| partita_core::synth::Noise::new(7 + c).vec(256)).collect();
    let mut y = vec![vec![0.0f32; 256]; 2];
    let calls_for = |frames: usize| 2 * frames.div_ceil(164) + 2;
    let mut faults = count_calls(engine, calls_for(2 * largest), &x, &mut y);
    control.swap(prepared, FADE_FRAMES).expect("room in the swap queue");
    faults += count_calls(engine, calls_for(2 * largest + FADE_FRAMES), &x, &mut y);
    // Off the counted region: the crossfade ran, and the old IR comes back to this thread.
    assert_eq!(control.status().swaps_completed, 1, "{schedule:?}: the crossfade ended within the counted calls");
    drop(control.poll());
    faults
}

#[test]
fn process_takes_no_page_fault_on_any_schedule_and_the_check_can_fail() {
    prefault_stack(512 * 1024);
    let mut alive = Vec::new();
    let mut twin_faults = Vec::new();
    for choice in [Some(Schedule::Sync), Some(Schedule::Sliced), Some(Schedule::Workers), None] {
        let schedule = choice_name(choice);
        // The twin: same plan, same calls; it warms the code paths and this thread's stack, and stays alive.
        let (mut twin, mut twin_control, twin_ir, largest) = build(choice);
        twin_faults.push(faults_across_process(&mut twin, &mut twin_control, twin_ir, largest));
        let (mut engine, mut control, prepared, largest) = build(choice);
        let faults = faults_across_process(&mut engine, &mut control, prepared, largest);
        assert_eq!(faults, 0, "{schedule}: {faults} minor page faults inside process()");
        alive.push((twin, twin_control, engine, control));
    }
    hooks::set_skip_prefault(true);
    let (mut engine, mut control, prepared, largest) = build(Some(Schedule::Sync));
    hooks::set_skip_prefault(false);
    let unprefaulted = faults_across_process(&mut engine, &mut control, prepared, largest);
    assert!(unprefaulted > 0, "without prefaulting the count must be non-zero, or this test cannot fail");
    eprintln!(
        "minor faults in process(): 0 on sync, sliced, workers and auto; {unprefaulted} without prefaulting; twins \
         (cold code and stack) {twin_faults:?}"
    );
}
