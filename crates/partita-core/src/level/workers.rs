//! The `workers` schedule: a level's work as a periodic job on a worker thread (Battenberg & Avizienis,
//! DAFx-11). The job for an input block is released when the block completes and is due one level period
//! (N frames) later, at the boundary where the next job is released.
//!
//! Hand-off protocol, all lock-free (the audio thread never blocks; waking the worker is a futex post
//! through [`std::thread::Thread::unpark`]):
//! - job `j` uses slot `j % SLOTS` for its N new input frames and its N result frames per output;
//! - the audio thread stages the job's input into input slot `j % SLOTS` in chunks of C frames as they
//!   complete ([`TRANSFER_FRAMES`] or less, so that no callback copies a whole big level block), only
//!   while `completed + SLOTS > j` (the worker is done with job `j - SLOTS`); when the last chunk is in,
//!   it publishes `released = j + 1` (release ordering);
//! - the worker reads job `j`'s input after seeing `released > j` (acquire), writes its result, then
//!   publishes `completed = j + 1` (release);
//! - at the due boundary the audio thread reads the result after seeing `completed > j` (acquire), waiting
//!   at most [`LATE_SPIN`]; if the result is still not there it is abandoned (`abandoned = j + 1`), the
//!   block goes out without the level's contribution, and `late_results` counts it. The worker still
//!   pushes every block into its delay line, so later blocks stay correct; it skips the multiply and
//!   inverse FFT of abandoned jobs to catch up;
//! - a collected result is added into the output rings C frames at a time, each chunk at the boundary
//!   before its first frame is emitted (the job's slot is not written again before job `j + SLOTS` is released, several periods
//!   after its delivery ends).

use std::cell::UnsafeCell;
use std::sync::atomic::{AtomicBool, AtomicPtr, AtomicU64, AtomicU8, AtomicUsize, Ordering};
use std::sync::Arc;
use std::thread::{JoinHandle, Thread};
use std::time::{Duration, Instant};

use crate::denormal::DenormalGuard;
use crate::kernel::Kernel;
use crate::level::fdl::{LevelIo, LevelIr, LevelRunner, SlotMask};

/// How long the audio thread waits for a late worker result before going on without it.
pub const LATE_SPIN: Duration = Duration::from_micros(20);

/// What the audio thread does when a worker result is not ready at its due boundary.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Lateness {
    /// Wait at most [`LATE_SPIN`], then go on without the level's contribution for that block and count
    /// it (`Monitor::late_results`). The real-time policy.
    #[default]
    SpinThenDrop,
    /// Wait until the result is there. Never use it on a real-time thread: it is for offline rendering
    /// and tests, where callbacks come faster than real time.
    Wait,
}

/// Largest chunk, in frames, the audio thread moves in one boundary between a worker level's slots and
/// the engine's rings (levels up to this size move their whole block at the release boundary). Small
/// enough that no callback carries a big level's copies (a 49,152-frame stereo level moves about 1.2 MB
/// per period), large enough that most callbacks touch none of the slots.
pub(crate) const TRANSFER_FRAMES: usize = 2048;

/// Jobs in flight per worker level (input and result slots).
const SLOTS: usize = 4;

/// Worker threads alive in this process (for tests that check shutdown).
static LIVE_WORKERS: AtomicUsize = AtomicUsize::new(0);

/// Number of engine worker threads currently alive in this process.
#[doc(hidden)]
pub fn live_worker_threads() -> usize {
    LIVE_WORKERS.load(Ordering::SeqCst)
}

/// A buffer one side writes and the other reads, ordered by the atomics of [`JobCells`].
struct Slot(UnsafeCell<Box<[f32]>>);

struct JobCells {
    n: usize,
    outputs: usize,
    input_slots: Box<[Slot]>,
    output_slots: Box<[Slot]>,
    /// Per slot: the reset epoch of the job in it.
    slot_epoch: Box<[AtomicU64]>,
    /// Per slot: the IR slots the job computes, and their spectra. The engine keeps every IR a job
    /// points to alive until `completed` has passed the job.
    slot_mask: Box<[AtomicU8]>,
    slot_irs: Box<[[AtomicPtr<LevelIr>; 2]]>,
    released: AtomicU64,
    completed: AtomicU64,
    abandoned: AtomicU64,
    shutdown: AtomicBool,
    cpu_nanos: AtomicU64,
    /// Set by the worker once it is running and will not allocate again.
    ready: AtomicBool,
    /// Whether the worker thread flushes subnormals to zero, as it found its mode after setting it.
    flushing: AtomicBool,
    /// Test hook: extra time each job takes, in microseconds.
    delay_micros: AtomicU64,
    /// Granted SCHED_FIFO priority, or a negative OS error; `i64::MIN` until the thread reports.
    priority: std::sync::atomic::AtomicI64,
}

// SAFETY: the slot buffers are only accessed under the release/acquire protocol described in the
// module docs, which gives each buffer exactly one accessor at a time; everything else is atomic.
unsafe impl Sync for JobCells {}

/// Audio-thread side of a worker level.
pub(crate) struct WorkerLevel {
    shared: Arc<JobCells>,
    thread: Option<JoinHandle<()>>,
    waker: Thread,
    pub(crate) period_blocks: u64,
    pub(crate) phase_blocks: u64,
    delay: usize,
    inputs: Vec<usize>,
    outputs: Vec<usize>,
    next_job: u64,
    epoch: u64,
    /// The released job whose result is due at the next release boundary, where it lands, and its IR
    /// slots.
    outstanding: Option<(u64, i64, SlotMask)>,
    /// The collected result being added into the output rings, B frames per boundary.
    delivering: Option<Delivery>,
    /// False once a block of the job being staged could not be written (its slot was still in use):
    /// that job is refused at its release boundary.
    staging_ok: bool,
    /// Per IR slot: the last job released that uses it.
    last_job_with: [Option<u64>; 2],
    n: usize,
    /// Engine block B.
    block: usize,
    /// Transfer chunk C: a multiple of B that divides N.
    chunk: usize,
    /// C / B.
    chunk_blocks: u64,
    lead: usize,
    late: u64,
    refused: u64,
    memory: usize,
    lateness: Lateness,
}

impl std::fmt::Debug for WorkerLevel {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("WorkerLevel")
            .field("block_frames", &self.shared.n)
            .field("period_blocks", &self.period_blocks)
            .field("phase_blocks", &self.phase_blocks)
            .field("late", &self.late)
            .finish_non_exhaustive()
    }
}

/// A completed job's result on its way into the output rings.
#[derive(Debug, Clone, Copy)]
struct Delivery {
    job: u64,
    /// Frame where the result's first sample lands.
    at: i64,
    mask: SlotMask,
    /// Result samples delivered so far.
    pos: usize,
}

/// Worker start-up options.
#[derive(Debug, Clone, Copy)]
pub(crate) struct WorkerSetup {
    pub(crate) kernel: Kernel,
    /// SCHED_FIFO priority to request, if any.
    pub(crate) priority: Option<i32>,
    pub(crate) lateness: Lateness,
    pub(crate) name_index: usize,
}

impl WorkerLevel {
    /// Moves `runner` onto a new worker thread. Allocates and spawns.
    pub(crate) fn spawn(runner: LevelRunner, setup: WorkerSetup) -> std::io::Result<Self> {
        let n = runner.n();
        let memory = runner.memory_bytes() + 4 * SLOTS * n * (runner.inputs().len() + 2 * runner.output_count());
        let inputs = runner.inputs().to_vec();
        let outputs: Vec<usize> = (0..runner.output_count()).map(|w| runner.output_index(w)).collect();
        let slot = |len: usize| Slot(UnsafeCell::new(crate::ring::prefaulted::<f32>(len).into_boxed_slice()));
        let shared = Arc::new(JobCells {
            n,
            outputs: outputs.len(),
            input_slots: (0..SLOTS).map(|_| slot(inputs.len() * n)).collect(),
            output_slots: (0..SLOTS).map(|_| slot(2 * outputs.len() * n)).collect(),
            slot_epoch: (0..SLOTS).map(|_| AtomicU64::new(0)).collect(),
            slot_mask: (0..SLOTS).map(|_| AtomicU8::new(0)).collect(),
            slot_irs: (0..SLOTS)
                .map(|_| [AtomicPtr::new(std::ptr::null_mut()), AtomicPtr::new(std::ptr::null_mut())])
                .collect(),
            released: AtomicU64::new(0),
            completed: AtomicU64::new(0),
            abandoned: AtomicU64::new(0),
            shutdown: AtomicBool::new(false),
            cpu_nanos: AtomicU64::new(0),
            ready: AtomicBool::new(false),
            flushing: AtomicBool::new(false),
            delay_micros: AtomicU64::new(0),
            priority: std::sync::atomic::AtomicI64::new(i64::MIN),
        });
        let (period_blocks, phase_blocks, delay, lead) =
            (runner.period_blocks, runner.phase_blocks, runner.delay, runner.lead);
        let block = n / period_blocks as usize;
        let chunk = transfer_chunk(n, block);
        let worker_shared = Arc::clone(&shared);
        let windows: Vec<Vec<f32>> = (0..inputs.len()).map(|_| crate::ring::prefaulted::<f32>(2 * n)).collect();
        let thread = std::thread::Builder::new()
            .name(format!("partita-level-{}", setup.name_index))
            .spawn(move || worker_main(runner, windows, worker_shared, setup))?;
        let waker = thread.thread().clone();
        // Wait (off the audio thread) until the worker has done its start-up allocations, so that
        // everything after construction is allocation-free on every thread.
        while !shared.ready.load(Ordering::Acquire) {
            std::thread::yield_now();
        }
        Ok(Self {
            shared,
            thread: Some(thread),
            waker,
            period_blocks,
            phase_blocks,
            delay,
            inputs,
            outputs,
            next_job: 0,
            epoch: 0,
            outstanding: None,
            delivering: None,
            staging_ok: true,
            last_job_with: [None, None],
            n,
            block,
            chunk,
            chunk_blocks: (chunk / block) as u64,
            lead,
            late: 0,
            refused: 0,
            memory,
            lateness: setup.lateness,
        })
    }

    pub(crate) fn due_at(&self, block: u64) -> bool {
        block % self.period_blocks == self.phase_blocks
    }

    /// Whether boundary `block` ends a transfer chunk: the only boundaries where
    /// [`at_boundary`](Self::at_boundary) has work (releases are among them). Other boundaries do not
    /// touch the level at all, so most callbacks leave its state out of the cache.
    pub(crate) fn active_at(&self, block: u64) -> bool {
        block % self.chunk_blocks == self.phase_blocks % self.chunk_blocks
    }

    /// At a boundary that ends a transfer chunk ([`active_at`](Self::active_at)): add the result chunk
    /// the next engine block needs and stage the input chunk that just completed. At a release boundary
    /// (`release` is the IR slots to compute) also collect the job due now and release the job whose
    /// input is complete, computing the IR slots in `release` with the spectra `irs`.
    pub(crate) fn at_boundary(&mut self, io: LevelIo<'_>, irs: [Option<&LevelIr>; 2], release: Option<SlotMask>) {
        let n = self.n;
        let (inputs, outputs, now, emit) = (io.inputs, io.outputs, io.now, io.emit);
        self.deliver_due(outputs, emit);
        self.stage_block(inputs, now);
        let Some(mask) = release else { return };
        if let Some((job, at, job_mask)) = self.outstanding.take() {
            if self.wait_completed(job) {
                // The previous delivery ended at the boundary before this one (one period of blocks).
                self.delivering = Some(Delivery { job, at, mask: job_mask, pos: 0 });
                self.deliver_due(outputs, emit);
            } else {
                self.shared.abandoned.store(job + 1, Ordering::Release);
                self.late += 1;
            }
        }
        let job = self.next_job;
        if std::mem::replace(&mut self.staging_ok, true) {
            let slot = (job % SLOTS as u64) as usize;
            self.shared.slot_epoch[slot].store(self.epoch, Ordering::Relaxed);
            let mut job_mask = 0;
            for (s, ir) in irs.iter().enumerate() {
                let ptr = match ir {
                    Some(ir) if mask & (1 << s) != 0 => {
                        job_mask |= 1 << s;
                        self.last_job_with[s] = Some(job);
                        std::ptr::from_ref(*ir).cast_mut()
                    }
                    _ => std::ptr::null_mut(),
                };
                self.shared.slot_irs[slot][s].store(ptr, Ordering::Relaxed);
            }
            self.shared.slot_mask[slot].store(job_mask, Ordering::Relaxed);
            self.shared.released.store(job + 1, Ordering::Release);
            self.waker.unpark();
            self.next_job += 1;
            // Due one period later; lands at the next frame to emit plus N.
            self.outstanding = Some((job, emit + n as i64, job_mask));
        } else {
            // The worker was SLOTS jobs behind while this block was staged: it cannot enter the delay line.
            self.refused += 1;
        }
    }

    /// Copies the chunk of the job being staged that the engine block just completed ends (`delay` frames
    /// back from `now`) into the job's input slot, at its place in the job's N frames. Called only at
    /// boundaries that end a chunk.
    fn stage_block(&mut self, inputs: &[crate::ring::TimeRing], now: i64) {
        let (n, b, c, job) = (self.n, self.block, self.chunk, self.next_job);
        // Releases fall where now = B (m period + phase), and a job's last block sits at N - B.
        let end = (now - (self.phase_blocks as usize * b) as i64).rem_euclid(n as i64) as usize;
        let end = if end == 0 { n } else { end };
        debug_assert!(end.is_multiple_of(c), "staging at a boundary inside a chunk");
        if !self.staging_ok {
            return;
        }
        if !self.slot_free(job) {
            self.staging_ok = false;
            return;
        }
        let start = now - self.delay as i64 - c as i64;
        // SAFETY: the worker finished job - SLOTS (the previous user of this slot), observed by
        // `slot_free` with acquire ordering, and it reads this slot only after job's release.
        let buf = unsafe { &mut *self.shared.input_slots[(job % SLOTS as u64) as usize].0.get() };
        for (i, &input) in self.inputs.iter().enumerate() {
            inputs[input].read(start, &mut buf[i * n + end - c..i * n + end]);
        }
    }

    /// Adds the next chunk of the result being delivered into the output rings when the engine block
    /// about to be emitted (from frame `emit`) reaches it.
    fn deliver_due(&mut self, outputs: &mut [Vec<crate::ring::TimeRing>; 2], emit: i64) {
        let Some(d) = &mut self.delivering else { return };
        let (n, c, q) = (self.n, self.chunk, self.outputs.len());
        if d.at + d.pos as i64 >= emit + self.block as i64 {
            return;
        }
        // SAFETY: `completed > d.job` was observed with acquire ordering before the delivery began, and
        // the worker writes this slot again only for job d.job + SLOTS, released after the delivery ends.
        let result = unsafe { &*self.shared.output_slots[(d.job % SLOTS as u64) as usize].0.get() };
        for (slot, slot_rings) in outputs.iter_mut().enumerate() {
            if d.mask & (1 << slot) == 0 {
                continue;
            }
            for (o, &out) in self.outputs.iter().enumerate() {
                let from = (slot * q + o) * n + d.pos;
                slot_rings[out].add(d.at + d.pos as i64, &result[from..from + c]);
            }
        }
        d.pos += c;
        if d.pos >= n {
            self.delivering = None;
        }
    }

    /// Whether input slot `job % SLOTS` is free (the worker has finished job - SLOTS); under
    /// [`Lateness::Wait`] waits until it is.
    fn slot_free(&self, job: u64) -> bool {
        if self.lateness == Lateness::Wait {
            while self.shared.completed.load(Ordering::Acquire) + (SLOTS as u64) <= job {
                std::thread::yield_now();
            }
        }
        self.shared.completed.load(Ordering::Acquire) + SLOTS as u64 > job
    }

    fn wait_completed(&self, job: u64) -> bool {
        if self.shared.completed.load(Ordering::Acquire) > job {
            return true;
        }
        if self.lateness == Lateness::Wait {
            while self.shared.completed.load(Ordering::Acquire) <= job {
                std::thread::yield_now();
            }
            return true;
        }
        let until = Instant::now() + LATE_SPIN;
        while Instant::now() < until {
            std::hint::spin_loop();
            if self.shared.completed.load(Ordering::Acquire) > job {
                return true;
            }
        }
        false
    }

    /// True while a released job that uses IR slot `slot` may still be running on the worker.
    pub(crate) fn holds(&self, slot: usize) -> bool {
        self.last_job_with[slot].is_some_and(|j| self.shared.completed.load(Ordering::Acquire) <= j)
    }

    /// Frames between the next output to emit at a release and the first frame of that job's result.
    pub(crate) fn lead(&self) -> usize {
        self.lead
    }

    /// Level block N.
    pub(crate) fn n(&self) -> usize {
        self.n
    }

    /// Forgets in-flight work; the worker clears its delay line before its next job.
    pub(crate) fn reset(&mut self) {
        if let Some((job, _, _)) = self.outstanding.take() {
            self.shared.abandoned.store(job + 1, Ordering::Release);
        }
        self.delivering = None;
        self.epoch += 1;
        // The blocks staged so far came from input rings the reset zeroes: zero them too.
        let job = self.next_job;
        if self.staging_ok && self.shared.completed.load(Ordering::Acquire) + SLOTS as u64 > job {
            // SAFETY: as in `stage_block`.
            let buf = unsafe { &mut *self.shared.input_slots[(job % SLOTS as u64) as usize].0.get() };
            buf.fill(0.0);
        } else {
            self.staging_ok = false;
        }
    }

    /// Whether the worker thread runs with flush-to-zero on (read once it has started).
    #[cfg(feature = "test-hooks")]
    pub(crate) fn flushing(&self) -> bool {
        self.shared.flushing.load(Ordering::Relaxed)
    }

    pub(crate) fn late(&self) -> u64 {
        self.late
    }

    pub(crate) fn refused(&self) -> u64 {
        self.refused
    }

    pub(crate) fn cpu_seconds(&self) -> f64 {
        self.shared.cpu_nanos.load(Ordering::Relaxed) as f64 * 1e-9
    }

    /// The priority the worker was granted: `Some(Ok(p))`, `Some(Err(errno))`, or `None` when none was
    /// asked for or the thread has not started yet.
    pub(crate) fn priority(&self) -> Option<Result<i32, i32>> {
        match self.shared.priority.load(Ordering::Relaxed) {
            i64::MIN => None,
            p if p >= 0 => Some(Ok(p as i32)),
            e => Some(Err((-e) as i32)),
        }
    }

    /// Bytes of the hand-off slots (the worker's own level state is counted by its runner before the
    /// move; see `memory_bytes` of the level).
    pub(crate) fn memory_bytes(&self) -> usize {
        self.memory
    }

    #[cfg(feature = "test-hooks")]
    pub(crate) fn set_test_delay(&self, delay: Duration) {
        self.shared.delay_micros.store(delay.as_micros() as u64, Ordering::Relaxed);
    }
}

impl Drop for WorkerLevel {
    fn drop(&mut self) {
        self.shared.shutdown.store(true, Ordering::Release);
        self.waker.unpark();
        if let Some(t) = self.thread.take() {
            let _ = t.join();
        }
    }
}

/// The transfer chunk for a level of block `n` in an engine of block `b`: the largest multiple of `b`
/// that divides `n` and is at most [`TRANSFER_FRAMES`] (`b` itself when `b` is larger).
pub(crate) fn transfer_chunk(n: usize, b: usize) -> usize {
    let period = n / b;
    let most = (TRANSFER_FRAMES / b).clamp(1, period);
    (1..=most).rev().find(|k| period.is_multiple_of(*k)).unwrap_or(1) * b
}

fn worker_main(mut runner: LevelRunner, mut windows: Vec<Vec<f32>>, shared: Arc<JobCells>, setup: WorkerSetup) {
    LIVE_WORKERS.fetch_add(1, Ordering::SeqCst);
    struct Alive;
    impl Drop for Alive {
        fn drop(&mut self) {
            LIVE_WORKERS.fetch_sub(1, Ordering::SeqCst);
        }
    }
    let _alive = Alive;
    #[cfg(feature = "test-hooks")]
    let _flush = (!crate::hooks::WORKERS_WITHOUT_FLUSH.load(Ordering::Relaxed)).then(DenormalGuard::new);
    #[cfg(not(feature = "test-hooks"))]
    let _flush = DenormalGuard::new();
    shared.flushing.store(DenormalGuard::active(), Ordering::Relaxed);
    if let Some(p) = setup.priority {
        let granted = crate::platform::try_realtime_priority(p);
        shared.priority.store(
            match granted {
                Ok(p) => i64::from(p),
                Err(e) => -i64::from(e.max(1)),
            },
            Ordering::Relaxed,
        );
    }
    let n = shared.n;
    // Touch the parking machinery, the CPU clock and the stack once before reporting ready, so that no
    // job takes a first-use page fault.
    crate::ring::prefault_stack(crate::ring::WORKER_STACK_PREFAULT_BYTES);
    std::thread::park_timeout(Duration::ZERO);
    let _ = crate::platform::thread_cpu_seconds();
    shared.ready.store(true, Ordering::Release);
    let mut epoch = 0u64;
    let mut taken = 0u64;
    loop {
        if shared.shutdown.load(Ordering::Acquire) {
            break;
        }
        if shared.released.load(Ordering::Acquire) <= taken {
            std::thread::park();
            continue;
        }
        let c0 = crate::platform::thread_cpu_seconds();
        let job = taken;
        let slot = (job % SLOTS as u64) as usize;
        let job_epoch = shared.slot_epoch[slot].load(Ordering::Relaxed);
        if job_epoch != epoch {
            epoch = job_epoch;
            runner.clear();
            for w in &mut windows {
                w.fill(0.0);
            }
        }
        {
            // SAFETY: `released > job` was observed with acquire ordering; the audio thread will not
            // write this slot again until `completed > job`, published below.
            let input = unsafe { &*shared.input_slots[slot].0.get() };
            for (i, w) in windows.iter_mut().enumerate() {
                w.copy_within(n.., 0);
                w[n..].copy_from_slice(&input[i * n..(i + 1) * n]);
            }
        }
        runner.forward_with(|i, buf| buf.copy_from_slice(&windows[i]));
        if shared.abandoned.load(Ordering::Acquire) <= job {
            // SAFETY: the audio thread reads this slot only after `completed > job`, and has finished
            // reading the slot's previous job (job - SLOTS) before releasing this one.
            let out = unsafe { &mut *shared.output_slots[slot].0.get() };
            let mask = shared.slot_mask[slot].load(Ordering::Relaxed);
            for s in 0..2 {
                let ptr = shared.slot_irs[slot][s].load(Ordering::Relaxed);
                if mask & (1 << s) == 0 || ptr.is_null() {
                    continue;
                }
                // SAFETY: the engine published this pointer before `released` (release ordering,
                // observed above with acquire). It points into an IR set the engine holds through a
                // `NonNull` (`engine::swap::IrPtr`, so no move of the engine's values asserts unique
                // access to it) and keeps alive and unchanged until it has seen `completed > job`, which
                // is published only after this use.
                let ir = unsafe { &*ptr };
                for w in 0..shared.outputs {
                    runner.accumulate(w, setup.kernel, ir);
                    runner.inverse(s, w);
                    let k = s * shared.outputs + w;
                    out[k * n..(k + 1) * n].copy_from_slice(runner.result(s, w));
                }
            }
        }
        let extra = shared.delay_micros.load(Ordering::Relaxed);
        if extra > 0 {
            std::thread::sleep(Duration::from_micros(extra));
        }
        let c1 = crate::platform::thread_cpu_seconds();
        shared.cpu_nanos.fetch_add(((c1 - c0).max(0.0) * 1e9) as u64, Ordering::Relaxed);
        taken += 1;
        shared.completed.store(taken, Ordering::Release);
    }
}

#[cfg(test)]
mod tests {
    use super::transfer_chunk;

    #[test]
    fn transfer_chunks_are_block_multiples_that_divide_the_level() {
        assert_eq!(transfer_chunk(512, 64), 512); // small levels move whole at the release
        assert_eq!(transfer_chunk(4096, 64), 2048);
        assert_eq!(transfer_chunk(49_152, 64), 2048); // 768 blocks, chunks of 32
        assert_eq!(transfer_chunk(6144, 64), 2048); // 96 blocks, chunks of 32
        assert_eq!(transfer_chunk(5 * 1024, 1024), 1024); // 5 blocks: no divisor of 5 fits 2 blocks
        assert_eq!(transfer_chunk(8192, 4096), 4096); // B above the chunk: one block at a time
        for (n, b) in [(49_152, 64), (6144, 48), (3 * 2048, 96), (7 * 64, 64)] {
            let c = transfer_chunk(n, b);
            assert!(
                c.is_multiple_of(b) && n.is_multiple_of(c) && (c <= super::TRANSFER_FRAMES || c == b),
                "{n} {b} {c}"
            );
        }
    }
}
