//! Hosts, devices and configurations through cpal, and the running [`LiveStream`].

use std::str::FromStr;
use std::time::Duration;

use cpal::traits::{DeviceTrait, HostTrait, StreamTrait};
use cpal::{BufferSize, SampleFormat, StreamConfig, SupportedBufferSize, SupportedStreamConfigRange};
use partita_core::Engine;

use crate::bridge::{Bridge, BridgeHandle, BridgeOptions, CallbackTime, EngineSide};
use crate::channels::ChannelMap;
use crate::convert;
use crate::drift::DriftOptions;
use crate::error::{DeviceError, Direction};
use crate::safety::SafetyOptions;
use crate::stats::{Fault, Stats, Watchdog};

/// How long building a stream may take before we give up (JACK honours it).
const BUILD_TIMEOUT: Duration = Duration::from_secs(5);

/// Names of the hosts this build offers (e.g. `ALSA`, and `JACK` with the `jack` feature).
pub fn host_names() -> Vec<String> {
    cpal::available_hosts().iter().map(|h| h.name().to_string()).collect()
}

/// The host called `name` (case-insensitive), or the platform default for `None`.
///
/// # Errors
/// [`DeviceError::NoHost`] when this build has no such host, [`DeviceError::Cpal`] when it cannot be
/// opened.
pub fn host_by_name(name: Option<&str>) -> Result<cpal::Host, DeviceError> {
    let Some(name) = name else {
        return Ok(cpal::default_host());
    };
    let id = cpal::available_hosts()
        .into_iter()
        .find(|h| h.name().eq_ignore_ascii_case(name))
        .ok_or_else(|| DeviceError::NoHost { name: name.to_string(), available: host_names() })?;
    cpal::host_from_id(id).map_err(|source| DeviceError::Cpal { context: format!("opening host {name}"), source })
}

/// Which device to use: the host's default, an index into [`list_devices`], or a name or id (exact,
/// case-insensitive; else a unique substring of a name).
#[derive(Debug, Clone, PartialEq, Eq, Default)]
pub enum DeviceSelector {
    /// The host's default device for the direction.
    #[default]
    Default,
    /// The device at this index of [`list_devices`].
    Index(usize),
    /// A device name or a unique part of one.
    Name(String),
}

impl FromStr for DeviceSelector {
    type Err = String;
    fn from_str(s: &str) -> Result<Self, String> {
        if s.is_empty() {
            return Err("a device is `default`, an index or a name".into());
        }
        if s.eq_ignore_ascii_case("default") {
            Ok(Self::Default)
        } else if let Ok(i) = s.parse() {
            Ok(Self::Index(i))
        } else {
            Ok(Self::Name(s.to_string()))
        }
    }
}

impl std::fmt::Display for DeviceSelector {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        match self {
            Self::Default => f.write_str("default"),
            Self::Index(i) => write!(f, "{i}"),
            Self::Name(n) => f.write_str(n),
        }
    }
}

/// One supported configuration range of a device.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ConfigInfo {
    /// Channels.
    pub channels: u16,
    /// Lowest sample rate, Hz.
    pub min_rate_hz: u32,
    /// Highest sample rate, Hz.
    pub max_rate_hz: u32,
    /// Period sizes the device accepts, frames (`None`: unknown).
    pub buffer_frames: Option<(u32, u32)>,
    /// Sample format (`f32`, `i16`, ...).
    pub format: String,
}

impl ConfigInfo {
    fn of(range: &SupportedStreamConfigRange) -> Self {
        Self {
            channels: range.channels(),
            min_rate_hz: range.min_sample_rate(),
            max_rate_hz: range.max_sample_rate(),
            buffer_frames: buffer_range(range.buffer_size()),
            format: range.sample_format().to_string(),
        }
    }
}

impl std::fmt::Display for ConfigInfo {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        write!(f, "{} ch, ", self.channels)?;
        if self.min_rate_hz == self.max_rate_hz {
            write!(f, "{} Hz", self.min_rate_hz)?;
        } else {
            write!(f, "{}-{} Hz", self.min_rate_hz, self.max_rate_hz)?;
        }
        write!(f, ", {}", self.format)?;
        match self.buffer_frames {
            Some((a, b)) if a == b => write!(f, ", period {a} frames"),
            Some((a, b)) => write!(f, ", period {a}-{b} frames"),
            None => write!(f, ", period unknown"),
        }
    }
}

fn buffer_range(b: &SupportedBufferSize) -> Option<(u32, u32)> {
    match *b {
        SupportedBufferSize::Range { min, max } => Some((min, max)),
        SupportedBufferSize::Unknown => None,
    }
}

/// A device as `partita devices` lists it.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct DeviceInfo {
    /// Index for [`DeviceSelector::Index`].
    pub index: usize,
    /// Name for [`DeviceSelector::Name`].
    pub name: String,
    /// cpal's stable id (`host:id`).
    pub id: String,
    /// The host's default input device.
    pub default_input: bool,
    /// The host's default output device.
    pub default_output: bool,
    /// Supported input configurations (empty: not an input device).
    pub input_configs: Vec<ConfigInfo>,
    /// Supported output configurations.
    pub output_configs: Vec<ConfigInfo>,
}

fn device_name(d: &cpal::Device) -> String {
    d.description().map(|d| d.name().to_string()).unwrap_or_else(|_| "(unnamed)".into())
}

fn device_id(d: &cpal::Device) -> String {
    d.id().map(|i| i.to_string()).unwrap_or_default()
}

/// Every device of `host` with its supported configurations. Allocates; may take a while on ALSA.
///
/// # Errors
/// [`DeviceError::Cpal`] when the host cannot enumerate.
pub fn list_devices(host: &cpal::Host) -> Result<Vec<DeviceInfo>, DeviceError> {
    let default_in = host.default_input_device().map(|d| device_id(&d));
    let default_out = host.default_output_device().map(|d| device_id(&d));
    let devices = host
        .devices()
        .map_err(|source| DeviceError::Cpal { context: format!("listing {} devices", host.id().name()), source })?;
    Ok(devices
        .enumerate()
        .map(|(index, d)| {
            let id = device_id(&d);
            let configs = |r: Result<Vec<SupportedStreamConfigRange>, cpal::Error>| {
                r.map(|v| v.iter().map(ConfigInfo::of).collect()).unwrap_or_default()
            };
            DeviceInfo {
                index,
                name: device_name(&d),
                default_input: default_in.as_deref() == Some(id.as_str()),
                default_output: default_out.as_deref() == Some(id.as_str()),
                input_configs: if supports(&d, Direction::Input) {
                    configs(d.supported_input_configs().map(|c| c.collect()))
                } else {
                    Vec::new()
                },
                output_configs: if supports(&d, Direction::Output) {
                    configs(d.supported_output_configs().map(|c| c.collect()))
                } else {
                    Vec::new()
                },
                id,
            }
        })
        .collect())
}

/// Whether `d` works in `direction`: the device's own description when it knows its direction (cpal's
/// JACK devices list configurations both ways but only stream one way), else its configurations.
fn supports(d: &cpal::Device, direction: Direction) -> bool {
    let known = d.description().ok().filter(|x| x.direction() != cpal::DeviceDirection::Unknown);
    match (known, direction) {
        (Some(x), Direction::Input) => x.supports_input(),
        (Some(x), Direction::Output) => x.supports_output(),
        (None, Direction::Input) => d.supports_input(),
        (None, Direction::Output) => d.supports_output(),
    }
}

fn pick_device(host: &cpal::Host, direction: Direction, wanted: &DeviceSelector) -> Result<cpal::Device, DeviceError> {
    let all: Vec<cpal::Device> = host.devices().map(|d| d.collect()).unwrap_or_default();
    let candidates: Vec<(usize, &cpal::Device)> =
        all.iter().enumerate().filter(|(_, d)| supports(d, direction)).collect();
    let not_found = || DeviceError::NoDevice {
        direction,
        wanted: wanted.to_string(),
        host: host.id().name().to_string(),
        available: candidates.iter().map(|(i, d)| format!("{i} `{}`", device_name(d))).collect(),
    };
    let found = match wanted {
        DeviceSelector::Default => match direction {
            Direction::Input => host.default_input_device(),
            Direction::Output => host.default_output_device(),
        },
        DeviceSelector::Index(i) => candidates.iter().find(|(j, _)| j == i).map(|(_, d)| (*d).clone()),
        DeviceSelector::Name(name) => {
            let lower = name.to_lowercase();
            // The name, the full id (`alsa:hw:0,0`) or the host's part of it (`hw:0,0`).
            let exact = candidates.iter().find(|(_, d)| {
                device_name(d).eq_ignore_ascii_case(name)
                    || device_id(d).eq_ignore_ascii_case(name)
                    || d.id().is_ok_and(|i| i.id().eq_ignore_ascii_case(name))
            });
            match exact {
                Some((_, d)) => Some((*d).clone()),
                None => {
                    let partial: Vec<_> =
                        candidates.iter().filter(|(_, d)| device_name(d).to_lowercase().contains(&lower)).collect();
                    (partial.len() == 1).then(|| partial[0].1.clone())
                }
            }
        }
    };
    // A host may name a default device it cannot open (ALSA's `default` without a sound card).
    found.filter(|d| supports(d, direction)).ok_or_else(not_found)
}

/// Preference among sample formats: float and wide integers first.
fn format_rank(f: SampleFormat) -> u8 {
    match f {
        SampleFormat::F32 => 0,
        SampleFormat::I32 => 1,
        SampleFormat::I24 => 2,
        SampleFormat::F64 => 3,
        SampleFormat::I16 => 4,
        SampleFormat::U32 | SampleFormat::U24 => 5,
        SampleFormat::U16 | SampleFormat::I64 | SampleFormat::U64 => 6,
        _ => 7,
    }
}

fn ranges(d: &cpal::Device, direction: Direction) -> Vec<SupportedStreamConfigRange> {
    let r = match direction {
        Direction::Input => d.supported_input_configs().map(|c| c.collect()),
        Direction::Output => d.supported_output_configs().map(|c| c.collect()),
    };
    r.unwrap_or_default()
}

fn default_rate(d: &cpal::Device, direction: Direction) -> Option<u32> {
    match direction {
        Direction::Input => d.default_input_config(),
        Direction::Output => d.default_output_config(),
    }
    .ok()
    .map(|c| c.sample_rate())
}

/// The best supported range for `channels` at `rate_hz`: the fewest channels that suffice, then the
/// preferred format.
fn choose_range(
    device: &cpal::Device,
    direction: Direction,
    channels: usize,
    rate_hz: u32,
) -> Result<SupportedStreamConfigRange, DeviceError> {
    let all = ranges(device, direction);
    all.iter()
        .filter(|r| convert::is_supported(r.sample_format()) && usize::from(r.channels()) >= channels)
        .filter(|r| r.contains_rate(rate_hz))
        .min_by_key(|r| (r.channels(), format_rank(r.sample_format())))
        .copied()
        .ok_or_else(|| DeviceError::NoConfig {
            direction,
            device: device_name(device),
            reason: format!("no PCM configuration with at least {channels} channel(s) at {rate_hz} Hz"),
        })
}

fn check_frames(
    range: &SupportedStreamConfigRange,
    direction: Direction,
    frames: Option<u32>,
) -> Result<BufferSize, DeviceError> {
    let Some(requested) = frames else {
        return Ok(BufferSize::Default);
    };
    if let Some((min, max)) = buffer_range(range.buffer_size()) {
        if requested < min || requested > max {
            return Err(DeviceError::BufferSize { direction, requested, min, max });
        }
    }
    Ok(BufferSize::Fixed(requested))
}

/// Where and how to open the devices.
#[derive(Debug, Clone, Default)]
pub struct DeviceOptions {
    /// Host name (`alsa`, `jack`, ...); the platform default for `None`.
    pub host: Option<String>,
    /// Input device.
    pub input: DeviceSelector,
    /// Output device.
    pub output: DeviceSelector,
    /// Sample rate; the output device's default (the server's for JACK) for `None`.
    pub sample_rate_hz: Option<u32>,
    /// A fixed period, frames, where the host lets us choose (JACK: must equal the server's).
    pub device_frames: Option<u32>,
    /// Device input channel (0-based) of each engine input; the default map for `None`.
    pub input_channels: Option<Vec<usize>>,
    /// Device output channel (0-based) of each engine output.
    pub output_channels: Option<Vec<usize>>,
}

/// The chosen side of a stream.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct SideInfo {
    /// Device name.
    pub device: String,
    /// Channels opened.
    pub channels: u16,
    /// Sample format.
    pub format: String,
    /// The period asked for (`None`: the host's default).
    pub requested_frames: Option<u32>,
    /// The period the host reports for the built stream (cpal's `buffer_size()`), if it does.
    pub period_frames: Option<u32>,
}

impl SideInfo {
    /// The period for a log line: the host's figure, else the one asked for, else "host default".
    pub fn period_text(&self) -> String {
        match (self.period_frames, self.requested_frames) {
            (Some(p), _) => format!("{p} frames"),
            (None, Some(r)) => format!("{r} frames (requested)"),
            (None, None) => "host default".to_string(),
        }
    }
}

/// Devices opened and configured, before the engine exists (its IR must be resampled to
/// [`sample_rate_hz`](Self::sample_rate_hz)).
pub struct LiveDevices {
    host: cpal::Host,
    input: cpal::Device,
    output: cpal::Device,
    input_config: StreamConfig,
    output_config: StreamConfig,
    input_format: SampleFormat,
    output_format: SampleFormat,
    map: ChannelMap,
    period_hint: Option<u32>,
}

impl std::fmt::Debug for LiveDevices {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("LiveDevices")
            .field("host", &self.host_name())
            .field("input", &device_name(&self.input))
            .field("output", &device_name(&self.output))
            .field("input_config", &self.input_config)
            .field("output_config", &self.output_config)
            .field("map", &self.map)
            .finish_non_exhaustive()
    }
}

impl LiveDevices {
    /// Picks the devices and configurations for an engine of `engine_inputs` x `engine_outputs`.
    /// Allocates; talks to the host.
    ///
    /// # Errors
    /// Any [`DeviceError`] of set-up: no such host or device, no usable configuration, a period or
    /// rate the devices do not support, a bad channel list.
    pub fn open(options: &DeviceOptions, engine_inputs: usize, engine_outputs: usize) -> Result<Self, DeviceError> {
        let host = host_by_name(options.host.as_deref())?;
        let input = pick_device(&host, Direction::Input, &options.input)?;
        let output = pick_device(&host, Direction::Output, &options.output)?;
        let need_in = options
            .input_channels
            .as_ref()
            .map_or(engine_inputs, |l| l.iter().max().map_or(engine_inputs, |&c| c + 1).max(1));
        let need_out = options
            .output_channels
            .as_ref()
            .map_or(engine_outputs, |l| l.iter().max().map_or(engine_outputs, |&c| c + 1).max(1));
        let rate = match options.sample_rate_hz {
            Some(r) => r,
            None => {
                let out_rate = default_rate(&output, Direction::Output);
                let in_rate = default_rate(&input, Direction::Input);
                let both = |r: u32| {
                    ranges(&input, Direction::Input).iter().any(|c| c.contains_rate(r))
                        && ranges(&output, Direction::Output).iter().any(|c| c.contains_rate(r))
                };
                [out_rate, in_rate, Some(48_000), Some(44_100)].into_iter().flatten().find(|&r| both(r)).ok_or(
                    DeviceError::SampleRate { input_hz: in_rate.unwrap_or(0), output_hz: out_rate.unwrap_or(0) },
                )?
            }
        };
        let in_range = choose_range(&input, Direction::Input, need_in.max(1), rate)?;
        let out_range = choose_range(&output, Direction::Output, need_out.max(1), rate)?;
        let input_config = StreamConfig {
            channels: in_range.channels(),
            sample_rate: rate,
            buffer_size: check_frames(&in_range, Direction::Input, options.device_frames)?,
        };
        let output_config = StreamConfig {
            channels: out_range.channels(),
            sample_rate: rate,
            buffer_size: check_frames(&out_range, Direction::Output, options.device_frames)?,
        };
        let map = ChannelMap::from_lists(
            options.input_channels.as_deref(),
            options.output_channels.as_deref(),
            usize::from(input_config.channels),
            usize::from(output_config.channels),
            engine_inputs,
            engine_outputs,
        )?;
        let fixed =
            |r: &SupportedStreamConfigRange| buffer_range(r.buffer_size()).filter(|(a, b)| a == b).map(|(a, _)| a);
        let period_hint = options.device_frames.or_else(|| fixed(&out_range)).or_else(|| fixed(&in_range));
        Ok(Self {
            host,
            input,
            output,
            input_config,
            output_config,
            input_format: in_range.sample_format(),
            output_format: out_range.sample_format(),
            map,
            period_hint,
        })
    }

    /// The stream's sample rate.
    pub fn sample_rate_hz(&self) -> u32 {
        self.output_config.sample_rate
    }

    /// The device period when it is known before the streams start (requested, or fixed like JACK's).
    pub fn period_frames(&self) -> Option<u32> {
        self.period_hint
    }

    /// The host's name.
    pub fn host_name(&self) -> &'static str {
        self.host.id().name()
    }

    /// Whether the host is a JACK server (one clock for input and output).
    pub fn is_jack(&self) -> bool {
        self.host_name().eq_ignore_ascii_case("jack")
    }

    /// The channel map in use.
    pub fn channel_map(&self) -> &ChannelMap {
        &self.map
    }

    /// Builds the bridge around `engine`, then the input and output streams, and starts them.
    /// Allocates.
    ///
    /// # Errors
    /// [`DeviceError::Cpal`] when a stream cannot be built or started; bridge errors.
    pub fn start(self, engine: Engine, options: &StreamOptions) -> Result<LiveStream, DeviceError> {
        let rate = self.sample_rate_hz();
        let period = self.period_hint.unwrap_or(256) as usize;
        let margin = options.margin_frames.unwrap_or(if self.is_jack() { period } else { period + 32 });
        let bridge_options = BridgeOptions {
            sample_rate_hz: rate,
            device_inputs: usize::from(self.input_config.channels),
            device_outputs: usize::from(self.output_config.channels),
            map: Some(self.map.clone()),
            side: options.side,
            margin_frames: margin,
            ring_frames: (8 * (period.max(1024) + margin)).max(65_536),
            safety: options.safety,
            drift: DriftOptions { enabled: options.drift.enabled && !self.is_jack(), ..options.drift },
        };
        let engine_latency_frames = engine.latency_frames();
        let Bridge { mut capture, mut playback, handle } = Bridge::new(engine, &bridge_options)?;
        let (clock, errors) = (handle.clone(), handle.clone());
        let hooks = StreamHooks {
            now_ns: move || clock.now_ns(),
            on_error: move |kind, direction| errors.note_error(kind, direction),
            promote: options.realtime.then(|| {
                let h = handle.clone();
                move || h.promote_callback_thread()
            }),
        };
        let (streams, input, output) = self.play_streams(
            hooks,
            move |data, time| capture.capture_data(data, time),
            move |data, time| playback.play_data(data, time),
        )?;
        let info = LiveInfo {
            host: self.host_name().to_string(),
            sample_rate_hz: rate,
            input,
            output,
            engine_latency_frames,
            margin_frames: margin,
            side: options.side,
        };
        Ok(LiveStream { streams, handle, info, watch: [Watchdog::new(); 2] })
    }

    /// Builds the input and the output stream around two callback bodies and starts them (input first),
    /// then describes both sides. Each body gets the callback's [`CallbackTime`]: `now_ns` from the
    /// server's clock on JACK (both streams' timestamps come from it, so the client threads' scheduling
    /// delays stay out of the time between the two callbacks) and from `hooks.now_ns` elsewhere (other
    /// hosts give each stream its own time origin); the device delay from cpal's timestamps. Allocates.
    ///
    /// # Errors
    /// [`DeviceError::Cpal`] when a stream cannot be built or started.
    pub(crate) fn play_streams<N, E, P>(
        &self,
        hooks: StreamHooks<N, E, P>,
        mut on_input: impl FnMut(&cpal::Data, CallbackTime) + Send + 'static,
        mut on_output: impl FnMut(&mut cpal::Data, CallbackTime) + Send + 'static,
    ) -> Result<(Vec<cpal::Stream>, SideInfo, SideInfo), DeviceError>
    where
        N: Fn() -> u64 + Clone + Send + 'static,
        E: Fn(cpal::ErrorKind, Direction) + Clone + Send + 'static,
        P: Fn() + Clone + Send + 'static,
    {
        let shared_clock = self.is_jack();
        let StreamHooks { now_ns, on_error, promote } = hooks;
        let (clock, errors, mut promote_in) = (now_ns.clone(), on_error.clone(), promote.clone());
        let input_stream = self
            .input
            .build_input_stream_raw(
                self.input_config,
                self.input_format,
                move |data: &cpal::Data, info: &cpal::InputCallbackInfo| {
                    if let Some(p) = promote_in.take() {
                        p();
                    }
                    let ts = info.timestamp();
                    let delay = ts.callback.saturating_duration_since(ts.capture).as_nanos() as u64;
                    let now_ns = if shared_clock { ts.callback.as_nanos() as u64 } else { clock() };
                    on_input(data, CallbackTime { now_ns, device_delay_ns: delay });
                },
                move |e: cpal::Error| errors(e.kind(), Direction::Input),
                Some(BUILD_TIMEOUT),
            )
            .map_err(|source| DeviceError::Cpal { context: "building the input stream".into(), source })?;
        let (clock, errors, mut promote_out) = (now_ns, on_error, promote);
        let output_stream = self
            .output
            .build_output_stream_raw(
                self.output_config,
                self.output_format,
                move |data: &mut cpal::Data, info: &cpal::OutputCallbackInfo| {
                    if let Some(p) = promote_out.take() {
                        p();
                    }
                    let ts = info.timestamp();
                    let delay = ts.playback.saturating_duration_since(ts.callback).as_nanos() as u64;
                    let now_ns = if shared_clock { ts.callback.as_nanos() as u64 } else { clock() };
                    on_output(data, CallbackTime { now_ns, device_delay_ns: delay });
                },
                move |e: cpal::Error| errors(e.kind(), Direction::Output),
                Some(BUILD_TIMEOUT),
            )
            .map_err(|source| DeviceError::Cpal { context: "building the output stream".into(), source })?;
        input_stream
            .play()
            .map_err(|source| DeviceError::Cpal { context: "starting the input stream".into(), source })?;
        output_stream
            .play()
            .map_err(|source| DeviceError::Cpal { context: "starting the output stream".into(), source })?;
        let side =
            |device: &cpal::Device, config: &StreamConfig, format: SampleFormat, stream: &cpal::Stream| SideInfo {
                device: device_name(device),
                channels: config.channels,
                format: format.to_string(),
                requested_frames: match config.buffer_size {
                    BufferSize::Fixed(n) => Some(n),
                    BufferSize::Default => None,
                },
                period_frames: stream.buffer_size().ok(),
            };
        let input = side(&self.input, &self.input_config, self.input_format, &input_stream);
        let output = side(&self.output, &self.output_config, self.output_format, &output_stream);
        Ok((vec![input_stream, output_stream], input, output))
    }

    /// Device channels of the input and output streams.
    pub(crate) fn device_channels(&self) -> (usize, usize) {
        (usize::from(self.input_config.channels), usize::from(self.output_config.channels))
    }
}

/// What [`LiveDevices::play_streams`] needs besides the bodies: the clock off JACK, the error callback's
/// action (atomics only), and the real-time promotion asked on each callback thread's first call.
pub(crate) struct StreamHooks<N, E, P> {
    pub(crate) now_ns: N,
    pub(crate) on_error: E,
    pub(crate) promote: Option<P>,
}

/// How the bridge runs once the devices are open.
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct StreamOptions {
    /// Where the engine runs.
    pub side: EngineSide,
    /// Frames of margin in the ring beyond the larger callback. `None`: one period on JACK (cpal's two
    /// clients are not connected to each other, so the server may run them in either order, or in
    /// parallel, from one cycle to the next), else one period (256 frames when unknown) plus 32 frames
    /// for the drift controller's deadband and smoothing lag.
    pub margin_frames: Option<usize>,
    /// The safety stage.
    pub safety: SafetyOptions,
    /// Drift correction.
    pub drift: DriftOptions,
    /// Ask for SCHED_FIFO [`CALLBACK_PRIORITY`](crate::CALLBACK_PRIORITY) for both callback threads on
    /// their first callback (the outcome is in [`Stats::callback_priority`]).
    pub realtime: bool,
}

/// What a started stream runs with.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct LiveInfo {
    /// Host name.
    pub host: String,
    /// Sample rate, Hz.
    pub sample_rate_hz: u32,
    /// The input side.
    pub input: SideInfo,
    /// The output side.
    pub output: SideInfo,
    /// The engine's latency, frames.
    pub engine_latency_frames: usize,
    /// Ring margin, frames.
    pub margin_frames: usize,
    /// Where the engine runs.
    pub side: EngineSide,
}

/// A running live stream: input -> ring -> engine -> safety -> output. Dropping it stops the streams
/// (with a bounded wait, so a dead server cannot hang the caller).
pub struct LiveStream {
    streams: Vec<cpal::Stream>,
    handle: BridgeHandle,
    info: LiveInfo,
    /// Per direction, input then output.
    watch: [Watchdog; 2],
}

impl std::fmt::Debug for LiveStream {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("LiveStream").field("info", &self.info).field("handle", &self.handle).finish_non_exhaustive()
    }
}

impl LiveStream {
    /// The stream's handle: stats, meters, faults, unmute. The mix is the engine's: drive it through the
    /// engine's [`Control`](partita_core::Control).
    pub fn handle(&self) -> &BridgeHandle {
        &self.handle
    }

    /// A snapshot of the counters.
    pub fn stats(&self) -> Stats {
        self.handle.stats()
    }

    /// What the stream runs with.
    pub fn info(&self) -> &LiveInfo {
        &self.info
    }

    /// The fault that ended the stream's usefulness, if any: one the host reported through the error
    /// callback, or a stall the watchdog found (no callback for a second). Call it a few times a second.
    pub fn poll_fault(&mut self) -> Option<Fault> {
        crate::stats::poll_stream_pair(self.handle.cells(), &mut self.watch)
    }

    /// Stops both streams and returns the final counters. Waits at most about a second for the host
    /// to let go of the streams.
    pub fn stop(mut self) -> Stats {
        let streams = std::mem::take(&mut self.streams);
        release(streams);
        self.handle.stats()
    }
}

impl Drop for LiveStream {
    fn drop(&mut self) {
        release(std::mem::take(&mut self.streams));
    }
}

/// Pauses and drops streams on a helper thread, waiting at most a second: with a dead JACK server a
/// client's deactivation may not return.
pub(crate) fn release(streams: Vec<cpal::Stream>) {
    if streams.is_empty() {
        return;
    }
    let (tx, rx) = std::sync::mpsc::channel();
    let spawned = std::thread::Builder::new().name("partita-stream-release".into()).spawn(move || {
        for s in &streams {
            let _ = s.pause();
        }
        drop(streams);
        let _ = tx.send(());
    });
    if spawned.is_ok() {
        let _ = rx.recv_timeout(Duration::from_secs(1));
    }
}

/// The JACK client names cpal gives this process's input and output streams:
/// `cpal_client_<pid>_in` and `cpal_client_<pid>_out` (ports `in_N` / `out_N`, N from 0). From cpal
/// 0.18's JACK host (`Host::new`, `Device::default_{input,output}_device`, `Stream::new_{input,output}`).
pub fn jack_client_names() -> (String, String) {
    let base = format!("cpal_client_{}", std::process::id());
    (format!("{base}_in"), format!("{base}_out"))
}
