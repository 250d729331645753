//! The sweep sidecar (`partita deconvolve --sweep FILE.json`): JSON bytes through
//! [`SweepSidecar::from_json`], and for sweeps short enough to generate here, through
//! [`SweepSidecar::from_json_verified`] (regenerate, hash, compare).
//!
//! Contract: a clear error naming the file, or parameters that make a valid sweep of at most
//! [`MAX_SWEEP_FRAMES`](partita_room::sweep::MAX_SWEEP_FRAMES) frames (so a sidecar cannot make `deconvolve` allocate without bound); a verified
//! sidecar's samples are finite, within [-1, 1], and as many as the sidecar says.

use std::path::Path;

use partita::sweep_file::{SidecarError, SweepSidecar};

use crate::check_message;

/// Sweeps up to this many frames are generated and hashed here.
pub const RUN_MAX_FRAMES: usize = 1 << 16;

const NAME: &str = "fuzz.json";

/// The sweep sidecar reader on `data`.
///
/// # Panics
/// When the contract (module docs) is broken.
pub fn sweep_sidecar(data: &[u8]) {
    let path = Path::new(NAME);
    let (_, spec) = match SweepSidecar::from_json(data, path) {
        Ok(parsed) => parsed,
        Err(e) => return check_message(&e.to_string(), NAME),
    };
    if let Err(e) = spec.validate() {
        panic!("an accepted sidecar's sweep does not validate: {e}");
    }
    let frames = spec.sweep_frames().saturating_add(spec.silence_frames());
    assert!(frames as u64 <= partita_room::sweep::MAX_SWEEP_FRAMES, "an accepted sidecar describes {frames} frames");
    if frames > RUN_MAX_FRAMES {
        return;
    }
    match SweepSidecar::from_json_verified(data, path) {
        Ok((sidecar, _, samples)) => {
            assert_eq!(samples.len(), sidecar.frames, "the sidecar says {} frames", sidecar.frames);
            assert_eq!(samples.len(), frames);
            if let Some(i) = samples.iter().position(|v| !(v.is_finite() && v.abs() <= 1.0)) {
                panic!("sweep sample {i} is {}", samples[i]);
            }
        }
        Err(e @ (SidecarError::HashMismatch { .. } | SidecarError::Invalid { .. })) => {
            check_message(&e.to_string(), NAME)
        }
        Err(e) => panic!("parsed once, refused the second time: {e}"),
    }
}
