//! The output mix, the one mixer of the project: wet gain, dry signal aligned with the latency, output
//! gain, pre-delay of the wet signal, bypass, and the swap crossfade, each change ramped per sample.
//! The live engine, the device bridge (through [`Control`](crate::Control) commands) and the offline
//! render ([`crate::offline::render_with_mix`]) all go through it, with one parameter type, [`Mix`].
//!
//! Runs on the audio thread; [`OutputStage`] owns every buffer it touches.

use crate::control::wire::{Command, PARAM_RAMP_SECONDS};
use crate::engine::swap::{IrPtr, SwapRun};
use crate::error::MixError;
use crate::head::Head;
use crate::ring::{prefaulted, TimeRing};

/// The mix parameters of an engine's output, as plain values (the same type everywhere: the initial
/// settings in [`EngineOptions::mix`](crate::EngineOptions::mix), the offline render's
/// [`render_with_mix`](crate::offline::render_with_mix), the device bridge's initial mix).
///
/// Output `o` is `gain x (wet x pre-delayed wet signal + dry x input aligned with the latency)`, or the
/// aligned input alone under bypass. The dry signal of output `o` is input `o` when the engine has as many
/// inputs as outputs, and input 0 on every output for a mono input; other shapes (a matrix of M > 1 inputs
/// to N != M outputs) have no dry signal, and a non-zero dry or bypass is refused there.
///
/// ```
/// use partita_core::Mix;
/// let mix = Mix { wet: 0.35, dry: 0.65, ..Mix::default() };
/// assert_eq!(mix.output_gain_db, 0.0);
/// assert!(mix.check(2, 2, 0).is_ok());
/// assert!(mix.check(2, 3, 0).is_err()); // no dry path from 2 inputs to 3 outputs
/// ```
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct Mix {
    /// Linear gain of the convolved (wet) signal; 1 by default.
    pub wet: f32,
    /// Linear gain of the input (dry) signal, aligned with the wet one; 0 by default.
    pub dry: f32,
    /// Gain of the whole output in dB; 0 by default.
    pub output_gain_db: f32,
    /// Delay of the wet signal in frames; 0 by default. Up to the engine's
    /// [`max_predelay_frames`](crate::EngineOptions::max_predelay_frames).
    pub predelay_frames: usize,
    /// The output is the aligned input alone; off by default.
    pub bypass: bool,
}

impl Default for Mix {
    fn default() -> Self {
        Self { wet: 1.0, dry: 0.0, output_gain_db: 0.0, predelay_frames: 0, bypass: false }
    }
}

impl Mix {
    /// The linear output gain, `10^(output_gain_db / 20)`.
    pub fn output_gain(&self) -> f32 {
        10f32.powf(self.output_gain_db / 20.0)
    }

    /// Checks the mix against an engine of `inputs` and `outputs` built for pre-delays up to
    /// `max_predelay_frames`.
    ///
    /// # Errors
    /// [`MixError`] for a non-finite gain, a pre-delay above the bound, or a non-zero dry or bypass on a
    /// shape without a dry signal (see [`Mix`]).
    pub fn check(&self, inputs: usize, outputs: usize, max_predelay_frames: usize) -> Result<(), MixError> {
        for (name, v) in [("wet", self.wet), ("dry", self.dry), ("output gain", self.output_gain_db)] {
            if !v.is_finite() {
                return Err(MixError::NotFinite { parameter: name });
            }
        }
        if !self.output_gain().is_finite() {
            return Err(MixError::NotFinite { parameter: "output gain" });
        }
        if self.predelay_frames > max_predelay_frames {
            return Err(MixError::PreDelayTooLong { predelay_frames: self.predelay_frames, max_predelay_frames });
        }
        if (self.dry != 0.0 || self.bypass) && dry_sources(inputs, outputs).is_none() {
            return Err(MixError::NoDryPath { inputs, outputs });
        }
        Ok(())
    }
}

/// How the dry input reaches the outputs: for each output, the input mixed into it. Equal counts map one
/// to one, a mono input feeds every output; `None` for any other shape.
pub(crate) fn dry_sources(inputs: usize, outputs: usize) -> Option<Vec<usize>> {
    if inputs == outputs {
        Some((0..outputs).collect())
    } else if inputs == 1 {
        Some(vec![0; outputs])
    } else {
        None
    }
}

/// A per-sample linear ramp towards a target. Each value is computed from the start point (not by
/// accumulating steps), so a long ramp carries no rounding drift.
#[derive(Debug, Clone, Copy)]
pub(crate) struct Ramp {
    pub(crate) value: f32,
    from: f32,
    pub(crate) target: f32,
    k: u32,
    frames: u32,
}

impl Ramp {
    pub(crate) fn new(value: f32) -> Self {
        Self { value, from: value, target: value, k: 0, frames: 0 }
    }

    /// Ramps to `target` over `frames` samples (at once for 0).
    pub(crate) fn set(&mut self, target: f32, frames: u32) {
        self.from = self.value;
        self.target = target;
        self.k = 0;
        self.frames = frames;
        if frames == 0 {
            self.value = target;
        }
    }

    /// The value for the next sample: `from + (target - from) (k + 1) / frames` for the k-th sample
    /// after `set`, `target` from the last one on.
    pub(crate) fn next(&mut self) -> f32 {
        if self.k < self.frames {
            self.k += 1;
            self.value = if self.k == self.frames {
                self.target
            } else {
                self.from + (self.target - self.from) * (self.k as f32 / self.frames as f32)
            };
        }
        self.value
    }

    pub(crate) fn idle(&self) -> bool {
        self.k >= self.frames
    }
}

/// The mix parameters, smoothed.
#[derive(Debug, Clone, Copy)]
struct Ramps {
    wet: Ramp,
    dry: Ramp,
    out: Ramp,
    bypass: Ramp,
    /// Wet envelope for resets: 1, or fading to 0 and back.
    env: Ramp,
    /// Pre-delay read taps: from `pd_from` to `pd_to`, crossfaded by `pd_x`.
    pd_from: usize,
    pd_to: usize,
    pd_x: Ramp,
    /// A pre-delay asked for while a crossfade ran: it starts where that one ends.
    pd_next: Option<usize>,
}

impl Ramps {
    /// Crossfades the pre-delay taps from the current delay to `d` over `frames`.
    fn start_predelay_fade(&mut self, d: usize, frames: u32) {
        self.pd_from = self.pd_to;
        self.pd_to = d;
        self.pd_x = Ramp::new(0.0);
        self.pd_x.set(1.0, frames);
    }

    /// Every parameter at its default and at rest: wet 1, dry 0, output 0 dB, no bypass, no pre-delay.
    fn is_identity(&self) -> bool {
        let at = |r: &Ramp, v: f32| r.idle() && r.value == v;
        at(&self.wet, 1.0)
            && at(&self.dry, 0.0)
            && at(&self.out, 1.0)
            && at(&self.bypass, 0.0)
            && at(&self.env, 1.0)
            && self.pd_x.idle()
            && self.pd_to == 0
            && self.pd_from == 0
            && self.pd_next.is_none()
    }
}

/// What [`OutputStage::apply`] did with a command.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum Taken {
    /// Applied: its ramp starts with the next frame.
    Now,
    /// Applied later, at a block boundary (reported then).
    Deferred,
    /// Not a mix command.
    NotMine,
}

/// Where the wet signal of a chunk comes from, borrowed from the engine for one call.
pub(crate) struct WetSources<'a> {
    /// Accumulator rings per IR slot and output.
    pub(crate) acc: &'a mut [Vec<TimeRing>; 2],
    /// The direct-form head, if the plan has one, with the engine's input rings it reads.
    pub(crate) head: Option<&'a mut Head>,
    pub(crate) inputs: &'a [TimeRing],
    pub(crate) irs: &'a [Option<IrPtr>; 2],
    /// The IR slot heard when no swap runs (the old one while a swap runs).
    pub(crate) first: usize,
    /// The swap in progress: its new IR slot and crossfade weights.
    pub(crate) fade: Option<SwapRun>,
    /// A reset is zeroing state: the wet signal is silent.
    pub(crate) sweeping: bool,
    /// A reset is running (fading, sweeping): the shortcut for default parameters does not apply.
    pub(crate) resetting: bool,
}

/// The mix stage of an engine: smoothed parameters, the dry and pre-delay rings, and its scratch.
#[derive(Debug)]
pub(crate) struct OutputStage {
    ramps: Ramps,
    ramp_frames: u32,
    max_predelay_frames: usize,
    /// Input feeding each output's dry signal (empty: no dry path for this shape).
    dry_src: Vec<usize>,
    /// The input again, for the dry signal and bypass (kept while a reset zeroes the input rings).
    /// Written only while `dry_live`: seeded from the input rings when a command first needs it.
    dry: Vec<TimeRing>,
    dry_live: bool,
    /// Wet signal history per output, for the pre-delay (empty without one).
    predelay: Vec<TimeRing>,
    /// Scratch: wet signal per IR slot and output, pre-delay taps, dry, gains (one block each).
    wet: [Vec<Vec<f32>>; 2],
    tap_a: Vec<f32>,
    tap_b: Vec<f32>,
    dry_chunk: Vec<f32>,
    gains: [Vec<f32>; 5],
}

impl OutputStage {
    /// Allocates the stage for `inputs` x `outputs`, block `b`, `latency`, starting at `mix` without a
    /// ramp. The caller has checked `mix` ([`Mix::check`]).
    pub(crate) fn new(
        inputs: usize,
        outputs: usize,
        (b, latency): (usize, usize),
        sample_rate_hz: u32,
        max_predelay_frames: usize,
        mix: &Mix,
    ) -> Self {
        let ramp_frames = ((PARAM_RAMP_SECONDS * f64::from(sample_rate_hz)).round() as u32).max(1);
        let scratch = || (0..outputs).map(|_| prefaulted::<f32>(b)).collect::<Vec<_>>();
        let pd = max_predelay_frames;
        let mut stage = Self {
            ramps: Ramps {
                wet: Ramp::new(mix.wet),
                dry: Ramp::new(mix.dry),
                out: Ramp::new(mix.output_gain()),
                bypass: Ramp::new(if mix.bypass { 1.0 } else { 0.0 }),
                env: Ramp::new(1.0),
                pd_from: mix.predelay_frames,
                pd_to: mix.predelay_frames,
                pd_x: Ramp::new(1.0),
                pd_next: None,
            },
            ramp_frames,
            max_predelay_frames,
            dry_src: dry_sources(inputs, outputs).unwrap_or_default(),
            dry: (0..inputs).map(|_| TimeRing::new(latency + b + 1)).collect(),
            dry_live: false,
            predelay: if pd > 0 { (0..outputs).map(|_| TimeRing::new(pd + b + 1)).collect() } else { Vec::new() },
            wet: [scratch(), scratch()],
            tap_a: prefaulted(b),
            tap_b: prefaulted(b),
            dry_chunk: prefaulted(b),
            gains: std::array::from_fn(|_| prefaulted(b)),
        };
        stage.dry_live = stage.dry_needed(false);
        stage
    }

    /// Whether the dry rings are being written.
    pub(crate) fn dry_live(&self) -> bool {
        self.dry_live
    }

    /// The dry ring of input `i`.
    pub(crate) fn dry_ring(&mut self, i: usize) -> &mut TimeRing {
        &mut self.dry[i]
    }

    /// Applies a mix command at once (its ramp starts now): [`Taken::Now`]; or, for a pre-delay that
    /// arrives while a pre-delay crossfade runs, later ([`Taken::Deferred`], see
    /// [`start_deferred`](Self::start_deferred)); [`Taken::NotMine`] for commands that are not the mix's.
    /// Values the control side has already checked; a non-finite one keeps the current target.
    pub(crate) fn apply(&mut self, command: Command) -> Taken {
        let (m, r) = (&mut self.ramps, self.ramp_frames);
        match command {
            Command::WetGain(g) => m.wet.set(finite_or(g, m.wet.target), r),
            Command::DryGain(g) if !self.dry_src.is_empty() => m.dry.set(finite_or(g, m.dry.target), r),
            Command::OutputGainDb(db) => {
                let g = 10f32.powf(finite_or(db, 0.0) / 20.0);
                m.out.set(finite_or(g, m.out.target), r);
            }
            Command::PreDelayFrames(d) => {
                if !self.predelay.is_empty() && d <= self.max_predelay_frames {
                    if m.pd_x.idle() && m.pd_next.is_none() {
                        m.start_predelay_fade(d, r);
                    } else {
                        // A crossfade runs: jumping to its target now would click. The new delay starts
                        // at the first block boundary after the running crossfade ends (at most one ramp
                        // and one block later), from where it ended; a later request in the meantime
                        // replaces this one.
                        m.pd_next = Some(d);
                        return Taken::Deferred;
                    }
                }
            }
            Command::Bypass(on) if !self.dry_src.is_empty() => m.bypass.set(if on { 1.0 } else { 0.0 }, r),
            Command::DryGain(_) | Command::Bypass(_) => {} // refused by the control side for this shape
            Command::Reset => return Taken::NotMine,
        }
        Taken::Now
    }

    /// At a block boundary: starts a deferred pre-delay crossfade once the running one has ended, and
    /// returns the command to report as applied from here.
    pub(crate) fn start_deferred(&mut self) -> Option<Command> {
        let m = &mut self.ramps;
        if !m.pd_x.idle() {
            return None;
        }
        let d = m.pd_next.take()?;
        m.start_predelay_fade(d, self.ramp_frames);
        Some(Command::PreDelayFrames(d))
    }

    /// Starts fading the wet signal out (`to = 0`) or back in (`to = 1`), for a reset.
    pub(crate) fn fade_wet(&mut self, to: f32) {
        self.ramps.env.set(to, self.ramp_frames);
    }

    /// True once the wet envelope has reached its target.
    pub(crate) fn fade_done(&self) -> bool {
        self.ramps.env.idle()
    }

    fn dry_needed(&self, resetting: bool) -> bool {
        let m = &self.ramps;
        !self.dry_src.is_empty()
            && (m.dry.target != 0.0 || m.dry.value != 0.0 || m.bypass.target != 0.0 || m.bypass.value != 0.0)
            || resetting
    }

    /// Keeps the dry rings written while the dry signal, bypass or a reset may read them; when they start,
    /// seeds them with the history they need from the input rings (at most two blocks, no allocation).
    pub(crate) fn update_dry_live(&mut self, inputs: &[TimeRing], now: i64, latency: usize, resetting: bool) {
        let needed = self.dry_needed(resetting);
        if needed && !self.dry_live {
            let b = self.tap_a.len();
            let from = now - (latency + b) as i64;
            for (ring, dry) in inputs.iter().zip(&mut self.dry) {
                let mut at = from;
                while at < now {
                    let n = ((now - at) as usize).min(b);
                    ring.read(at, &mut self.tap_a[..n]);
                    dry.write(at, &self.tap_a[..n]);
                    at += n as i64;
                }
            }
        }
        self.dry_live = needed;
    }

    /// Emits output frames `[emit, emit + len)` into `outputs[..][at..at + len]`: the wet signal of each
    /// IR slot in use (accumulators plus head), the swap crossfade, pre-delay, gains and bypass. Returns
    /// the peak absolute output.
    pub(crate) fn emit(
        &mut self,
        src: WetSources<'_>,
        outputs: &mut [&mut [f32]],
        (at, len): (usize, usize),
        emit: i64,
    ) -> f32 {
        let first = src.first;
        if src.fade.is_none() && !src.resetting && self.predelay.is_empty() && self.ramps.is_identity() {
            // Default parameters, no swap, no pre-delay line to feed: the output is the wet signal itself.
            let mut peak = 0.0f32;
            for (o, y) in outputs.iter_mut().enumerate() {
                let y = &mut y[at..at + len];
                src.acc[first][o].take(emit, y);
                peak = peak.max(peak_abs(y));
            }
            if let (Some(head), Some(ir)) = (src.head, src.irs[first].as_ref().map(IrPtr::get)) {
                let wet = &mut self.wet[first];
                for w in wet.iter_mut() {
                    w[..len].fill(0.0);
                }
                head.add(src.inputs, emit, wet, len, &ir.head);
                peak = 0.0;
                for (y, w) in outputs.iter_mut().zip(wet.iter()) {
                    let y = &mut y[at..at + len];
                    for (v, h) in y.iter_mut().zip(&w[..len]) {
                        *v += h;
                    }
                    peak = peak.max(peak_abs(y));
                }
            }
            return peak;
        }
        let mut head = src.head;
        for slot in std::iter::once(first).chain(src.fade.map(|s| s.new)) {
            let wet = &mut self.wet[slot];
            for (ring, w) in src.acc[slot].iter_mut().zip(wet.iter_mut()) {
                ring.take(emit, &mut w[..len]);
            }
            if let (Some(head), Some(ir)) = (head.as_deref_mut(), src.irs[slot].as_ref().map(IrPtr::get)) {
                head.add(src.inputs, emit, wet, len, &ir.head);
            }
        }
        // Gains for this chunk, shared by every output.
        let m = &mut self.ramps;
        if m.pd_x.idle() {
            m.pd_from = m.pd_to; // the last pre-delay crossfade ended in an earlier chunk
        }
        let [g_wet, g_dry, g_by, g_w, g_pd] = &mut self.gains;
        for j in 0..len {
            let out = m.out.next();
            g_wet[j] = m.wet.next() * m.env.next() * out;
            g_dry[j] = m.dry.next() * out;
            g_by[j] = m.bypass.next();
            g_pd[j] = m.pd_x.next();
            g_w[j] = src.fade.map_or(0.0, |s| s.weight(emit + j as i64));
        }
        let (pd_from, pd_to) = (m.pd_from, m.pd_to);
        let mut peak = 0.0f32;
        for (o, y) in outputs.iter_mut().enumerate() {
            let y = &mut y[at..at + len];
            // The wet signal: one slot, or the crossfade of two.
            let a = &self.wet[first][o][..len];
            match src.fade {
                Some(s) => {
                    let bw = &self.wet[s.new][o][..len];
                    for j in 0..len {
                        y[j] = (1.0 - g_w[j]) * a[j] + g_w[j] * bw[j];
                    }
                }
                None => y.copy_from_slice(a),
            }
            if src.sweeping {
                y.fill(0.0);
            }
            if let Some(ring) = self.predelay.get_mut(o) {
                ring.write(emit, y);
                ring.read(emit - pd_from as i64, &mut self.tap_a[..len]);
                if pd_from == pd_to {
                    y.copy_from_slice(&self.tap_a[..len]);
                } else {
                    ring.read(emit - pd_to as i64, &mut self.tap_b[..len]);
                    for j in 0..len {
                        y[j] = (1.0 - g_pd[j]) * self.tap_a[j] + g_pd[j] * self.tap_b[j];
                    }
                }
            }
            let dry = &mut self.dry_chunk[..len];
            match self.dry_src.get(o) {
                Some(&i) if self.dry_live => self.dry[i].read(emit, dry),
                _ => dry.fill(0.0),
            }
            for j in 0..len {
                let mixed = g_wet[j] * y[j] + g_dry[j] * dry[j];
                let v = (1.0 - g_by[j]) * mixed + g_by[j] * dry[j];
                y[j] = v;
                peak = peak.max(v.abs());
            }
        }
        peak
    }

    /// The pre-delay rings, for a reset's sweep.
    pub(crate) fn predelay_rings(&mut self) -> &mut [TimeRing] {
        &mut self.predelay
    }

    /// Zeroes the dry and pre-delay history at once.
    pub(crate) fn clear(&mut self) {
        for r in self.dry.iter_mut().chain(&mut self.predelay) {
            r.clear();
        }
    }

    /// Bytes of rings and scratch.
    pub(crate) fn memory_bytes(&self) -> usize {
        let rings: usize = self.dry.iter().chain(&self.predelay).map(|r| 4 * r.len()).sum();
        let scratch: usize = self.wet.iter().flatten().map(Vec::len).sum::<usize>()
            + self.tap_a.len()
            + self.tap_b.len()
            + self.dry_chunk.len()
            + self.gains.iter().map(Vec::len).sum::<usize>();
        rings + 4 * scratch
    }

    /// Test hook: fills the scratch buffers with `value`.
    #[cfg(feature = "test-hooks")]
    pub(crate) fn dirty(&mut self, value: f32) {
        for w in self.wet.iter_mut().flatten() {
            w.fill(value);
        }
        for v in [&mut self.tap_a, &mut self.tap_b, &mut self.dry_chunk].into_iter().chain(&mut self.gains) {
            v.fill(value);
        }
    }
}

/// The largest |v| of `y` (NaN counts as the largest), by the bit patterns so it vectorizes: the
/// magnitudes of non-negative IEEE 754 floats order like their bits as unsigned integers.
fn peak_abs(y: &[f32]) -> f32 {
    f32::from_bits(y.iter().fold(0u32, |m, v| m.max(v.to_bits() & 0x7fff_ffff)))
}

/// `v` when finite, else `fallback` (a NaN gain from the control side must not reach the output).
fn finite_or(v: f32, fallback: f32) -> f32 {
    if v.is_finite() {
        v
    } else {
        fallback
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn dry_sources_follow_the_shape() {
        assert_eq!(dry_sources(2, 2), Some(vec![0, 1]));
        assert_eq!(dry_sources(1, 2), Some(vec![0, 0]));
        assert_eq!(dry_sources(1, 1), Some(vec![0]));
        assert_eq!(dry_sources(2, 3), None);
        assert_eq!(dry_sources(3, 1), None);
    }

    #[test]
    fn mix_check_names_what_is_wrong() {
        assert!(Mix::default().check(3, 2, 0).is_ok(), "default mix fits every shape");
        let dry = Mix { dry: 0.5, ..Mix::default() };
        assert_eq!(dry.check(3, 2, 0), Err(MixError::NoDryPath { inputs: 3, outputs: 2 }));
        let bypass = Mix { bypass: true, ..Mix::default() };
        assert!(bypass.check(2, 3, 0).is_err());
        assert!(bypass.check(1, 4, 0).is_ok());
        let pd = Mix { predelay_frames: 10, ..Mix::default() };
        assert_eq!(pd.check(1, 1, 9), Err(MixError::PreDelayTooLong { predelay_frames: 10, max_predelay_frames: 9 }));
        let nan = Mix { wet: f32::NAN, ..Mix::default() };
        assert!(matches!(nan.check(1, 1, 0), Err(MixError::NotFinite { parameter: "wet" })));
        let loud = Mix { output_gain_db: 1e6, ..Mix::default() };
        assert!(loud.check(1, 1, 0).is_err(), "a gain that overflows to infinity is refused");
    }

    #[test]
    fn ramps_reach_their_target_exactly() {
        let mut r = Ramp::new(0.0);
        r.set(1.0, 4);
        let v: Vec<f32> = (0..6).map(|_| r.next()).collect();
        assert_eq!(v, vec![0.25, 0.5, 0.75, 1.0, 1.0, 1.0]);
        assert!(r.idle());
    }
}
