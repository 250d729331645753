//! Sample formats: every PCM format cpal offers, to and from the engine's f32.
//!
//! Integer PCM maps as value / 2^(bits-1) (unsigned formats first remove their mid-point offset), the
//! convention of WAV readers and of `partita-io` (REFERENCES.md, "soundfile ... scaling"). Towards the
//! device, f32 is clamped to [-1, 1], scaled by 2^(bits-1), rounded to nearest and clamped to the
//! format's range, so +1.0 becomes the largest code (e.g. 32767) and -1.0 the smallest (-32768).
//! NaN becomes 0. DSD formats are not PCM and are refused when the stream is set up.

use cpal::{SampleFormat, SizedSample, I24, U24};

/// A device sample type the bridge converts to and from f32. Implemented for every PCM
/// [`SampleFormat`]: i8, i16, i24, i32, i64, u8, u16, u24, u32, u64, f32, f64.
pub trait DeviceSample: SizedSample + Send + 'static {
    /// The sample as f32 in [-1, 1) for integers.
    fn to_f32(self) -> f32;
    /// The f32 value converted (clamped, rounded) to this format.
    fn from_f32(value: f32) -> Self;
}

/// True for the formats the bridge can stream (all but DSD).
pub fn is_supported(format: SampleFormat) -> bool {
    !format.is_dsd()
}

/// Rounds `v * 2^(bits-1)` into the signed range of `bits` bits. f64 keeps 32- and 64-bit codes exact.
#[inline]
fn to_signed_code(value: f32, bits: u32) -> i64 {
    if value.is_nan() {
        return 0;
    }
    let scale = (1u64 << (bits - 1)) as f64;
    let max = scale - 1.0;
    let v = (f64::from(value.clamp(-1.0, 1.0)) * scale).round();
    v.clamp(-scale, max) as i64
}

#[inline]
fn from_signed_code(code: i64, bits: u32) -> f32 {
    (code as f64 / (1u64 << (bits - 1)) as f64) as f32
}

macro_rules! signed {
    ($t:ty, $bits:expr) => {
        impl DeviceSample for $t {
            #[inline]
            fn to_f32(self) -> f32 {
                from_signed_code(self as i64, $bits)
            }
            #[inline]
            fn from_f32(value: f32) -> Self {
                to_signed_code(value, $bits) as $t
            }
        }
    };
}

macro_rules! unsigned {
    ($t:ty, $bits:expr) => {
        impl DeviceSample for $t {
            #[inline]
            fn to_f32(self) -> f32 {
                let offset = 1u64 << ($bits - 1);
                from_signed_code((self as u64).wrapping_sub(offset) as i64, $bits)
            }
            #[inline]
            fn from_f32(value: f32) -> Self {
                let offset = 1u64 << ($bits - 1);
                (to_signed_code(value, $bits) as u64).wrapping_add(offset) as $t
            }
        }
    };
}

signed!(i8, 8);
signed!(i16, 16);
signed!(i32, 32);
signed!(i64, 64);
unsigned!(u8, 8);
unsigned!(u16, 16);
unsigned!(u32, 32);
unsigned!(u64, 64);

impl DeviceSample for I24 {
    #[inline]
    fn to_f32(self) -> f32 {
        from_signed_code(i64::from(self.inner()), 24)
    }
    #[inline]
    fn from_f32(value: f32) -> Self {
        // The code is in [-2^23, 2^23 - 1] by construction.
        I24::new_unchecked(to_signed_code(value, 24) as i32)
    }
}

impl DeviceSample for U24 {
    #[inline]
    fn to_f32(self) -> f32 {
        from_signed_code(i64::from(self.inner()) - (1 << 23), 24)
    }
    #[inline]
    fn from_f32(value: f32) -> Self {
        U24::new_unchecked((to_signed_code(value, 24) + (1 << 23)) as i32)
    }
}

impl DeviceSample for f32 {
    #[inline]
    fn to_f32(self) -> f32 {
        self
    }
    #[inline]
    fn from_f32(value: f32) -> Self {
        value
    }
}

impl DeviceSample for f64 {
    #[inline]
    fn to_f32(self) -> f32 {
        self as f32
    }
    #[inline]
    fn from_f32(value: f32) -> Self {
        f64::from(value)
    }
}

/// Calls `$body` with `$slice` bound to `$data`'s samples as the matching [`DeviceSample`] type.
/// DSD data (refused at set-up) does nothing.
macro_rules! with_samples {
    ($data:expr, $as_slice:ident, |$slice:ident| $body:expr) => {{
        use cpal::SampleFormat as F;
        match $data.sample_format() {
            F::I8 => {
                if let Some($slice) = $data.$as_slice::<i8>() {
                    $body
                }
            }
            F::I16 => {
                if let Some($slice) = $data.$as_slice::<i16>() {
                    $body
                }
            }
            F::I24 => {
                if let Some($slice) = $data.$as_slice::<cpal::I24>() {
                    $body
                }
            }
            F::I32 => {
                if let Some($slice) = $data.$as_slice::<i32>() {
                    $body
                }
            }
            F::I64 => {
                if let Some($slice) = $data.$as_slice::<i64>() {
                    $body
                }
            }
            F::U8 => {
                if let Some($slice) = $data.$as_slice::<u8>() {
                    $body
                }
            }
            F::U16 => {
                if let Some($slice) = $data.$as_slice::<u16>() {
                    $body
                }
            }
            F::U24 => {
                if let Some($slice) = $data.$as_slice::<cpal::U24>() {
                    $body
                }
            }
            F::U32 => {
                if let Some($slice) = $data.$as_slice::<u32>() {
                    $body
                }
            }
            F::U64 => {
                if let Some($slice) = $data.$as_slice::<u64>() {
                    $body
                }
            }
            F::F32 => {
                if let Some($slice) = $data.$as_slice::<f32>() {
                    $body
                }
            }
            F::F64 => {
                if let Some($slice) = $data.$as_slice::<f64>() {
                    $body
                }
            }
            _ => {}
        }
    }};
}
pub(crate) use with_samples;

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn integer_scaling_is_value_over_half_range() {
        assert_eq!(i16::MIN.to_f32(), -1.0);
        assert_eq!(16384i16.to_f32(), 0.5);
        assert_eq!(i16::from_f32(1.0), i16::MAX);
        assert_eq!(i16::from_f32(-1.0), i16::MIN);
        assert_eq!(i16::from_f32(0.5), 16384);
        assert_eq!(i16::from_f32(f32::NAN), 0);
        assert_eq!(i16::from_f32(7.0), i16::MAX);
        assert_eq!(128u8.to_f32(), 0.0);
        assert_eq!(0u8.to_f32(), -1.0);
        assert_eq!(u8::from_f32(0.0), 128);
        assert_eq!(u16::from_f32(-1.0), 0);
        assert_eq!(I24::new_unchecked(-(1 << 23)).to_f32(), -1.0);
        assert_eq!(I24::from_f32(1.0).inner(), (1 << 23) - 1);
        assert_eq!(U24::from_f32(0.0).inner(), 1 << 23);
        assert_eq!(i32::from_f32(-1.0), i32::MIN);
        assert_eq!(i64::from_f32(0.25), 1 << 61);
        assert_eq!(u64::from_f32(0.0), 1 << 63);
    }

    fn round_trip<T: DeviceSample>(bits: u32) {
        let step = 1.0 / (1u64 << (bits - 1)) as f64;
        for k in -20..=20 {
            let v = (k as f64 * 0.049) as f32;
            let back = T::from_f32(v).to_f32();
            assert!(f64::from((back - v).abs()) <= step.max(1e-7), "{bits} bits: {v} -> {back}");
        }
    }

    #[test]
    fn every_format_round_trips_within_one_code() {
        round_trip::<i8>(8);
        round_trip::<i16>(16);
        round_trip::<I24>(24);
        round_trip::<i32>(32);
        round_trip::<i64>(64);
        round_trip::<u8>(8);
        round_trip::<u16>(16);
        round_trip::<U24>(24);
        round_trip::<u32>(32);
        round_trip::<u64>(64);
        round_trip::<f32>(32);
        round_trip::<f64>(32);
    }
}
