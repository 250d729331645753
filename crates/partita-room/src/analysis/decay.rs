//! Schroeder decay curves, reverberation times (EDT, T20, T30), clarity, definition and centre time; the methods
//! are in the [module docs](super).

use super::{check_rate, AnalysisError};

/// How far (dB) the noise energy still to come must lie below the integrated energy at the bottom of an
/// evaluation range for [`reverberation_time`] to accept the fit. 10 dB, after ISO 3382-1's headroom rule.
pub const NOISE_HEADROOM_DB: f64 = 10.0;

/// The onset threshold: the response starts at its first sample within 20 dB of its peak (ISO 3382-1:2009,
/// annex A: the start is where the signal rises significantly above the noise but before the maximum, and no
/// more than 20 dB below it; from memory).
pub const ONSET_THRESHOLD_DB: f64 = -20.0;

/// Converts, checks finiteness and non-silence.
pub(crate) fn to_f64<T: Copy + Into<f64>>(ir: &[T]) -> Result<Vec<f64>, AnalysisError> {
    if ir.is_empty() {
        return Err(AnalysisError::Empty);
    }
    let h: Vec<f64> = ir.iter().map(|&v| v.into()).collect();
    if let Some(index) = h.iter().position(|v| !v.is_finite()) {
        return Err(AnalysisError::NotFinite { index });
    }
    if h.iter().all(|&v| v == 0.0) {
        return Err(AnalysisError::Silent);
    }
    Ok(h)
}

/// Backward-integrated energy: `e[n] = sum_{k >= n} h[k]^2`, summed from the end (small terms first).
fn backward_energy(h: &[f64]) -> Vec<f64> {
    let mut e = vec![0.0; h.len()];
    let mut acc = 0.0;
    for (slot, &v) in e.iter_mut().zip(h).rev() {
        acc += v * v;
        *slot = acc;
    }
    e
}

fn energy_to_db(e: &[f64]) -> Vec<f64> {
    let total = e[0];
    e.iter().map(|&v| 10.0 * (v / total).log10()).collect()
}

/// The index of the first sample within [`ONSET_THRESHOLD_DB`] (20 dB) of the response's peak magnitude: where
/// the response starts, for the parameters that are timed from the start (EDT, C80, D50, centre time).
///
/// # Errors
/// [`AnalysisError::Empty`], [`AnalysisError::NotFinite`], [`AnalysisError::Silent`].
pub fn onset_index<T: Copy + Into<f64>>(ir: &[T]) -> Result<usize, AnalysisError> {
    let h = to_f64(ir)?;
    Ok(onset_of(&h))
}

pub(crate) fn onset_of(h: &[f64]) -> usize {
    let peak = h.iter().fold(0.0f64, |m, v| m.max(v.abs()));
    let threshold = peak * 10f64.powf(ONSET_THRESHOLD_DB / 20.0);
    h.iter().position(|v| v.abs() >= threshold).unwrap_or(0)
}

/// The Schroeder energy decay curve of `ir`, in a new vector, in dB re. its total energy: element n is
/// `10 log10(sum_{k >= n} h[k]^2 / sum_k h[k]^2)`, so element 0 is exactly 0 dB and the curve never rises. Where
/// no energy remains (trailing zeros) the value is negative infinity. The integration runs to the last sample:
/// there is no noise compensation (see the module docs).
///
/// Schroeder, JASA 37(3), 1965.
///
/// # Errors
/// [`AnalysisError::Empty`], [`AnalysisError::NotFinite`], [`AnalysisError::Silent`].
pub fn schroeder_decay_db<T: Copy + Into<f64>>(ir: &[T]) -> Result<Vec<f64>, AnalysisError> {
    let h = to_f64(ir)?;
    Ok(energy_to_db(&backward_energy(&h)))
}

/// A straight line fitted to a decay curve over an evaluation range, and the reverberation time it implies.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct DecayFit {
    /// Upper level of the evaluation range (dB re. the curve's start).
    pub start_db: f64,
    /// Lower level of the evaluation range.
    pub end_db: f64,
    /// Time of the first point of the range, seconds after the curve's first sample.
    pub start_s: f64,
    /// Time of the last point of the range.
    pub end_s: f64,
    /// Fitted slope in dB per second (negative for a decay).
    pub slope_db_per_s: f64,
    /// Fitted level at time zero, dB.
    pub intercept_db: f64,
    /// The line's time to fall 60 dB: -60 / slope, seconds.
    pub reverberation_time_s: f64,
    /// Non-linearity of the decay, xi = 1000 (1 - r^2) in per mille, r the correlation coefficient of the fit
    /// (ISO 3382-2:2008, annex B; from memory). Near 0 for a straight decay; above about 10 the curve is bent.
    pub nonlinearity_permille: f64,
    /// Number of curve points the line was fitted to.
    pub points: usize,
}

/// Fits a least-squares line to the decay curve `edc_db` (one value per sample, dB, as from
/// [`schroeder_decay_db`]) between the first point at or below `start_db` and the first point at or below
/// `end_db`, both included; non-finite points are skipped.
///
/// ISO 3382-1:2009 / ISO 3382-2:2008 evaluation ranges: EDT (0, -10), T20 (-5, -25), T30 (-5, -35).
///
/// # Errors
/// [`AnalysisError::InvalidSampleRate`], [`AnalysisError::InvalidRange`], [`AnalysisError::Empty`],
/// [`AnalysisError::DecayTooShallow`] when the curve never reaches `start_db` or `end_db`,
/// [`AnalysisError::TooFewPoints`] with fewer than 3 points in range, [`AnalysisError::NotDecaying`].
pub fn fit_decay(edc_db: &[f64], sample_rate_hz: f64, start_db: f64, end_db: f64) -> Result<DecayFit, AnalysisError> {
    check_rate(sample_rate_hz)?;
    if !(start_db.is_finite() && end_db.is_finite() && start_db <= 0.0 && end_db < start_db) {
        return Err(AnalysisError::InvalidRange { start_db, end_db });
    }
    if edc_db.is_empty() {
        return Err(AnalysisError::Empty);
    }
    let reached_db = edc_db.iter().copied().filter(|v| v.is_finite()).fold(f64::INFINITY, f64::min);
    let shallow = |needed_db| AnalysisError::DecayTooShallow { needed_db, reached_db };
    let i0 = edc_db.iter().position(|&v| v <= start_db).ok_or(shallow(start_db))?;
    let i1 = i0 + edc_db[i0..].iter().position(|&v| v <= end_db).ok_or(shallow(end_db))?;

    // Centred sums keep the normal equations well conditioned for long curves.
    let pts = || (i0..=i1).filter(|&i| edc_db[i].is_finite()).map(|i| (i as f64 / sample_rate_hz, edc_db[i]));
    let n = pts().count();
    if n < 3 {
        return Err(AnalysisError::TooFewPoints { points: n });
    }
    let (sx, sy) = pts().fold((0.0, 0.0), |(a, b), (x, y)| (a + x, b + y));
    let (mx, my) = (sx / n as f64, sy / n as f64);
    let (mut sxx, mut sxy, mut syy) = (0.0, 0.0, 0.0);
    for (x, y) in pts() {
        let (dx, dy) = (x - mx, y - my);
        sxx += dx * dx;
        sxy += dx * dy;
        syy += dy * dy;
    }
    let slope = sxy / sxx;
    // A flat or NaN slope is no decay.
    if slope.is_nan() || slope >= 0.0 {
        return Err(AnalysisError::NotDecaying { slope_db_per_s: slope });
    }
    let r2 = if syy > 0.0 { (sxy * sxy) / (sxx * syy) } else { 1.0 };
    Ok(DecayFit {
        start_db,
        end_db,
        start_s: i0 as f64 / sample_rate_hz,
        end_s: i1 as f64 / sample_rate_hz,
        slope_db_per_s: slope,
        intercept_db: my - slope * mx,
        reverberation_time_s: -60.0 / slope,
        nonlinearity_permille: 1000.0 * (1.0 - r2),
        points: n,
    })
}

/// An ISO 3382 evaluation range of the decay curve.
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
pub enum DecayRange {
    /// Early decay time: 0 to -10 dB.
    Edt,
    /// T20: -5 to -25 dB.
    T20,
    /// T30: -5 to -35 dB.
    T30,
}

impl DecayRange {
    /// `(start_db, end_db)` of the range (ISO 3382-1:2009, clause 3 and annex A).
    pub fn levels_db(self) -> (f64, f64) {
        match self {
            Self::Edt => (0.0, -10.0),
            Self::T20 => (-5.0, -25.0),
            Self::T30 => (-5.0, -35.0),
        }
    }
}

/// Measures a reverberation time of `ir`: trims it to its onset ([`onset_index`]), computes the Schroeder curve
/// ([`schroeder_decay_db`]), fits the `range` ([`fit_decay`]) and checks the noise headroom (module docs).
/// Times in the result count from the onset. Band-filter the response first
/// ([`OctaveFilter`](super::OctaveFilter)) for a band value.
///
/// # Errors
/// Those of [`schroeder_decay_db`] and [`fit_decay`], and [`AnalysisError::NoiseFloorTooHigh`].
pub fn reverberation_time<T: Copy + Into<f64>>(
    ir: &[T],
    sample_rate_hz: f64,
    range: DecayRange,
) -> Result<DecayFit, AnalysisError> {
    check_rate(sample_rate_hz)?;
    let h = to_f64(ir)?;
    let h = &h[onset_of(&h)..];
    let energy = backward_energy(h);
    let (start_db, end_db) = range.levels_db();
    let fit = fit_decay(&energy_to_db(&energy), sample_rate_hz, start_db, end_db)?;

    let bottom = (fit.end_s * sample_rate_hz).round() as usize;
    let tail = (h.len() / 10).max(1);
    let noise_ms = h[h.len() - tail..].iter().map(|v| v * v).sum::<f64>() / tail as f64;
    let noise_to_come = noise_ms * (h.len() - bottom) as f64;
    if noise_to_come > 0.0 {
        let headroom_db = 10.0 * (energy[bottom] / noise_to_come).log10();
        if headroom_db < NOISE_HEADROOM_DB {
            return Err(AnalysisError::NoiseFloorTooHigh { headroom_db, needed_db: NOISE_HEADROOM_DB });
        }
    }
    Ok(fit)
}

/// T30 in seconds: [`reverberation_time`] over -5 to -35 dB.
///
/// # Errors
/// Those of [`reverberation_time`].
pub fn t30<T: Copy + Into<f64>>(ir: &[T], sample_rate_hz: f64) -> Result<f64, AnalysisError> {
    reverberation_time(ir, sample_rate_hz, DecayRange::T30).map(|f| f.reverberation_time_s)
}

/// T20 in seconds: [`reverberation_time`] over -5 to -25 dB.
///
/// # Errors
/// Those of [`reverberation_time`].
pub fn t20<T: Copy + Into<f64>>(ir: &[T], sample_rate_hz: f64) -> Result<f64, AnalysisError> {
    reverberation_time(ir, sample_rate_hz, DecayRange::T20).map(|f| f.reverberation_time_s)
}

/// Early decay time in seconds: [`reverberation_time`] over 0 to -10 dB, extrapolated to 60 dB.
///
/// # Errors
/// Those of [`reverberation_time`].
pub fn edt<T: Copy + Into<f64>>(ir: &[T], sample_rate_hz: f64) -> Result<f64, AnalysisError> {
    reverberation_time(ir, sample_rate_hz, DecayRange::Edt).map(|f| f.reverberation_time_s)
}

/// Early and late energy of `ir` split `early_ms` after its onset, `(early, late, frames after onset)`.
fn split_energy<T: Copy + Into<f64>>(
    ir: &[T],
    sample_rate_hz: f64,
    early_ms: f64,
) -> Result<(f64, f64, usize), AnalysisError> {
    check_rate(sample_rate_hz)?;
    let h = to_f64(ir)?;
    let h = &h[onset_of(&h)..];
    let split = (early_ms * 1e-3 * sample_rate_hz).round().max(0.0) as usize;
    if split >= h.len() {
        return Err(AnalysisError::TooShort { needed_frames: split, frames: h.len() });
    }
    let early = h[..split].iter().map(|v| v * v).sum::<f64>();
    let late = h[split..].iter().map(|v| v * v).sum::<f64>();
    Ok((early, late, split))
}

/// Clarity C_te in dB: 10 log10(early / late energy) split `early_ms` after the onset; `early_ms` = 80 gives
/// C80 (music), 50 gives C50 (speech) (ISO 3382-1:2009, annex A). The split falls on the nearest sample.
///
/// # Errors
/// Those of [`onset_index`], [`AnalysisError::InvalidSampleRate`], and [`AnalysisError::TooShort`] when the
/// response ends before the split or holds no energy after it.
pub fn clarity_db<T: Copy + Into<f64>>(ir: &[T], sample_rate_hz: f64, early_ms: f64) -> Result<f64, AnalysisError> {
    let (early, late, split) = split_energy(ir, sample_rate_hz, early_ms)?;
    if late == 0.0 {
        return Err(AnalysisError::TooShort { needed_frames: split, frames: split });
    }
    Ok(10.0 * (early / late).log10())
}

/// Definition D50: the fraction (0..=1) of the energy that arrives in the first 50 ms after the onset
/// (ISO 3382-1:2009, annex A).
///
/// # Errors
/// As [`clarity_db`] (a response shorter than 50 ms after its onset is [`AnalysisError::TooShort`]).
pub fn definition<T: Copy + Into<f64>>(ir: &[T], sample_rate_hz: f64) -> Result<f64, AnalysisError> {
    let (early, late, _) = split_energy(ir, sample_rate_hz, 50.0)?;
    Ok(early / (early + late))
}

/// Centre time Ts in seconds: the first moment of the squared response, sum t h^2 / sum h^2, t from the onset
/// (ISO 3382-1:2009, annex A).
///
/// # Errors
/// Those of [`onset_index`] and [`AnalysisError::InvalidSampleRate`].
pub fn centre_time_s<T: Copy + Into<f64>>(ir: &[T], sample_rate_hz: f64) -> Result<f64, AnalysisError> {
    check_rate(sample_rate_hz)?;
    let h = to_f64(ir)?;
    let h = &h[onset_of(&h)..];
    let (mut num, mut den) = (0.0, 0.0);
    for (n, v) in h.iter().enumerate() {
        num += n as f64 * v * v;
        den += v * v;
    }
    Ok(num / den / sample_rate_hz)
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn schroeder_curve_starts_at_zero_and_never_rises() {
        let mut noise = partita_core::synth::Noise::new(9);
        let h: Vec<f32> = (0..5000).map(|n| noise.sample() * (-(n as f32) / 800.0).exp()).collect();
        let edc = schroeder_decay_db(&h).unwrap();
        assert_eq!(edc[0], 0.0);
        assert!(edc.windows(2).all(|w| w[1] <= w[0]));
        let with_zeros = [1.0f32, 0.5, 0.0, 0.0];
        let edc = schroeder_decay_db(&with_zeros).unwrap();
        assert!(edc[2].is_infinite() && edc[2] < 0.0);
        assert!((edc[1] - 10.0 * (0.25f64 / 1.25).log10()).abs() < 1e-12);
    }

    #[test]
    fn fit_of_a_straight_line_is_exact() {
        // -60 dB over 1.5 s at 1 kHz sampling: slope -40 dB/s.
        let fs = 1000.0;
        let line: Vec<f64> = (0..2000).map(|i| -40.0 * i as f64 / fs).collect();
        let fit = fit_decay(&line, fs, -5.0, -35.0).unwrap();
        assert!((fit.reverberation_time_s - 1.5).abs() < 1e-9);
        assert!((fit.slope_db_per_s + 40.0).abs() < 1e-9);
        assert!(fit.intercept_db.abs() < 1e-9);
        assert!(fit.nonlinearity_permille.abs() < 1e-9);
        assert_eq!(fit.points, 751); // indices 125..=875
    }
}
