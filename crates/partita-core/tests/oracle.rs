//! Layer 1: the direct-form oracle against hand cases (Oppenheim & Schafer, the convolution sum).

use partita_core::naive::{convolve, convolve_routed};

#[test]
fn impulse_gives_the_ir() {
    let h = [0.5f32, -0.25, 0.125];
    assert_eq!(convolve(&[1.0], &h), vec![0.5, -0.25, 0.125]);
}

#[test]
fn delayed_impulse_gives_the_delayed_ir() {
    let h = [1.0f32, 2.0, 3.0];
    assert_eq!(convolve(&[0.0, 0.0, 1.0], &h), vec![0.0, 0.0, 1.0, 2.0, 3.0]);
}

#[test]
fn hand_computed_case() {
    // [1, 2, 3] * [1, 1]: 1, 1+2, 2+3, 3.
    assert_eq!(convolve(&[1.0, 2.0, 3.0], &[1.0, 1.0]), vec![1.0, 3.0, 5.0, 3.0]);
    // Output length M + L - 1.
    assert_eq!(convolve(&[0.0; 7], &[0.0; 5]).len(), 11);
}

#[test]
fn linearity_and_commutativity() {
    let x = [0.3f32, -1.0, 0.25, 0.5];
    let z = [1.0f32, 0.5, -0.5, 0.0];
    let h = [0.2f32, 0.7, -0.1];
    let sum: Vec<f32> = x.iter().zip(&z).map(|(a, b)| 2.0 * a + b).collect();
    let lhs = convolve(&sum, &h);
    let (cx, cz) = (convolve(&x, &h), convolve(&z, &h));
    for i in 0..lhs.len() {
        assert!((lhs[i] - (2.0 * cx[i] + cz[i])).abs() < 1e-6);
    }
    let swapped = convolve(&h, &x);
    for (a, b) in convolve(&x, &h).iter().zip(&swapped) {
        assert!((a - b).abs() < 1e-12);
    }
}

#[test]
fn empty_and_one_tap() {
    assert!(convolve(&[], &[1.0]).is_empty());
    assert!(convolve(&[1.0], &[]).is_empty());
    assert_eq!(convolve(&[1.0, -2.0], &[3.0]), vec![3.0, -6.0]);
}

#[test]
fn routed_sum_over_inputs() {
    // Two inputs into one output: y = x0 * h0 + x1 * h1.
    let inputs = vec![vec![1.0f32, 0.0], vec![0.0f32, 1.0]];
    let ir = vec![vec![1.0f32, 2.0], vec![10.0f32, 20.0]];
    let y = convolve_routed(&inputs, &ir, &[(0, 0, 0), (1, 0, 1)], 1);
    assert_eq!(y, vec![vec![1.0, 12.0, 20.0]]);
}
