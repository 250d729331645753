//! The direct-form head: the first taps of the IR computed sample by sample, so the output needs no
//! block latency (Gardner 1995, J. AES 43(3): "zero-delay" convolution).

use crate::ring::{prefaulted, TimeRing};

/// Direct-form FIR over the first `taps` of each path's IR. The taps themselves belong to the IR (see
/// [`head_taps`]), so a swap can run two sets side by side.
#[derive(Debug, Clone)]
pub(crate) struct Head {
    taps: usize,
    /// Per path: (input, output).
    paths: Vec<(usize, usize)>,
    window: Vec<f32>,
    sum: Vec<f32>,
}

/// The head taps of each path, reversed so each output sample is a forward dot product: the first
/// `taps` of the IR channel, zero-padded. Allocates.
pub(crate) fn head_taps(taps: usize, channels: impl Iterator<Item = Vec<f32>>) -> Vec<Vec<f32>> {
    channels
        .map(|mut h| {
            h.resize(taps, 0.0);
            h.reverse();
            h
        })
        .collect()
}

impl Head {
    /// `paths` gives (input, output) per path. Allocates.
    pub(crate) fn new(taps: usize, max_chunk: usize, paths: Vec<(usize, usize)>) -> Self {
        Self { taps, paths, window: prefaulted(max_chunk + taps), sum: prefaulted(max_chunk) }
    }

    /// Adds the head's output for output frames `[frame, frame + len)` into `outputs[o][..len]`, with
    /// the reversed taps `h[path]` from [`head_taps`].
    pub(crate) fn add(
        &mut self,
        inputs: &[TimeRing],
        frame: i64,
        outputs: &mut [Vec<f32>],
        len: usize,
        h: &[Vec<f32>],
    ) {
        let taps = self.taps;
        let window = &mut self.window[..len + taps - 1];
        for ((input, output), h) in self.paths.iter().zip(h) {
            inputs[*input].read(frame - (taps as i64 - 1), window);
            let sum = &mut self.sum[..len];
            for (j, s) in sum.iter_mut().enumerate() {
                *s = dot(h, &window[j..j + taps]);
            }
            for (y, s) in outputs[*output][..len].iter_mut().zip(sum.iter()) {
                *y += s;
            }
        }
    }

    pub(crate) fn memory_bytes(&self) -> usize {
        4 * (self.window.len() + self.sum.len())
    }

    #[cfg(feature = "test-hooks")]
    /// Overwrites scratch with garbage (tests prove it does not matter).
    pub(crate) fn dirty(&mut self, value: f32) {
        self.window.fill(value);
        self.sum.fill(value);
    }
}

/// Dot product with eight independent accumulators so the compiler can vectorize it.
pub(crate) fn dot(a: &[f32], b: &[f32]) -> f32 {
    let mut acc = [0.0f32; 8];
    let chunks = a.len() / 8;
    for (ca, cb) in a.chunks_exact(8).zip(b.chunks_exact(8)) {
        for l in 0..8 {
            acc[l] += ca[l] * cb[l];
        }
    }
    let mut s = acc.iter().sum::<f32>();
    for (x, y) in a[chunks * 8..].iter().zip(&b[chunks * 8..]) {
        s += x * y;
    }
    s
}
