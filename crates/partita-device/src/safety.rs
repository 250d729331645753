//! The safety stage, last in the chain before the device: a fade-in on start, an output ceiling, and an
//! automatic mute on non-finite or runaway (feedback-like) output.
//!
//! - **Fade-in**: a raised-cosine gain from 0 to 1 over [`SafetyOptions::fade_in_ms`] (250 ms by
//!   default) when the stream starts and after an unmute.
//! - **Ceiling** (default -1 dBFS): [`Ceiling::Soft`] (default) is a memoryless soft clipper with no
//!   look-ahead and so no added latency: exactly transparent up to a knee 3 dB below the ceiling, then
//!   `knee + (ceiling - knee) * tanh((|x| - knee) / (ceiling - knee))`, which is continuous with slope 1
//!   at the knee and approaches the ceiling without passing it. Above the knee it distorts (odd harmonics) instead of
//!   pumping like a look-ahead limiter would. [`Ceiling::Hard`] clamps at the ceiling.
//! - **Mute** (latched until [`SafetyStage::unmute`]): at once on any NaN or infinite sample, and on
//!   sustained full-scale output: when the pre-ceiling peak stays at or above
//!   [`SafetyOptions::runaway_dbfs`] (-1 dBFS by default) for [`SafetyOptions::runaway_ms`] (400 ms),
//!   with gaps between hot samples shorter than 50 ms (a held tone of 20 Hz or more counts as sustained).
//!   Acoustic feedback between open microphones and speakers grows into exactly such a tone; music
//!   rarely holds its peaks that long, but a very loud, heavily limited source can, and then mutes too.

/// How the output ceiling limits.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub enum Ceiling {
    /// Memoryless soft clipper: transparent below a knee 3 dB under the ceiling (default).
    #[default]
    Soft,
    /// Hard clip at the ceiling.
    Hard,
}

/// Why the safety stage muted.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum MuteReason {
    /// A NaN or infinite output sample.
    NonFinite,
    /// Sustained full-scale output, as feedback produces.
    Runaway,
}

impl MuteReason {
    /// Code stored in an atomic (0 means not muted).
    pub(crate) fn code(self) -> u8 {
        match self {
            Self::NonFinite => 1,
            Self::Runaway => 2,
        }
    }

    pub(crate) fn from_code(code: u8) -> Option<Self> {
        match code {
            1 => Some(Self::NonFinite),
            2 => Some(Self::Runaway),
            _ => None,
        }
    }
}

impl std::fmt::Display for MuteReason {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.write_str(match self {
            Self::NonFinite => "non-finite output (NaN or infinity)",
            Self::Runaway => "sustained full-scale output (feedback?)",
        })
    }
}

/// Settings of the [`SafetyStage`].
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct SafetyOptions {
    /// Fade-in length on start and after an unmute, ms (default 250; 0 for none).
    pub fade_in_ms: f64,
    /// Output ceiling, dBFS (default -1).
    pub ceiling_dbfs: f64,
    /// Soft clipper or hard clip (default soft).
    pub ceiling: Ceiling,
    /// Pre-ceiling level counted as full scale for runaway detection, dBFS (default -1).
    pub runaway_dbfs: f64,
    /// How long full-scale output must last before the mute, ms (default 400).
    pub runaway_ms: f64,
}

impl Default for SafetyOptions {
    fn default() -> Self {
        Self { fade_in_ms: 250.0, ceiling_dbfs: -1.0, ceiling: Ceiling::Soft, runaway_dbfs: -1.0, runaway_ms: 400.0 }
    }
}

/// Longest gap between hot samples that still counts as one sustained run.
const HOLD_MS: f64 = 50.0;

/// What one [`SafetyStage::process`] call found.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Default)]
pub struct SafetyReport {
    /// Non-finite samples seen (the first one mutes; the rest of the call is silent).
    pub nonfinite: u64,
    /// Set when this call muted the output.
    pub muted: Option<MuteReason>,
}

/// The safety stage; see the [module docs](self). Works in place on planar buffers; never allocates.
#[derive(Debug, Clone)]
pub struct SafetyStage {
    ceiling: f32,
    knee: f32,
    kind: Ceiling,
    runaway_level: f32,
    runaway_frames: u64,
    hold_frames: u64,
    fade_frames: u64,
    fade_pos: u64,
    hot_run: u64,
    since_hot: u64,
    muted: Option<MuteReason>,
}

fn db_to_gain(db: f64) -> f32 {
    10f64.powf(db / 20.0) as f32
}

impl SafetyStage {
    /// A stage for `sample_rate_hz`, muted-free and at the start of its fade-in.
    pub fn new(options: &SafetyOptions, sample_rate_hz: u32) -> Self {
        let rate = f64::from(sample_rate_hz);
        let frames = |ms: f64| (ms.max(0.0) * rate / 1000.0).round() as u64;
        let ceiling = db_to_gain(options.ceiling_dbfs.min(0.0));
        Self {
            ceiling,
            knee: ceiling * db_to_gain(-3.0),
            kind: options.ceiling,
            runaway_level: db_to_gain(options.runaway_dbfs),
            runaway_frames: frames(options.runaway_ms).max(1),
            hold_frames: frames(HOLD_MS),
            fade_frames: frames(options.fade_in_ms),
            fade_pos: 0,
            hot_run: 0,
            since_hot: u64::MAX / 2,
            muted: None,
        }
    }

    /// The linear ceiling.
    pub fn ceiling(&self) -> f32 {
        self.ceiling
    }

    /// Why the stage is muted, if it is.
    pub fn muted(&self) -> Option<MuteReason> {
        self.muted
    }

    /// Ends a mute and starts the fade-in again. Does not allocate.
    pub fn unmute(&mut self) {
        self.muted = None;
        self.fade_pos = 0;
        self.hot_run = 0;
        self.since_hot = u64::MAX / 2;
    }

    #[inline]
    fn limit(&self, x: f32) -> f32 {
        match self.kind {
            Ceiling::Hard => x.clamp(-self.ceiling, self.ceiling),
            Ceiling::Soft => {
                let a = x.abs();
                if a <= self.knee {
                    x
                } else {
                    let room = self.ceiling - self.knee;
                    (self.knee + room * ((a - self.knee) / room).tanh()).copysign(x)
                }
            }
        }
    }

    /// Processes `len` frames of every channel in place: mute checks, ceiling, fade-in.
    ///
    /// # Panics
    /// When a channel holds fewer than `len` samples.
    pub fn process(&mut self, channels: &mut [Vec<f32>], len: usize) -> SafetyReport {
        let mut report = SafetyReport::default();
        if self.muted.is_some() {
            for c in channels.iter_mut() {
                c[..len].fill(0.0);
            }
            return report;
        }
        for i in 0..len {
            let mut peak = 0.0f32;
            let mut finite = true;
            for c in channels.iter() {
                let v = c[i];
                finite &= v.is_finite();
                peak = peak.max(v.abs());
            }
            if !finite {
                report.nonfinite =
                    channels.iter().map(|c| c[i..len].iter().filter(|v| !v.is_finite()).count() as u64).sum();
                return self.mute_from(channels, i, len, MuteReason::NonFinite, report);
            }
            if peak >= self.runaway_level {
                self.since_hot = 0;
                self.hot_run += 1;
            } else {
                self.since_hot = self.since_hot.saturating_add(1);
                if self.since_hot > self.hold_frames {
                    self.hot_run = 0;
                } else {
                    self.hot_run += 1;
                }
            }
            if self.hot_run >= self.runaway_frames {
                return self.mute_from(channels, i, len, MuteReason::Runaway, report);
            }
            let gain = if self.fade_pos < self.fade_frames {
                let g = 0.5 - 0.5 * (std::f64::consts::PI * self.fade_pos as f64 / self.fade_frames as f64).cos();
                self.fade_pos += 1;
                g as f32
            } else {
                1.0
            };
            for c in channels.iter_mut() {
                c[i] = self.limit(c[i]) * gain;
            }
        }
        report
    }

    fn mute_from(
        &mut self,
        channels: &mut [Vec<f32>],
        from: usize,
        len: usize,
        reason: MuteReason,
        mut report: SafetyReport,
    ) -> SafetyReport {
        for c in channels.iter_mut() {
            c[from..len].fill(0.0);
        }
        self.muted = Some(reason);
        report.muted = Some(reason);
        report
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    fn no_fade() -> SafetyOptions {
        SafetyOptions { fade_in_ms: 0.0, ..SafetyOptions::default() }
    }

    #[test]
    fn soft_ceiling_is_transparent_below_the_knee_and_bounded_above() {
        let mut s = SafetyStage::new(&no_fade(), 48_000);
        let c = s.ceiling();
        assert!((c - 0.891_250_9).abs() < 1e-6);
        let mut ch = vec![vec![0.5, -0.6, 0.63, 0.9, -4.0, 1e6]];
        s.process(&mut ch, 6);
        assert_eq!(&ch[0][..3], &[0.5, -0.6, 0.63]);
        assert!(ch[0][3] < 0.9 && ch[0][3] > 0.8);
        assert!(ch[0][4] >= -c && ch[0][4] < -0.85);
        assert!(ch[0][5] <= c);
    }

    #[test]
    fn hard_ceiling_clamps() {
        let mut s = SafetyStage::new(&SafetyOptions { ceiling: Ceiling::Hard, ..no_fade() }, 48_000);
        let mut ch = vec![vec![0.8, 2.0, -2.0]];
        s.process(&mut ch, 3);
        assert_eq!(ch[0], vec![0.8, s.ceiling(), -s.ceiling()]);
    }

    #[test]
    fn fade_in_rises_from_zero() {
        let mut s = SafetyStage::new(&SafetyOptions { fade_in_ms: 1.0, ..SafetyOptions::default() }, 48_000);
        let mut ch = vec![vec![0.5; 100]];
        s.process(&mut ch, 100);
        assert_eq!(ch[0][0], 0.0);
        assert!(ch[0].windows(2).take(47).all(|w| w[1] > w[0]));
        assert_eq!(ch[0][60], 0.5);
    }

    #[test]
    fn nan_mutes_at_once_and_stays_muted() {
        let mut s = SafetyStage::new(&no_fade(), 48_000);
        let mut ch = vec![vec![0.1, 0.2, f32::NAN, 0.3], vec![0.1, f32::INFINITY, 0.0, 0.0]];
        let r = s.process(&mut ch, 4);
        assert_eq!(r.muted, Some(MuteReason::NonFinite));
        assert_eq!(ch[0], vec![0.1, 0.0, 0.0, 0.0]);
        assert!(ch.iter().flatten().all(|v| v.is_finite()));
        let mut more = vec![vec![0.5; 8], vec![0.5; 8]];
        let r = s.process(&mut more, 8);
        assert_eq!(r.muted, None);
        assert!(more.iter().flatten().all(|&v| v == 0.0));
        s.unmute();
        assert_eq!(s.muted(), None);
    }

    #[test]
    fn sustained_full_scale_tone_mutes_but_a_short_burst_does_not() {
        let rate = 48_000;
        let tone = |n: usize, amp: f32| -> Vec<f32> {
            (0..n).map(|i| amp * (2.0 * std::f32::consts::PI * 440.0 * i as f32 / rate as f32).sin()).collect()
        };
        let mut s = SafetyStage::new(&no_fade(), rate);
        let mut burst = vec![tone(4800, 1.0)]; // 100 ms
        assert_eq!(s.process(&mut burst, 4800).muted, None);
        let mut quiet = vec![vec![0.0; 9600]];
        assert_eq!(s.process(&mut quiet, 9600).muted, None);
        let mut held = vec![tone(48_000, 1.0)];
        let r = s.process(&mut held, 48_000);
        assert_eq!(r.muted, Some(MuteReason::Runaway));
        // Muted within the 400 ms (+ one hold) of the onset.
        let last = held[0].iter().rposition(|&v| v != 0.0).unwrap();
        assert!(last < 48 * 460, "muted after {} ms", last / 48);
    }
}
