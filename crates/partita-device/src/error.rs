//! Set-up errors. Run-time conditions are counters and flags ([`Stats`](crate::Stats),
//! [`Fault`](crate::Fault)), never errors.

use std::fmt;

/// Input or output side of the bridge.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum Direction {
    /// Capture: the device's input stream.
    Input,
    /// Playback: the device's output stream.
    Output,
}

impl fmt::Display for Direction {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        f.write_str(match self {
            Self::Input => "input",
            Self::Output => "output",
        })
    }
}

/// Why live audio could not be set up. `Display` says what to do.
#[derive(Debug)]
#[non_exhaustive]
pub enum DeviceError {
    /// No host of that name is compiled in or available.
    NoHost {
        /// The name asked for.
        name: String,
        /// Hosts this build offers.
        available: Vec<String>,
    },
    /// No device matches the selector.
    NoDevice {
        /// Input or output.
        direction: Direction,
        /// What was asked for (`default`, an index or a name).
        wanted: String,
        /// The host's name.
        host: String,
        /// Devices of the host for that direction, as listed by `partita devices`.
        available: Vec<String>,
    },
    /// The device offers no configuration the bridge can use.
    NoConfig {
        /// Input or output.
        direction: Direction,
        /// The device.
        device: String,
        /// What was needed.
        reason: String,
    },
    /// A fixed buffer size outside the device's range (or a JACK period other than the server's).
    BufferSize {
        /// Input or output.
        direction: Direction,
        /// Frames asked for.
        requested: u32,
        /// Smallest supported.
        min: u32,
        /// Largest supported.
        max: u32,
    },
    /// The input and output devices cannot run at one sample rate.
    SampleRate {
        /// What was asked for or found on the input side.
        input_hz: u32,
        /// The output side.
        output_hz: u32,
    },
    /// A channel list does not fit the devices or the engine.
    ChannelMap(String),
    /// More engine channels than the bridge handles.
    TooManyChannels {
        /// Channels asked for.
        channels: usize,
        /// The limit ([`MAX_ENGINE_CHANNELS`](crate::MAX_ENGINE_CHANNELS)).
        max: usize,
    },
    /// cpal refused an operation.
    Cpal {
        /// What was being done.
        context: String,
        /// cpal's error (its `kind()` classifies it).
        source: cpal::Error,
    },
    /// The JACK server refused an operation of the duplex client (feature `jack`); the message says
    /// what was being done and what to try.
    Jack(String),
}

impl fmt::Display for DeviceError {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::NoHost { name, available } => write!(
                f,
                "no audio host `{name}` in this build; available: {} (JACK needs the `jack` feature: \
                 cargo build --features jack)",
                available.join(", ")
            ),
            Self::NoDevice { direction, wanted, host, available } => {
                write!(f, "no {direction} device `{wanted}` on host {host}")?;
                if available.is_empty() {
                    if host.eq_ignore_ascii_case("jack") {
                        write!(
                            f,
                            "; is the JACK server running (JACK_DEFAULT_SERVER={})?",
                            std::env::var("JACK_DEFAULT_SERVER").unwrap_or_else(|_| "default".into())
                        )
                    } else {
                        write!(f, "; the host lists no {direction} devices (is a sound card present?)")
                    }
                } else {
                    write!(f, "; choose by index or name from: {}", available.join(", "))
                }
            }
            Self::NoConfig { direction, device, reason } => {
                write!(f, "{direction} device `{device}`: {reason}; see `partita devices` for what it supports")
            }
            Self::BufferSize { direction, requested, min, max } => {
                if min == max {
                    write!(
                        f,
                        "{direction}: the host runs at {min} frames per period, {requested} was asked for \
                         (for JACK change the server's period, e.g. jack_bufsize {requested}, or omit \
                         --device-frames)"
                    )
                } else {
                    write!(f, "{direction}: {requested} frames per period is outside the supported {min}..={max}")
                }
            }
            Self::SampleRate { input_hz, output_hz } => write!(
                f,
                "the input runs at {input_hz} Hz and the output at {output_hz} Hz; choose devices that share a \
                 rate or give --rate"
            ),
            Self::ChannelMap(msg) => write!(f, "channel map: {msg}"),
            Self::TooManyChannels { channels, max } => {
                write!(f, "{channels} engine channels; live streaming handles at most {max}")
            }
            Self::Cpal { context, source } => write!(f, "{context}: {source} ({:?})", source.kind()),
            Self::Jack(msg) => write!(f, "JACK: {msg}"),
        }
    }
}

impl std::error::Error for DeviceError {
    fn source(&self) -> Option<&(dyn std::error::Error + 'static)> {
        match self {
            Self::Cpal { source, .. } => Some(source),
            _ => None,
        }
    }
}
