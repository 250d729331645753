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

    /// Writes `src` at `[frame, frame + len)`, replacing non-finite samples by zero; returns how many
    /// were replaced.
    pub(crate) fn write_sanitized(&mut self, frame: i64, src: &[f32]) -> u64 {
        let (start, first, _) = self.runs(frame, src.len());
        let (a, b) = src.split_at(first);
        let (wrapped, tail) = self.data.split_at_mut(start);
        sanitize_into(&mut tail[..first], a) + sanitize_into(&mut wrapped[..b.len()], b)
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

fn sanitize_into(dst: &mut [f32], src: &[f32]) -> u64 {
    let mut bad = 0;
    for (d, &v) in dst.iter_mut().zip(src) {
        let ok = v.is_finite();
        *d = if ok { v } else { 0.0 };
        bad += u64::from(!ok);
    }
    bad
}

/// A vector of `len` default values whose memory pages are all written once now, so that the audio
/// thread never takes a first-touch page fault on them later (large zeroed allocations are mapped
/// lazily by the OS). Allocates.
pub(crate) fn prefaulted<T: Copy + Default>(len: usize) -> Vec<T> {
    let mut v = vec![T::default(); len];
    let step = (4096 / std::mem::size_of::<T>().max(1)).max(1);
    for i in (0..len).step_by(step) {
        // SAFETY: `i < len`, so the pointer is in bounds and properly aligned for T.
        unsafe { std::ptr::write_volatile(v.as_mut_ptr().add(i), T::default()) };
    }
    v
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn wraps_and_takes() {
        let mut r = TimeRing::new(8);
        assert_eq!(r.len(), 8);
        assert_eq!(r.write_sanitized(6, &[1.0, f32::NAN, 3.0, f32::INFINITY]), 2);
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
