//! The distribution of the engine callback's wall-clock time, kept in atomics by the audio thread and
//! read as percentiles off it.
//!
//! A log-linear histogram: exact counts below 8 ns, then 8 buckets per octave (each bucket 1/8 of an
//! octave wide, so a percentile read as its bucket's upper edge is at most 12.5% high) up to 2^40 ns.
//! Recording is one `fetch_add` and one `fetch_max`: no allocation, lock or wait.

use std::sync::atomic::{AtomicU64, Ordering::Relaxed};

/// Buckets per octave (a power of two).
const SUB: u64 = 8;
const SUB_BITS: u32 = SUB.trailing_zeros();
/// Octaves above the exact range: up to 2^(SUB_BITS + OCTAVES) ns, about 18 minutes.
const OCTAVES: usize = 38;
const BUCKETS: usize = SUB as usize * (OCTAVES + 1);

/// Callback times in nanoseconds; see the module docs.
#[derive(Debug)]
pub(crate) struct TimeHistogram {
    counts: [AtomicU64; BUCKETS],
    max_ns: AtomicU64,
}

/// Percentiles of the engine callback's wall-clock time, microseconds, from a log-linear histogram of 8
/// buckets per octave (each percentile the upper edge of its bucket, at most 12.5% high; `max` exact).
#[derive(Debug, Clone, Copy, PartialEq, Default)]
pub struct CallbackTimes {
    /// Callbacks timed.
    pub count: u64,
    /// Median.
    pub p50_us: f64,
    /// 99th percentile.
    pub p99_us: f64,
    /// 99.9th percentile.
    pub p999_us: f64,
    /// The slowest callback.
    pub max_us: f64,
}

fn bucket(ns: u64) -> usize {
    if ns < SUB {
        return ns as usize;
    }
    let octave = 63 - ns.leading_zeros(); // >= SUB_BITS
    let shift = octave - SUB_BITS;
    let sub = (ns >> shift) & (SUB - 1);
    let index = (u64::from(shift) + 1) * SUB + sub;
    (index as usize).min(BUCKETS - 1)
}

/// The largest value that falls in bucket `index`.
fn upper_edge(index: usize) -> u64 {
    let index = index as u64;
    if index < SUB {
        return index;
    }
    let shift = index / SUB - 1;
    let sub = index % SUB;
    ((SUB + sub + 1) << shift) - 1
}

impl TimeHistogram {
    pub fn new() -> Self {
        Self { counts: std::array::from_fn(|_| AtomicU64::new(0)), max_ns: AtomicU64::new(0) }
    }

    /// Counts one callback of `ns` nanoseconds. Wait-free.
    #[inline]
    pub fn record(&self, ns: u64) {
        self.counts[bucket(ns)].fetch_add(1, Relaxed);
        self.max_ns.fetch_max(ns, Relaxed);
    }

    /// The percentiles so far. Allocates nothing; not for the audio thread (it reads every bucket).
    pub fn snapshot(&self) -> CallbackTimes {
        let counts: [u64; BUCKETS] = std::array::from_fn(|i| self.counts[i].load(Relaxed));
        let total: u64 = counts.iter().sum();
        if total == 0 {
            return CallbackTimes::default();
        }
        let max_ns = self.max_ns.load(Relaxed);
        let at = |q: f64| {
            // The smallest bucket whose cumulative count reaches q of the total.
            let rank = ((q * total as f64).ceil() as u64).clamp(1, total);
            let mut seen = 0;
            for (i, &c) in counts.iter().enumerate() {
                seen += c;
                if seen >= rank {
                    return upper_edge(i).min(max_ns) as f64 * 1e-3;
                }
            }
            max_ns as f64 * 1e-3
        };
        CallbackTimes {
            count: total,
            p50_us: at(0.5),
            p99_us: at(0.99),
            p999_us: at(0.999),
            max_us: max_ns as f64 * 1e-3,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn buckets_are_contiguous_and_an_eighth_of_an_octave_wide() {
        let mut last = 0;
        for ns in [0u64, 1, 7, 8, 9, 15, 16, 17, 100, 1000, 12_345, 1 << 20, (1 << 20) + 1, 1 << 39] {
            let i = bucket(ns);
            assert!(i >= last, "bucket order at {ns}");
            last = i;
            assert!(upper_edge(i) >= ns, "{ns} above its bucket's edge {}", upper_edge(i));
            if i > 0 {
                assert!(upper_edge(i - 1) < ns, "{ns} belongs in an earlier bucket");
            }
            if ns >= SUB {
                assert!(upper_edge(i) as f64 <= ns as f64 * 1.125 + 1.0, "{ns}: edge {}", upper_edge(i));
            }
        }
        for i in 1..BUCKETS - 1 {
            assert_eq!(bucket(upper_edge(i)), i);
            assert_eq!(bucket(upper_edge(i) + 1), i + 1);
        }
    }

    #[test]
    fn percentiles_of_a_known_distribution() {
        let h = TimeHistogram::new();
        // 1000 callbacks: 990 of 10 us, 9 of 200 us, 1 of 5 ms.
        for _ in 0..990 {
            h.record(10_000);
        }
        for _ in 0..9 {
            h.record(200_000);
        }
        h.record(5_000_000);
        let t = h.snapshot();
        assert_eq!(t.count, 1000);
        assert!((10.0..=11.25).contains(&t.p50_us), "{t:?}");
        assert!((10.0..=11.25).contains(&t.p99_us), "{t:?}");
        assert!((200.0..=225.0).contains(&t.p999_us), "{t:?}");
        assert_eq!(t.max_us, 5000.0);
    }
}
