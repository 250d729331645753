//! Validated multi-channel impulse responses.

use crate::error::IrError;

/// A multi-channel impulse response: planar f32 taps and a sample rate.
///
/// Every channel has the same length, at least one tap, and only finite taps. The meaning of each channel
/// comes from the [`Routing`](crate::Routing) it is used with.
#[derive(Debug, Clone, PartialEq)]
pub struct ImpulseResponse {
    channels: Vec<Vec<f32>>,
    sample_rate_hz: u32,
}

impl ImpulseResponse {
    /// Validates and wraps planar taps.
    ///
    /// # Errors
    /// [`IrError`] when there are no channels, no taps, channels of different lengths, a NaN or infinite
    /// tap, or a zero sample rate.
    ///
    /// ```
    /// let ir = partita_core::ImpulseResponse::new(vec![vec![1.0, 0.5, 0.25]], 48_000).unwrap();
    /// assert_eq!(ir.frames(), 3);
    /// assert!(partita_core::ImpulseResponse::new(vec![vec![]], 48_000).is_err());
    /// ```
    pub fn new(channels: Vec<Vec<f32>>, sample_rate_hz: u32) -> Result<Self, IrError> {
        let first = channels.first().ok_or(IrError::NoChannels)?;
        let expected = first.len();
        if expected == 0 {
            return Err(IrError::Empty);
        }
        if sample_rate_hz == 0 {
            return Err(IrError::SampleRateZero);
        }
        for (channel, taps) in channels.iter().enumerate() {
            if taps.len() != expected {
                return Err(IrError::UnequalLengths { channel, frames: taps.len(), expected });
            }
            if let Some(frame) = taps.iter().position(|t| !t.is_finite()) {
                return Err(IrError::NonFinite { channel, frame });
            }
        }
        Ok(Self { channels, sample_rate_hz })
    }

    /// Taps per channel.
    pub fn frames(&self) -> usize {
        self.channels[0].len()
    }

    /// Number of channels.
    pub fn channels(&self) -> usize {
        self.channels.len()
    }

    /// The taps of one channel.
    ///
    /// # Panics
    /// When `index >= self.channels()`.
    pub fn channel(&self, index: usize) -> &[f32] {
        &self.channels[index]
    }

    /// All channels, planar.
    pub fn as_planar(&self) -> &[Vec<f32>] {
        &self.channels
    }

    /// Sample rate in Hz.
    pub fn sample_rate_hz(&self) -> u32 {
        self.sample_rate_hz
    }

    /// Takes the taps back.
    pub fn into_planar(self) -> Vec<Vec<f32>> {
        self.channels
    }
}
