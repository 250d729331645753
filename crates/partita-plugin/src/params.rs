//! The parameter table: stable ids, names, ranges, defaults and units, the values every thread reads
//! (atomics), and the text a host shows.
//!
//! Ids are part of the saved state and of every host's automation lanes: they never change and are never
//! reused. New parameters take new ids.

use std::fmt::Write;
use std::sync::atomic::{AtomicU64, Ordering};

/// One parameter of the plugin, by stable id.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum ParamId {
    /// Wet level, percent of the convolved signal (linear gain 0..1).
    Wet = 0,
    /// Dry level, percent of the input (linear gain 0..1), aligned with the wet signal.
    Dry = 1,
    /// Pre-delay of the wet signal, ms.
    PreDelay = 2,
    /// Gain of the whole output, dB.
    OutputGain = 3,
    /// Bypass: the output is the input, delayed by the reported latency.
    Bypass = 4,
    /// Latency mode (not automatable; applied at activation): 0 zero latency, then blocks of 64..1024 frames.
    Latency = 5,
    /// Built-in space: 0 the custom room of the three room parameters, then the named spaces.
    Space = 6,
    /// Volume of the custom room, m^3.
    RoomVolume = 7,
    /// Reverberation time of the custom room (RT60 at 500 Hz), s.
    ReverbTime = 8,
    /// High-frequency decay of the custom room: RT60 at 4 kHz over RT60 at 500 Hz.
    HfDecay = 9,
    /// WAV file of the IR folder: 0 none (the built-in space), k the k-th file in name order.
    IrFile = 10,
}

/// How a parameter's value is shown and stepped.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Unit {
    /// Percent, one decimal.
    Percent,
    /// Milliseconds, one decimal.
    Ms,
    /// Decibels, one decimal.
    Db,
    /// Cubic metres, whole numbers.
    CubicMetres,
    /// Seconds, two decimals.
    Seconds,
    /// A plain ratio, two decimals.
    Ratio,
    /// On or off.
    Switch,
    /// One of a list of names.
    Choice,
}

/// Everything a host is told about one parameter.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct ParamSpec {
    /// Stable id.
    pub id: ParamId,
    /// Name shown to the user.
    pub name: &'static str,
    /// Group shown by hosts that group parameters.
    pub module: &'static str,
    /// Smallest value.
    pub min: f64,
    /// Largest value (for [`ParamId::IrFile`], the number of WAV files found when the instance was made).
    pub max: f64,
    /// Value of a new instance.
    pub default: f64,
    /// Display unit.
    pub unit: Unit,
    /// Hosts may automate it (the mix parameters); the others change the IR or the engine.
    pub automatable: bool,
}

/// The latency modes of [`ParamId::Latency`]: `None` zero latency (a direct-form head, engine block 64),
/// `Some(b)` block latency of `b` frames.
pub const LATENCY_MODES: [Option<usize>; 6] = [None, Some(64), Some(128), Some(256), Some(512), Some(1024)];

/// Engine block in zero-latency mode (the direct-form head covers the first block of the IR).
pub const ZERO_LATENCY_BLOCK_FRAMES: usize = 64;

/// Longest pre-delay, ms.
pub const MAX_PREDELAY_MS: f64 = 250.0;

/// The fixed parameters, in the order hosts list them ([`ParamId::IrFile`]'s maximum comes from the folder).
pub const PARAMS: [ParamSpec; 11] = [
    spec(ParamId::Wet, "Wet", "Mix", 0.0, 100.0, 30.0, Unit::Percent, true),
    spec(ParamId::Dry, "Dry", "Mix", 0.0, 100.0, 100.0, Unit::Percent, true),
    spec(ParamId::PreDelay, "Pre-delay", "Mix", 0.0, MAX_PREDELAY_MS, 0.0, Unit::Ms, true),
    spec(ParamId::OutputGain, "Output gain", "Mix", -24.0, 12.0, 0.0, Unit::Db, true),
    spec(ParamId::Bypass, "Bypass", "Mix", 0.0, 1.0, 0.0, Unit::Switch, true),
    spec(ParamId::Latency, "Latency", "Engine", 0.0, 5.0, 0.0, Unit::Choice, false),
    spec(ParamId::Space, "Space", "Space", 0.0, 3.0, 0.0, Unit::Choice, false),
    spec(ParamId::RoomVolume, "Room volume", "Space", 20.0, 20_000.0, 800.0, Unit::CubicMetres, false),
    spec(ParamId::ReverbTime, "Reverb time", "Space", 0.2, 8.0, 1.6, Unit::Seconds, false),
    spec(ParamId::HfDecay, "HF decay", "Space", 0.2, 1.0, 0.6, Unit::Ratio, false),
    spec(ParamId::IrFile, "IR file", "Space", 0.0, 0.0, 0.0, Unit::Choice, false),
];

#[allow(clippy::too_many_arguments)]
const fn spec(
    id: ParamId,
    name: &'static str,
    module: &'static str,
    min: f64,
    max: f64,
    default: f64,
    unit: Unit,
    automatable: bool,
) -> ParamSpec {
    ParamSpec { id, name, module, min, max, default, unit, automatable }
}

impl ParamId {
    /// Every parameter, in id order.
    pub const ALL: [ParamId; 11] = [
        Self::Wet,
        Self::Dry,
        Self::PreDelay,
        Self::OutputGain,
        Self::Bypass,
        Self::Latency,
        Self::Space,
        Self::RoomVolume,
        Self::ReverbTime,
        Self::HfDecay,
        Self::IrFile,
    ];

    /// The parameter with raw id `id`.
    pub fn from_raw(id: u32) -> Option<Self> {
        Self::ALL.get(id as usize).copied()
    }

    /// The parameter's fixed description.
    pub fn spec(self) -> &'static ParamSpec {
        &PARAMS[self as usize]
    }

    /// Whether a change rebuilds the IR (space, room, file).
    pub fn changes_ir(self) -> bool {
        matches!(self, Self::Space | Self::RoomVolume | Self::ReverbTime | Self::HfDecay | Self::IrFile)
    }

    /// Whether it is a mix parameter, sent to the engine as a command.
    pub fn is_mix(self) -> bool {
        matches!(self, Self::Wet | Self::Dry | Self::PreDelay | Self::OutputGain | Self::Bypass)
    }
}

/// The current value of every parameter, shared by the main and audio threads (one atomic per parameter:
/// never a lock). Values are kept within range and on their steps.
#[derive(Debug)]
pub struct ParamValues {
    values: [AtomicU64; 11],
    /// WAV files in the IR folder, the maximum of [`ParamId::IrFile`].
    ir_files: u32,
}

impl ParamValues {
    /// Every parameter at its default; `ir_files` WAV files in the folder.
    pub fn new(ir_files: u32) -> Self {
        Self { values: PARAMS.map(|p| AtomicU64::new(p.default.to_bits())), ir_files }
    }

    /// The range of `id`: its spec's, or 0..the folder's file count for [`ParamId::IrFile`].
    pub fn range(&self, id: ParamId) -> (f64, f64) {
        match id {
            ParamId::IrFile => (0.0, f64::from(self.ir_files)),
            _ => (id.spec().min, id.spec().max),
        }
    }

    /// The value of `id`.
    pub fn get(&self, id: ParamId) -> f64 {
        f64::from_bits(self.values[id as usize].load(Ordering::Relaxed))
    }

    /// Sets `id` to `value`, clamped to its range and rounded to its step; returns the value stored, or
    /// `None` for a NaN. Never allocates (the audio thread calls it).
    pub fn set(&self, id: ParamId, value: f64) -> Option<f64> {
        if value.is_nan() {
            return None;
        }
        let (lo, hi) = self.range(id);
        let mut v = value.clamp(lo, hi);
        if matches!(id.spec().unit, Unit::Switch | Unit::Choice) {
            v = v.round();
        }
        self.values[id as usize].store(v.to_bits(), Ordering::Relaxed);
        Some(v)
    }

    /// A stepped parameter's value as an index.
    pub fn index(&self, id: ParamId) -> usize {
        self.get(id).round().max(0.0) as usize
    }

    /// The latency mode: `None` zero latency, `Some(block)` otherwise.
    pub fn latency_mode(&self) -> Option<usize> {
        LATENCY_MODES[self.index(ParamId::Latency).min(LATENCY_MODES.len() - 1)]
    }

    /// A snapshot of every value, in id order.
    pub fn snapshot(&self) -> [f64; 11] {
        ParamId::ALL.map(|id| self.get(id))
    }
}

/// Writes `value` of `id` as a host shows it; `choice_name` names the entries of stepped lists.
///
/// # Errors
/// When the writer is full.
pub fn write_value(
    out: &mut impl Write,
    id: ParamId,
    value: f64,
    choice_name: impl Fn(ParamId, usize) -> String,
) -> std::fmt::Result {
    match id.spec().unit {
        Unit::Percent => write!(out, "{value:.1} %"),
        Unit::Ms => write!(out, "{value:.1} ms"),
        Unit::Db => write!(out, "{value:+.1} dB"),
        Unit::CubicMetres => write!(out, "{value:.0} m3"),
        Unit::Seconds => write!(out, "{value:.2} s"),
        Unit::Ratio => write!(out, "{value:.2}"),
        Unit::Switch => out.write_str(if value >= 0.5 { "On" } else { "Off" }),
        Unit::Choice => out.write_str(&choice_name(id, value.round().max(0.0) as usize)),
    }
}

/// Reads a value typed by the user: the number at the start of `text` (a unit after it is ignored), or
/// for switches "on"/"off". `None` when nothing fits.
pub fn parse_value(id: ParamId, text: &str) -> Option<f64> {
    let t = text.trim();
    if id.spec().unit == Unit::Switch {
        match t.to_ascii_lowercase().as_str() {
            "on" | "1" => return Some(1.0),
            "off" | "0" => return Some(0.0),
            _ => {}
        }
    }
    let end = t.find(|c: char| !(c.is_ascii_digit() || matches!(c, '.' | '-' | '+' | 'e' | 'E'))).unwrap_or(t.len());
    t[..end].parse::<f64>().ok().filter(|v| v.is_finite())
}

/// Latency mode `index` as shown.
pub fn latency_name(index: usize) -> String {
    match LATENCY_MODES.get(index).copied().flatten() {
        None if index == 0 => "Zero latency".to_string(),
        None => format!("{index}"),
        Some(b) => format!("{b} frames"),
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn ids_are_their_index_and_specs_match() {
        for (i, id) in ParamId::ALL.iter().enumerate() {
            assert_eq!(*id as usize, i);
            assert_eq!(PARAMS[i].id, *id);
            assert_eq!(ParamId::from_raw(i as u32), Some(*id));
            let s = id.spec();
            assert!(s.min <= s.default && s.default <= s.max || *id == ParamId::IrFile, "{id:?}");
        }
        assert_eq!(ParamId::from_raw(11), None);
    }

    #[test]
    fn values_are_clamped_and_stepped() {
        let v = ParamValues::new(3);
        assert_eq!(v.set(ParamId::Wet, 140.0), Some(100.0));
        assert_eq!(v.set(ParamId::Latency, 2.4), Some(2.0));
        assert_eq!(v.latency_mode(), Some(128));
        assert_eq!(v.set(ParamId::IrFile, 7.0), Some(3.0));
        assert_eq!(v.set(ParamId::Dry, f64::NAN), None);
        assert_eq!(v.get(ParamId::Dry), 100.0);
    }

    #[test]
    fn text_round_trips() {
        let mut s = String::new();
        write_value(&mut s, ParamId::OutputGain, -6.0, |_, _| String::new()).unwrap();
        assert_eq!(s, "-6.0 dB");
        assert_eq!(parse_value(ParamId::OutputGain, &s), Some(-6.0));
        assert_eq!(parse_value(ParamId::Bypass, "On"), Some(1.0));
        assert_eq!(parse_value(ParamId::Wet, "abc"), None);
        assert_eq!(latency_name(0), "Zero latency");
        assert_eq!(latency_name(5), "1024 frames");
    }
}
