//! Direct-form convolution with f64 accumulation: the oracle every engine test compares against.
//!
//! `y[n] = sum_k h[k] x[n - k]` (Oppenheim & Schafer, *Discrete-Time Signal Processing*, the convolution sum).
//! It costs `x.len() * h.len()` multiply-adds, so it is for tests and short filters only.

/// Full linear convolution: `x.len() + h.len() - 1` samples (empty if either input is empty).
///
/// Allocates the output.
///
/// ```
/// let y = partita_core::naive::convolve(&[1.0, 2.0], &[1.0, 0.5]);
/// assert_eq!(y, vec![1.0, 2.5, 1.0]);
/// ```
pub fn convolve(x: &[f32], h: &[f32]) -> Vec<f64> {
    if x.is_empty() || h.is_empty() {
        return Vec::new();
    }
    let mut y = vec![0.0f64; x.len() + h.len() - 1];
    for (i, &xi) in x.iter().enumerate() {
        let xi = f64::from(xi);
        for (yk, &hk) in y[i..i + h.len()].iter_mut().zip(h) {
            *yk += xi * f64::from(hk);
        }
    }
    y
}

/// Convolution of several inputs through an IR matrix, summed per output: `outputs[o] = sum_i x[i] * h(i, o)`.
///
/// `pairs` lists `(input, output, ir_channel)`; `ir` holds the IR channels. Every output has length
/// `frames + ir_frames - 1`. Allocates.
pub fn convolve_routed(
    inputs: &[Vec<f32>],
    ir: &[Vec<f32>],
    pairs: &[(usize, usize, usize)],
    outputs: usize,
) -> Vec<Vec<f64>> {
    let frames = inputs.first().map_or(0, Vec::len);
    let taps = ir.first().map_or(0, Vec::len);
    let len = (frames + taps).saturating_sub(1);
    let mut out = vec![vec![0.0f64; len]; outputs];
    for &(i, o, c) in pairs {
        for (acc, v) in out[o].iter_mut().zip(convolve(&inputs[i], &ir[c])) {
            *acc += v;
        }
    }
    out
}
