//! Time-indexed ring buffers: the shared input history and the per-output accumulator.
//!
//! Both are indexed by absolute frame number (`i64`, negative before the stream started) modulo a power
//! of two, so levels with different delays and periods read and write the same timeline.

/// A power-of-two ring of f32 indexed by absolute frame.
#[derive(Debug, Clone)]
pub(crate) struct TimeRing {
    data: Vec<f32>,
    mask: usize,
}

impl TimeRing {
    /// A zeroed ring holding at least `min_len` frames. Allocates.
    pub(crate) fn new(min_len: usize) -> Self {
        let len = min_len.max(1).next_power_of_two();
        Self { data: prefaulted(len), mask: len - 1 }
    }

    pub(crate) fn len(&self) -> usize {
        self.data.len()
    }

    fn index(&self, frame: i64) -> usize {
        (frame as usize) & self.mask // two's complement keeps negative frames on the ring
    }

    /// The two contiguous runs `[frame, frame + len)` occupies.
    fn runs(&self, frame: i64, len: usize) -> (usize, usize, usize) {
        debug_assert!(len <= self.data.len());
        let start = self.index(frame);
        let first = len.min(self.data.len() - start);
        (start, first, len - first)
    }

    /// Writes `src` at `[frame, frame + len)`, replacing non-finite samples by zero and clamping finite
    /// ones to +-[`INPUT_LIMIT`]; returns how many were replaced and how many clamped.
    pub(crate) fn write_sanitized(&mut self, frame: i64, src: &[f32]) -> Sanitized {
        let (start, first, _) = self.runs(frame, src.len());
        let (a, b) = src.split_at(first);
        let (wrapped, tail) = self.data.split_at_mut(start);
        let (x, y) = (sanitize_into(&mut tail[..first], a), sanitize_into(&mut wrapped[..b.len()], b));
        Sanitized { nonfinite: x.nonfinite + y.nonfinite, clamped: x.clamped + y.clamped }
    }

    /// Writes `src` at `[frame, frame + len)`.
    pub(crate) fn write(&mut self, frame: i64, src: &[f32]) {
        let (start, first, second) = self.runs(frame, src.len());
        self.data[start..start + first].copy_from_slice(&src[..first]);
        self.data[..second].copy_from_slice(&src[first..]);
    }

    /// Writes `len` zeros at `[frame, frame + len)`.
    pub(crate) fn write_zeros(&mut self, frame: i64, len: usize) {
        let (start, first, second) = self.runs(frame, len);
        self.data[start..start + first].fill(0.0);
        self.data[..second].fill(0.0);
    }

    /// All samples, in storage order.
    pub(crate) fn samples_mut(&mut self) -> &mut [f32] {
        &mut self.data
    }

    /// Copies `[frame, frame + dst.len())` into `dst`.
    pub(crate) fn read(&self, frame: i64, dst: &mut [f32]) {
        let (start, first, second) = self.runs(frame, dst.len());
        dst[..first].copy_from_slice(&self.data[start..start + first]);
        dst[first..].copy_from_slice(&self.data[..second]);
    }

    /// Adds `src` into `[frame, frame + src.len())`.
    pub(crate) fn add(&mut self, frame: i64, src: &[f32]) {
        let (start, first, second) = self.runs(frame, src.len());
        for (d, s) in self.data[start..start + first].iter_mut().zip(&src[..first]) {
            *d += s;
        }
        for (d, s) in self.data[..second].iter_mut().zip(&src[first..]) {
            *d += s;
        }
    }

    /// Moves `[frame, frame + dst.len())` into `dst` and leaves zeros behind.
    pub(crate) fn take(&mut self, frame: i64, dst: &mut [f32]) {
        self.read(frame, dst);
        let (start, first, second) = self.runs(frame, dst.len());
        self.data[start..start + first].fill(0.0);
        self.data[..second].fill(0.0);
    }

    pub(crate) fn clear(&mut self) {
        self.data.fill(0.0);
    }
}

/// The largest input magnitude the engine takes as it is: 2^20 = 1,048,576, about 120 dB above full scale.
/// Larger finite samples are clamped to it (and counted): a sample near `f32::MAX` would overflow the FFTs
/// and multiply-accumulates to infinity and poison the delay lines with NaN for a whole IR length, while
/// 2^20 leaves a margin of about 10^32 for the sums of a long IR.
pub const INPUT_LIMIT: f32 = 1_048_576.0;

/// What sanitizing a piece of input found.
#[derive(Debug, Clone, Copy, Default, PartialEq, Eq)]
pub(crate) struct Sanitized {
    /// NaN or infinite samples, replaced by zero.
    pub(crate) nonfinite: u64,
    /// Finite samples beyond +-[`INPUT_LIMIT`], clamped to it.
    pub(crate) clamped: u64,
}

impl std::ops::AddAssign for Sanitized {
    fn add_assign(&mut self, other: Self) {
        self.nonfinite += other.nonfinite;
        self.clamped += other.clamped;
    }
}

fn sanitize_into(dst: &mut [f32], src: &[f32]) -> Sanitized {
    let mut out = Sanitized::default();
    for (d, &v) in dst.iter_mut().zip(src) {
        let finite = v.is_finite();
        let big = finite && v.abs() > INPUT_LIMIT;
        *d = if !finite {
            0.0
        } else if big {
            INPUT_LIMIT.copysign(v)
        } else {
            v
        };
        out.nonfinite += u64::from(!finite);
        out.clamped += u64::from(big);
    }
    out
}

/// A vector of `len` default values whose memory pages are all written once now, so that the audio
/// thread never takes a first-touch page fault on them later (large zeroed allocations are mapped
/// lazily by the OS). Allocates.
pub(crate) fn prefaulted<T: Copy + Default>(len: usize) -> Vec<T> {
    let mut v = vec![T::default(); len];
    #[cfg(feature = "test-hooks")]
    if crate::hooks::SKIP_PREFAULT.load(std::sync::atomic::Ordering::Relaxed) {
        return v;
    }
    let step = (4096 / std::mem::size_of::<T>().max(1)).max(1);
    for i in (0..len).step_by(step) {
        // SAFETY: `i < len`, so the pointer is in bounds and properly aligned for T.
        unsafe { std::ptr::write_volatile(v.as_mut_ptr().add(i), T::default()) };
    }
    v
}

/// Stack the engine's worker threads touch when they start ([`prefault_stack`]).
pub(crate) const WORKER_STACK_PREFAULT_BYTES: usize = 256 * 1024;

/// Touches the next `bytes` of the calling thread's stack once, so that calls reaching that deep later do
/// not take first-touch page faults (a thread's stack is mapped lazily, like a large allocation). Real-time
/// hosts call it once on their audio thread before the first `process()`; the engine's worker threads
/// call it when they start. `bytes` must stay well inside the thread's stack size (2 MiB for threads Rust
/// spawns; the main thread's is usually 8 MiB). Does not allocate.
pub fn prefault_stack(bytes: usize) {
    const FRAME: usize = 16 * 1024;
    #[inline(never)]
    fn touch(frames: usize) {
        let mut page = [0u8; FRAME];
        for i in (0..FRAME).step_by(4096) {
            // SAFETY: `i < FRAME`: in bounds of the local array.
            unsafe { std::ptr::write_volatile(page.as_mut_ptr().add(i), 1) };
        }
        if frames > 1 {
            touch(frames - 1);
        }
        // Used after the call, so the recursion cannot become a loop that reuses one frame.
        std::hint::black_box(&mut page);
    }
    touch(bytes.div_ceil(FRAME).max(1));
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn huge_finite_samples_are_clamped_and_counted() {
        let mut r = TimeRing::new(8);
        let got = r.write_sanitized(0, &[3e38, -2e6, INPUT_LIMIT, -0.5, f32::NAN]);
        assert_eq!(got, Sanitized { nonfinite: 1, clamped: 2 });
        let mut out = [0.0; 5];
        r.read(0, &mut out);
        assert_eq!(out, [INPUT_LIMIT, -INPUT_LIMIT, INPUT_LIMIT, -0.5, 0.0]);
    }

    #[test]
    fn wraps_and_takes() {
        let mut r = TimeRing::new(8);
        assert_eq!(r.len(), 8);
        assert_eq!(r.write_sanitized(6, &[1.0, f32::NAN, 3.0, f32::INFINITY]).nonfinite, 2);
        let mut out = [9.0; 4];
        r.read(6, &mut out);
        assert_eq!(out, [1.0, 0.0, 3.0, 0.0]);
        r.add(7, &[1.0, 1.0]);
        r.take(6, &mut out);
        assert_eq!(out, [1.0, 1.0, 4.0, 0.0]);
        r.read(6, &mut out);
        assert_eq!(out, [0.0; 4]);
        // Negative frames (before the stream) map onto the ring too.
        r.write_sanitized(-2, &[5.0, 6.0]);
        let mut two = [0.0; 2];
        r.read(6, &mut two);
        assert_eq!(two, [5.0, 6.0]);
    }
}
