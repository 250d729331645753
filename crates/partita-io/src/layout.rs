//! What the channels of an impulse-response file mean: which input feeds which output.

use std::fmt;
use std::str::FromStr;

use partita_core::Routing;

use crate::error::{ParseError, PrepareError};

/// The channel layout of an impulse response.
///
/// By default it follows from the channel count ([`Layout::from_channels`]): 1 is mono, 2 stereo, 4 true stereo.
/// Any other count needs an explicit layout, usually `matrix:MxN`.
/// For a matrix of M inputs and N outputs, IR channel `m * N + n` connects input `m` to output `n`; true stereo
/// is the 2x2 matrix, so its channels are LL, LR, RL, RR (first letter the input).
///
/// ```
/// use partita_io::Layout;
/// assert_eq!("true-stereo".parse::<Layout>()?, Layout::TrueStereo);
/// assert_eq!("matrix:2x3".parse::<Layout>()?, Layout::Matrix { inputs: 2, outputs: 3 });
/// assert_eq!(Layout::from_channels(4)?, Layout::TrueStereo);
/// assert!(Layout::from_channels(6).is_err());
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Layout {
    /// One IR channel, one input, one output (`mono`).
    Mono,
    /// Two IR channels, one input feeding two outputs (`mono-to-stereo`).
    MonoToStereo,
    /// Two IR channels, left to left and right to right; a 1-channel IR also fits and serves both (`stereo`).
    Stereo,
    /// Four IR channels LL, LR, RL, RR, two inputs to two outputs (`true-stereo`).
    TrueStereo,
    /// `inputs * outputs` IR channels, channel `m * outputs + n` for input `m` to output `n` (`matrix:MxN`).
    Matrix {
        /// Inputs (M).
        inputs: usize,
        /// Outputs (N).
        outputs: usize,
    },
}

impl Layout {
    /// The layout a channel count implies: 1 mono, 2 stereo, 4 true stereo.
    ///
    /// # Errors
    /// [`PrepareError::LayoutNeeded`] for any other count; the user must give a layout, e.g. `matrix:MxN`.
    pub fn from_channels(channels: usize) -> Result<Self, PrepareError> {
        match channels {
            1 => Ok(Self::Mono),
            2 => Ok(Self::Stereo),
            4 => Ok(Self::TrueStereo),
            _ => Err(PrepareError::LayoutNeeded { channels }),
        }
    }

    /// The engine routing for this layout.
    pub fn routing(self) -> Routing {
        match self {
            Self::Mono => Routing::Mono,
            Self::MonoToStereo => Routing::MonoToStereo,
            Self::Stereo => Routing::Stereo,
            Self::TrueStereo => Routing::TrueStereo,
            Self::Matrix { inputs, outputs } => Routing::Matrix { inputs, outputs },
        }
    }

    /// Checks that an IR with `channels` channels fits this layout.
    ///
    /// # Errors
    /// [`PrepareError::LayoutMismatch`] with the core's reason when it does not.
    pub fn check(self, channels: usize) -> Result<(), PrepareError> {
        self.routing().resolve(channels).map(|_| ()).map_err(|source| PrepareError::LayoutMismatch {
            layout: self,
            channels,
            source,
        })
    }
}

impl fmt::Display for Layout {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Mono => f.write_str("mono"),
            Self::MonoToStereo => f.write_str("mono-to-stereo"),
            Self::Stereo => f.write_str("stereo"),
            Self::TrueStereo => f.write_str("true-stereo"),
            Self::Matrix { inputs, outputs } => write!(f, "matrix:{inputs}x{outputs}"),
        }
    }
}

const EXPECTED: &str = "mono, mono-to-stereo, stereo, true-stereo or matrix:MxN (M inputs, N outputs, both at least 1)";

impl FromStr for Layout {
    type Err = ParseError;

    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let err = || ParseError { what: "layout", given: s.to_string(), expected: EXPECTED };
        match s.trim().to_ascii_lowercase().as_str() {
            "mono" => Ok(Self::Mono),
            "mono-to-stereo" => Ok(Self::MonoToStereo),
            "stereo" => Ok(Self::Stereo),
            "true-stereo" | "truestereo" => Ok(Self::TrueStereo),
            other => {
                let dims = other.strip_prefix("matrix:").ok_or_else(err)?;
                let (m, n) = dims.split_once('x').ok_or_else(err)?;
                let inputs: usize = m.trim().parse().map_err(|_| err())?;
                let outputs: usize = n.trim().parse().map_err(|_| err())?;
                if inputs == 0 || outputs == 0 {
                    return Err(err());
                }
                Ok(Self::Matrix { inputs, outputs })
            }
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn parses_every_form_and_round_trips_through_display() {
        for (text, want) in [
            ("mono", Layout::Mono),
            ("mono-to-stereo", Layout::MonoToStereo),
            ("stereo", Layout::Stereo),
            ("true-stereo", Layout::TrueStereo),
            ("matrix:3x2", Layout::Matrix { inputs: 3, outputs: 2 }),
            ("matrix:1x6", Layout::Matrix { inputs: 1, outputs: 6 }),
        ] {
            let got: Layout = text.parse().unwrap();
            assert_eq!(got, want, "{text}");
            assert_eq!(got.to_string(), text);
        }
    }

    #[test]
    fn refuses_malformed_text() {
        for bad in ["", "quad", "matrix:", "matrix:2", "matrix:0x2", "matrix:2x0", "matrix:ax2", "matrix:2x-1"] {
            let err = bad.parse::<Layout>().unwrap_err();
            assert!(err.to_string().contains("matrix:MxN"), "{bad}: {err}");
        }
    }

    #[test]
    fn default_layouts_follow_the_channel_count() {
        assert_eq!(Layout::from_channels(1).unwrap(), Layout::Mono);
        assert_eq!(Layout::from_channels(2).unwrap(), Layout::Stereo);
        assert_eq!(Layout::from_channels(4).unwrap(), Layout::TrueStereo);
        for n in [0, 3, 5, 6, 8] {
            let err = Layout::from_channels(n).unwrap_err();
            assert_eq!(err, PrepareError::LayoutNeeded { channels: n });
            assert!(err.to_string().contains("matrix:MxN"), "{err}");
        }
    }

    #[test]
    fn matrix_channel_index_is_input_major() {
        // Channel m * N + n connects input m to output n: for 2x3, channel 4 is input 1 -> output 1.
        let map = Layout::Matrix { inputs: 2, outputs: 3 }.routing().resolve(6).unwrap();
        let p = map.paths.iter().find(|p| p.ir_channel == 4).unwrap();
        assert_eq!((p.input, p.output), (1, 1));
        let p = map.paths.iter().find(|p| p.ir_channel == 2).unwrap();
        assert_eq!((p.input, p.output), (0, 2));
        // True stereo: LR (channel 1) is left in -> right out; RL (channel 2) right in -> left out.
        let map = Layout::TrueStereo.routing().resolve(4).unwrap();
        let p = map.paths.iter().find(|p| p.ir_channel == 1).unwrap();
        assert_eq!((p.input, p.output), (0, 1));
        let p = map.paths.iter().find(|p| p.ir_channel == 2).unwrap();
        assert_eq!((p.input, p.output), (1, 0));
    }

    #[test]
    fn check_refuses_a_layout_that_does_not_fit() {
        assert!(Layout::TrueStereo.check(4).is_ok());
        assert!(Layout::Matrix { inputs: 2, outputs: 3 }.check(6).is_ok());
        let err = Layout::TrueStereo.check(2).unwrap_err();
        assert!(matches!(err, PrepareError::LayoutMismatch { channels: 2, .. }), "{err:?}");
        assert!(Layout::Matrix { inputs: 2, outputs: 3 }.check(5).is_err());
        assert!(Layout::Mono.check(2).is_err());
    }
}
