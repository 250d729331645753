//! Clock-drift correction between separate input and output devices.
//!
//! Two devices on separate crystals run at slightly different rates (0.01-0.1% is common), so the
//! bridge's ring slowly fills or drains. The playback side measures the ring's level before each
//! callback, made independent of where the two callbacks fall relative to each other by adding the
//! frames the input has gathered since its last callback (elapsed time x rate; a plain fill level would
//! beat slowly between the two periods). The level is smoothed (one-pole, 250 ms), compared with the
//! reference taken once it settled (500 ms after start or any disturbance), and when it is more than
//! two frames off, one frame is slipped (dropped; input fast) or repeated (input slow), counted.
//! Devices on one clock (a JACK server, one duplex card) never trigger a correction.

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

/// Settings of the [`DriftTracker`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DriftOptions {
    /// Correct at all. Off for devices on one clock (a JACK server): there the level is exact and
    /// callback wake-up jitter is all a tracker could see.
    pub enabled: bool,
    /// Smoothing time constant, seconds.
    pub smoothing_s: f64,
    /// Time to settle before the reference is taken, seconds.
    pub settle_s: f64,
    /// Deviation from the reference that triggers a correction, frames.
    pub deadband_frames: f64,
}

impl Default for DriftOptions {
    fn default() -> Self {
        Self { enabled: true, smoothing_s: 0.25, settle_s: 0.5, deadband_frames: 2.0 }
    }
}

/// Tracks the smoothed ring level and decides slips and repeats. Plain arithmetic; never allocates.
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
