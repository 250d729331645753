//! Clock-drift correction between separate input and output devices.
//!
//! Two devices on separate crystals run at slightly different rates (0.01-0.1% is common), so the
//! bridge's ring slowly fills or drains. The playback side measures the ring's level before each
//! callback, made independent of where the two callbacks fall relative to each other by adding the
//! frames the input has gathered since its last callback (elapsed time x rate; a plain fill level would
//! beat slowly between the two periods), and takes a reference level once it has settled (after
//! [`DriftOptions::settle_s`] from the start or any disturbance). Two ways of holding the level at the
//! reference ([`DriftMode`]):
//!
//! - [`DriftMode::Resample`] (default): the playback side reads the ring at `1 + u` input frames per
//!   output frame through a windowed-sinc interpolator (32 taps, Kaiser window; see `resample.rs`),
//!   `u` set by a [`RateController`]: a PI loop on the level (smoothed by two one-pole filters at four
//!   times the loop's bandwidth), bandwidth [`DriftOptions::loop_hz`], limited to
//!   [`DriftOptions::max_ppm`], ramped linearly across each callback. No frame is ever dropped or
//!   repeated. The loop engages the first time the level leaves the deadband; until then the reader
//!   copies frames through unchanged with no added delay, so devices on one clock never see a
//!   correction. Once engaged the interpolator holds 16 frames beyond the output position: the
//!   controller raises its set point by those frames over a second (so the ring keeps its margin), and
//!   the bridge counts them as queued frames in the latency it reports.
//! - [`DriftMode::FrameSlip`]: the level is smoothed (one-pole, [`DriftOptions::smoothing_s`]) and
//!   when it is more than [`DriftOptions::deadband_frames`] off the reference one frame is slipped
//!   (dropped; input fast) or repeated (input slow), counted ([`DriftTracker`]). Cheap, no delay, but
//!   each correction is a click: 0.5 a second at 10 ppm, 4.8 at 100 ppm.
//!
//! Devices on one clock (a JACK server, one duplex card) never trigger a correction; the JACK host
//! turns correction off altogether.

mod resample;

pub(crate) use resample::{RateReader, HALF_TAPS, MAX_RATE_DEVIATION};

/// How drift is corrected. See the [module docs](self).
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum DriftMode {
    /// Adaptive resampling under a PI loop: click-free, adds 16 frames of delay once engaged (default).
    #[default]
    Resample,
    /// Drop or repeat a whole frame when the level is off by more than the deadband: a click each time.
    FrameSlip,
}

/// A correction the playback side should apply in this callback.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Correction {
    /// Nothing to do.
    None,
    /// Drop one frame: the ring is filling (the input runs fast).
    Slip,
    /// Play one frame twice: the ring is draining (the input runs slow).
    Repeat,
}

/// Settings of drift correction ([`RateController`] or [`DriftTracker`], per [`mode`](Self::mode)).
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DriftOptions {
    /// Correct at all. Off for devices on one clock (a JACK server): there the level is exact and
    /// callback wake-up jitter is all a tracker could see.
    pub enabled: bool,
    /// Resampling (default) or frame slips.
    pub mode: DriftMode,
    /// [`DriftMode::FrameSlip`]: smoothing time constant of the level, seconds.
    pub smoothing_s: f64,
    /// Time to settle before the reference is taken, seconds (both modes).
    pub settle_s: f64,
    /// Deviation from the reference, frames, that triggers a slip ([`DriftMode::FrameSlip`]) or
    /// engages the resampler ([`DriftMode::Resample`]).
    pub deadband_frames: f64,
    /// [`DriftMode::Resample`]: the control loop's bandwidth (its open-loop crossover), Hz. Higher
    /// follows faster and lets more of the callbacks' timing jitter through as rate wobble.
    pub loop_hz: f64,
    /// [`DriftMode::Resample`]: the largest rate correction, ppm (at most 10,000).
    pub max_ppm: f64,
}

impl Default for DriftOptions {
    fn default() -> Self {
        Self {
            enabled: true,
            mode: DriftMode::Resample,
            smoothing_s: 0.25,
            settle_s: 0.5,
            deadband_frames: 2.0,
            loop_hz: 0.5,
            max_ppm: 5000.0,
        }
    }
}

/// The level filter's corner, as a multiple of the loop bandwidth: far enough above it to cost only
/// 2 x atan(1/4) = 28 degrees of phase at the crossover (the margin stays near 50 degrees), low enough
/// that the two poles take 40 dB off the level's timing jitter 20 Hz from the tone's frequency (the
/// level's noise reaches the output as phase modulation; measured, the 1 kHz tone's largest spur went
/// from -100 to -111 dB against a corner at 8 x).
const FILTER_OVER_LOOP: f64 = 4.0;
/// The PI zero, as a fraction of the loop bandwidth (without the level filter the closed loop would be
/// critically damped; with it the phase margin is about 48 degrees and the start-up overshoots a little).
const ZERO_UNDER_LOOP: f64 = 0.25;
/// Time over which the set point is raised by the interpolator's look-ahead when it engages, seconds.
const RAISE_S: f64 = 1.0;

/// The rate controller of [`DriftMode::Resample`]: turns the phase-compensated ring level into the
/// correction `u` (the playback side reads `1 + u` input frames per output frame). Plain arithmetic;
/// never allocates.
///
/// A PI loop: `u = Kp e + Ki integral(e)`, `e` the smoothed level minus the set point, with
/// `Kp = 2 pi loop_hz / rate` (unity open-loop gain at `loop_hz`, the level being the integral of
/// `-rate x u`) and the integral's zero at a quarter of that. The integral learns the clocks' rate
/// difference, so the level returns to the set point with no standing error. `u` is continuous:
/// it stays 0 until the level first leaves the deadband (the set point then moves to the deadband's
/// edge), it is held while a new reference settles after a disturbance, and the loop resumes from the
/// held value.
#[derive(Debug, Clone)]
pub struct RateController {
    rate_hz: f64,
    options: DriftOptions,
    lookahead: f64,
    s1: f64,
    s2: f64,
    started: bool,
    settled_frames: f64,
    reference: Option<f64>,
    engaged: bool,
    integral: f64,
    u: f64,
    raise_progress: f64,
}

impl RateController {
    /// A controller for a stream at `sample_rate_hz` whose interpolator, once engaged, holds
    /// `lookahead_frames` beyond the output position.
    pub fn new(sample_rate_hz: u32, options: DriftOptions, lookahead_frames: usize) -> Self {
        let max_ppm = options.max_ppm.clamp(0.0, MAX_RATE_DEVIATION * 1e6);
        Self {
            rate_hz: f64::from(sample_rate_hz),
            options: DriftOptions { max_ppm, ..options },
            lookahead: lookahead_frames as f64,
            s1: 0.0,
            s2: 0.0,
            started: false,
            settled_frames: 0.0,
            reference: None,
            engaged: false,
            integral: 0.0,
            u: 0.0,
            raise_progress: 0.0,
        }
    }

    /// Forgets the reference after a disturbance (a period change, a resync): the next
    /// [`DriftOptions::settle_s`] only observe, with the correction held.
    pub fn reset(&mut self) {
        self.reference = None;
        self.settled_frames = 0.0;
        self.started = false;
    }

    /// [`reset`](Self::reset) for a fresh start from silence (priming): once engaged, the ring is primed
    /// with the look-ahead included, so the set point needs no raising.
    pub fn restart(&mut self) {
        self.reset();
        if self.engaged {
            self.raise_progress = 1.0;
        }
    }

    /// Whether the loop has engaged (the interpolator must then hold its look-ahead).
    pub fn engaged(&self) -> bool {
        self.engaged
    }

    /// The correction now: input frames read per output frame, minus 1.
    pub fn correction(&self) -> f64 {
        self.u
    }

    /// The reference level, once taken, frames.
    pub fn reference(&self) -> Option<f64> {
        self.reference
    }

    /// The smoothed level, frames.
    pub fn level(&self) -> f64 {
        self.s2
    }

    /// The set point's raise for the look-ahead so far, frames.
    fn raise(&self) -> f64 {
        0.5 * self.lookahead * (1.0 - (std::f64::consts::PI * self.raise_progress).cos())
    }

    /// Feeds the level `level_frames` measured before a callback of `frames` frames; returns the
    /// correction to reach by the end of that callback.
    pub fn observe(&mut self, level_frames: f64, frames: usize) -> f64 {
        let dt = frames as f64 / self.rate_hz;
        if !self.started {
            self.s1 = level_frames;
            self.s2 = level_frames;
            self.started = true;
        } else {
            let corner = FILTER_OVER_LOOP * self.options.loop_hz;
            let alpha = 1.0 - (-std::f64::consts::TAU * corner * dt).exp();
            self.s1 += alpha * (level_frames - self.s1);
            self.s2 += alpha * (self.s1 - self.s2);
        }
        if !self.options.enabled {
            return self.u;
        }
        if self.engaged && self.raise_progress < 1.0 {
            self.raise_progress = (self.raise_progress + dt / RAISE_S).min(1.0);
        }
        let Some(mut reference) = self.reference else {
            self.settled_frames += frames as f64;
            if self.settled_frames >= self.options.settle_s * self.rate_hz {
                // Bumpless: the error is 0 now, so the integral carries the held correction.
                self.reference = Some(self.s2 - self.raise());
                self.integral = self.u;
            }
            return self.u;
        };
        if !self.engaged {
            let e = self.s2 - reference;
            if e.abs() <= self.options.deadband_frames {
                return 0.0;
            }
            // Engage from the deadband's edge, so the correction starts from 0.
            self.engaged = true;
            reference += self.options.deadband_frames.copysign(e);
            self.reference = Some(reference);
        }
        let wc = std::f64::consts::TAU * self.options.loop_hz;
        let kp = wc / self.rate_hz;
        let ki = kp * ZERO_UNDER_LOOP * wc;
        let limit = self.options.max_ppm * 1e-6;
        let e = self.s2 - reference - self.raise();
        self.integral = (self.integral + ki * e * dt).clamp(-limit, limit);
        self.u = (kp * e + self.integral).clamp(-limit, limit);
        self.u
    }
}

/// The level tracker of [`DriftMode::FrameSlip`]: tracks the smoothed ring level and decides slips and
/// repeats. Plain arithmetic; never allocates.
#[derive(Debug, Clone)]
pub struct DriftTracker {
    rate_hz: f64,
    options: DriftOptions,
    level: f64,
    reference: Option<f64>,
    settled_frames: f64,
    started: bool,
}

impl DriftTracker {
    /// A tracker for a stream at `sample_rate_hz`.
    pub fn new(sample_rate_hz: u32, options: DriftOptions) -> Self {
        Self {
            rate_hz: f64::from(sample_rate_hz),
            options,
            level: 0.0,
            reference: None,
            settled_frames: 0.0,
            started: false,
        }
    }

    /// Forgets the reference (after priming, a period change or a resync): the next
    /// [`DriftOptions::settle_s`] only observe.
    pub fn reset(&mut self) {
        self.reference = None;
        self.settled_frames = 0.0;
        self.started = false;
    }

    /// The reference level, once taken.
    pub fn reference(&self) -> Option<f64> {
        self.reference
    }

    /// The smoothed level, frames.
    pub fn level(&self) -> f64 {
        self.level
    }

    /// Feeds the level `level_frames` measured before a callback of `frames` frames; returns the
    /// correction to apply now. Call [`applied`](Self::applied) when it was applied.
    pub fn observe(&mut self, level_frames: f64, frames: usize) -> Correction {
        if !self.started {
            self.level = level_frames;
            self.started = true;
        } else {
            let alpha = 1.0 - (-(frames as f64) / (self.options.smoothing_s * self.rate_hz)).exp();
            self.level += alpha * (level_frames - self.level);
        }
        let Some(reference) = self.reference.filter(|_| self.options.enabled) else {
            self.settled_frames += frames as f64;
            if self.settled_frames >= self.options.settle_s * self.rate_hz {
                self.reference = Some(self.level);
            }
            return Correction::None;
        };
        let deviation = self.level - reference;
        if deviation > self.options.deadband_frames {
            Correction::Slip
        } else if deviation < -self.options.deadband_frames {
            Correction::Repeat
        } else {
            Correction::None
        }
    }

    /// Records that `correction` was applied, so the smoothed level follows the frame at once.
    pub fn applied(&mut self, correction: Correction) {
        match correction {
            Correction::Slip => self.level -= 1.0,
            Correction::Repeat => self.level += 1.0,
            Correction::None => {}
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    /// The level a controller sees when the input runs `d` faster than the output (ppm / 1e6) and the
    /// reader takes 1 + u: it integrates the difference. Returns the corrections, one per callback.
    fn plant(c: &mut RateController, d: f64, callbacks: usize) -> (Vec<f64>, f64) {
        let mut level = 200.0;
        let mut u = 0.0;
        let mut us = Vec::with_capacity(callbacks);
        for _ in 0..callbacks {
            let next = c.observe(level, 64);
            // The reader ramps from u to next across the callback: the mean is their average.
            level += 64.0 * (d - 0.5 * (u + next));
            u = next;
            us.push(u);
        }
        (us, level)
    }

    #[test]
    fn steady_level_never_engages_the_resampler() {
        let mut c = RateController::new(48_000, DriftOptions::default(), 16);
        let (us, _) = plant(&mut c, 0.0, 10_000);
        assert!(us.iter().all(|&u| u == 0.0));
        assert!(!c.engaged());
        assert_eq!(c.reference(), Some(200.0));
    }

    /// At +-500 ppm the loop engages, learns the offset with no standing error, ends with the level at
    /// the set point (the deadband's edge plus the look-ahead's raise), and never steps: the correction
    /// moves by at most a few ppm from one 64-frame callback to the next.
    #[test]
    fn pi_loop_learns_the_offset_smoothly() {
        for d in [500e-6, -500e-6] {
            let mut c = RateController::new(48_000, DriftOptions::default(), 16);
            let (us, level) = plant(&mut c, d, 20 * 750);
            assert!(c.engaged());
            let last = *us.last().unwrap();
            assert!((last - d).abs() < 1e-7, "{d}: ended at {last}");
            let reference = c.reference().unwrap();
            assert!((level - reference - 16.0).abs() < 0.05, "{d}: level {level}, reference {reference}");
            // Taken (smoothed, so a little behind) after the 0.5 s of settling, then moved to the
            // deadband's edge.
            let drifted = (reference - 200.0) * d.signum();
            assert!(drifted > 2.0 && drifted < 0.5 * 48_000.0 * d.abs() + 2.0, "{d}: reference {reference}");
            let step = us.windows(2).map(|w| (w[1] - w[0]).abs()).fold(0.0, f64::max);
            assert!(step < 5e-6, "{d}: a step of {:.2} ppm", step * 1e6);
        }
    }

    #[test]
    fn steady_level_never_corrects() {
        let mut t = DriftTracker::new(48_000, DriftOptions::default());
        for _ in 0..10_000 {
            assert_eq!(t.observe(128.0, 64), Correction::None);
        }
        assert_eq!(t.reference(), Some(128.0));
    }

    #[test]
    fn rising_level_slips() {
        let mut t = DriftTracker::new(48_000, DriftOptions::default());
        let mut level = 128.0;
        let mut slips = 0;
        for _ in 0..3000 {
            let c = t.observe(level, 64);
            if c == Correction::Slip {
                level -= 1.0;
                slips += 1;
                t.applied(c);
            }
            level += 0.064; // 0.1% of 64 frames
        }
        // 3000 x 0.064 = 192 frames of drift, minus the settling time and the smoothing lag.
        assert!(slips > 150 && slips < 192, "{slips}");
    }
}
