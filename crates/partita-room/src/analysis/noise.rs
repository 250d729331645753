//! The noise floor of a measured response and where the decay meets it, after Lundeby, Vigran, Bietz and
//! Vorlaender, "Uncertainties of measurements in room acoustics", Acustica 81, 1995 (the iterative procedure;
//! its interval choices below are from memory of the paper and marked as ours where we chose); and the
//! Schroeder curve truncated at that point with the missing tail added back (tail compensation).

use super::{check_rate, AnalysisError};

/// First averaging interval of the squared response, seconds (the paper suggests 10 to 50 ms).
const FIRST_INTERVAL_S: f64 = 0.01;
/// Intervals per 10 dB of decay after the first estimate (the paper: 3 to 10; our choice 5).
const INTERVALS_PER_10_DB: f64 = 5.0;
/// The first regression runs from the peak down to this far above the noise (dB).
const FIRST_FIT_ABOVE_NOISE_DB: f64 = 10.0;
/// The late-decay regression starts this far above the noise (dB; the paper: 5 to 10; our choice 10, where
/// the noise adds only 0.46 dB to the decay it sits on)...
const LATE_FIT_ABOVE_NOISE_DB: f64 = 10.0;
/// ...and spans this many dB upward (the paper: 10 to 20).
const LATE_FIT_SPAN_DB: f64 = 20.0;
/// The noise is re-estimated from where the decay line lies this far below it (dB; the paper: 5 to 10), and
/// never from less than the last 10% of the response.
const NOISE_START_BELOW_DB: f64 = 10.0;
/// Iterations of the late-decay estimate at most (the paper: about 5 suffice).
const MAX_ITERATIONS: usize = 5;

/// A noise floor and the point where the decay meets it.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct NoiseFloor {
    /// Mean square of the noise per sample (linear, the response's units squared).
    pub noise_mean_square: f64,
    /// The noise level in dB re. the response's peak squared sample.
    pub level_db: f64,
    /// Where the late decay line crosses the noise, frames from the response's first sample (at most its
    /// length).
    pub crossing_frames: usize,
    /// Slope of the late decay line, dB per second.
    pub late_slope_db_per_s: f64,
    /// Level of the late decay line at the crossing, mean square per sample (linear).
    pub crossing_mean_square: f64,
    /// Energy the decay would still carry after the crossing, from the late line extended to infinity: the
    /// tail compensation added to the truncated Schroeder sum.
    pub compensation: f64,
    /// Iterations until the crossing point settled.
    pub iterations: usize,
}

/// Mean of `e` over consecutive blocks of `len` samples: (time of the block centre in samples, mean).
fn block_means(e: &[f64], len: usize) -> Vec<(f64, f64)> {
    e.chunks(len)
        .enumerate()
        .map(|(i, c)| ((i * len) as f64 + (c.len() as f64 - 1.0) / 2.0, c.iter().sum::<f64>() / c.len() as f64))
        .collect()
}

fn db(x: f64) -> f64 {
    10.0 * x.log10()
}

/// Least squares y = a + b x through `pts`; `None` with fewer than two points or no spread.
fn line(pts: &[(f64, f64)]) -> Option<(f64, f64)> {
    let n = pts.len() as f64;
    if pts.len() < 2 {
        return None;
    }
    let (mx, my) = pts.iter().fold((0.0, 0.0), |(a, b), (x, y)| (a + x / n, b + y / n));
    let (sxx, sxy) = pts.iter().fold((0.0, 0.0), |(a, b), (x, y)| (a + (x - mx) * (x - mx), b + (x - mx) * (y - my)));
    if sxx <= 0.0 {
        return None;
    }
    let b = sxy / sxx;
    Some((my - b * mx, b))
}

/// Estimates the noise floor of `ir` (the response from its onset: trim it first) and the point where the
/// decay meets it, by Lundeby et al.'s iteration (Acustica 81, 1995):
///
/// 1. square and average in 10 ms intervals; 2. take the noise from the last 10%; 3. fit a line from the peak
///    interval down to 10 dB above the noise; 4. its crossing with the noise is the first crossing point;
/// 5. re-average with intervals giving 5 per 10 dB of that decay; then repeat up to 5 times: 6. noise from
///    where the line lies 10 dB below the noise (at least the last 10%); 7. fit the late decay from 10 dB above
///    the noise over 20 dB upward (or up to the peak when there is less); 8. a new crossing point; until it
///    moves by less than one interval.
///
/// The tail compensation is the late line's energy after the crossing, summed to infinity (Lundeby et al.'s
/// correction for the truncation). A response without a noise floor (a noise-free decay) gets a crossing at
/// or near its end and a compensation from the decay's own last part. Allocates.
///
/// # Errors
/// [`AnalysisError::Empty`], [`AnalysisError::NotFinite`], [`AnalysisError::Silent`],
/// [`AnalysisError::InvalidSampleRate`]; [`AnalysisError::TooShort`] when there are fewer than two
/// intervals to fit; [`AnalysisError::NotDecaying`] when a fitted line does not fall.
pub fn lundeby<T: Copy + Into<f64>>(ir: &[T], sample_rate_hz: f64) -> Result<NoiseFloor, AnalysisError> {
    check_rate(sample_rate_hz)?;
    let h = super::decay::to_f64(ir)?;
    let e: Vec<f64> = h.iter().map(|v| v * v).collect();
    let len = e.len();
    let fs = sample_rate_hz;
    let peak_sq = e.iter().fold(0.0f64, |m, &v| m.max(v));
    let tail_mean = |from: usize| {
        let from = from.min(len - (len / 10).max(1));
        e[from..].iter().sum::<f64>() / (len - from) as f64
    };
    let too_short =
        || AnalysisError::TooShort { needed_frames: 2 * (FIRST_INTERVAL_S * fs).ceil() as usize, frames: len };

    // Steps 1 to 4.
    let mut interval = ((FIRST_INTERVAL_S * fs).round() as usize).max(1);
    let mut noise = tail_mean(len);
    let blocks = block_means(&e, interval);
    let peak_block = blocks.iter().enumerate().fold(0, |m, (i, b)| if b.1 > blocks[m].1 { i } else { m });
    let stop_db = db(noise) + FIRST_FIT_ABOVE_NOISE_DB;
    let fit: Vec<(f64, f64)> = blocks[peak_block..]
        .iter()
        .take_while(|b| db(b.1) > stop_db)
        .filter(|b| b.1 > 0.0)
        .map(|&(t, m)| (t, db(m)))
        .collect();
    let (mut a, mut b) = line(&fit).ok_or_else(too_short)?;
    if b >= 0.0 {
        return Err(AnalysisError::NotDecaying { slope_db_per_s: b * fs });
    }
    let crossing = |a: f64, b: f64, noise: f64| ((db(noise) - a) / b).clamp(0.0, len as f64);
    let mut cross = crossing(a, b, noise);

    // Steps 5 to 8.
    let mut iterations = 0;
    let per_sample_10db = 10.0 / -b;
    interval = ((per_sample_10db / INTERVALS_PER_10_DB).round() as usize).clamp(1, (len / 4).max(1));
    for _ in 0..MAX_ITERATIONS {
        iterations += 1;
        let blocks = block_means(&e, interval);
        let noise_from = cross + NOISE_START_BELOW_DB / -b;
        noise = tail_mean(noise_from.min(len as f64) as usize);
        let lo_db = db(noise) + LATE_FIT_ABOVE_NOISE_DB;
        let hi_db = lo_db + LATE_FIT_SPAN_DB;
        // The late range: from the last interval at or above hi_db (or the peak) to the first below lo_db.
        let peak_block = blocks.iter().enumerate().fold(0, |m, (i, x)| if x.1 > blocks[m].1 { i } else { m });
        let end = peak_block + blocks[peak_block..].iter().position(|x| db(x.1) < lo_db).unwrap_or(blocks.len());
        let start =
            blocks[peak_block..end].iter().rposition(|x| db(x.1) >= hi_db).map_or(peak_block, |i| peak_block + i);
        let pts: Vec<(f64, f64)> = blocks[start..end].iter().filter(|x| x.1 > 0.0).map(|&(t, m)| (t, db(m))).collect();
        let Some((na, nb)) = line(&pts) else { break };
        if nb >= 0.0 {
            break;
        }
        (a, b) = (na, nb);
        let next = crossing(a, b, noise);
        let moved = (next - cross).abs();
        cross = next;
        if moved < interval as f64 {
            break;
        }
    }
    let crossing_frames = cross.round() as usize;
    let crossing_mean_square = 10f64.powf((a + b * crossing_frames as f64) / 10.0);
    // Per-sample energy ratio of the late line, q = 10^(b / 10); sum_{n >= 0} q^n = 1 / (1 - q).
    let q = 10f64.powf(b / 10.0);
    Ok(NoiseFloor {
        noise_mean_square: noise,
        level_db: db(noise / peak_sq),
        crossing_frames,
        late_slope_db_per_s: b * fs,
        crossing_mean_square,
        compensation: crossing_mean_square / (1.0 - q),
        iterations,
    })
}

/// The Schroeder energy decay curve of `ir` (from its onset) truncated at the noise floor's crossing point
/// with the tail compensation added, and continued past the crossing by the late decay line, as *linear*
/// energies (element 0 is the total). Allocates.
///
/// E[n] = sum_{n <= k < c} h[k]^2 + C for n < c, and C q^(n - c) from the crossing c on, q the late line's
/// per-sample energy ratio.
pub(crate) fn compensated_energy(h: &[f64], floor: &NoiseFloor, sample_rate_hz: f64) -> Vec<f64> {
    let c = floor.crossing_frames.min(h.len());
    let q = 10f64.powf(floor.late_slope_db_per_s / sample_rate_hz / 10.0);
    let mut e = vec![0.0; h.len()];
    let mut acc = floor.compensation;
    for n in (0..h.len()).rev() {
        if n >= c {
            e[n] = floor.compensation * q.powi((n - c) as i32);
        } else {
            acc += h[n] * h[n];
            e[n] = acc;
        }
    }
    e
}
