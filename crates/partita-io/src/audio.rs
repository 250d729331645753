//! Planar audio in memory.

/// Planar f32 audio and its sample rate: `channels[c][frame]`.
///
/// Samples from integer WAVs are scaled as value / 2^(bits-1), so full scale is [-1, 1).
/// Audio returned by [`read_wav`](crate::read_wav) always has channels of one length and only finite samples.
#[derive(Debug, Clone, PartialEq)]
pub struct Audio {
    /// One vector of samples per channel.
    pub channels: Vec<Vec<f32>>,
    /// Sample rate in Hz.
    pub sample_rate_hz: u32,
}

impl Audio {
    /// Wraps planar channels.
    pub fn new(channels: Vec<Vec<f32>>, sample_rate_hz: u32) -> Self {
        Self { channels, sample_rate_hz }
    }

    /// Frames (samples per channel) of channel 0; 0 when there are no channels.
    pub fn frames(&self) -> usize {
        self.channels.first().map_or(0, Vec::len)
    }

    /// Number of channels.
    pub fn channel_count(&self) -> usize {
        self.channels.len()
    }

    /// Duration in seconds (frames / rate; 0 at 0 Hz).
    pub fn duration_s(&self) -> f64 {
        if self.sample_rate_hz == 0 {
            0.0
        } else {
            self.frames() as f64 / f64::from(self.sample_rate_hz)
        }
    }

    /// The largest |sample| over all channels (0 for no samples).
    pub fn peak(&self) -> f32 {
        self.channels.iter().flatten().fold(0.0f32, |m, v| m.max(v.abs()))
    }
}
