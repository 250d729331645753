//! The spread reset ([`Command::Reset`](crate::Command::Reset)): the wet signal fades out, the engine's
//! state is zeroed a slice per block boundary, then the wet signal fades back in. Runs on the audio thread;
//! no boundary zeroes more than [`SWEEP_SAMPLES`].

use crate::level::fdl::sweep;
use crate::level::LevelSlot;
use crate::ring::TimeRing;

/// Samples zeroed per block boundary while a reset sweeps (256 KiB: tens of microseconds).
pub(crate) const SWEEP_SAMPLES: usize = 65_536;

/// A control reset in progress.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum ResetPhase {
    /// The wet envelope fades to 0.
    FadeOut,
    /// State is zeroed a slice per block: item (input ring, output ring, pre-delay ring, level) and
    /// position in it.
    Sweep { item: usize, pos: usize },
}

/// Where a reset sweep stands after one call.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub(crate) enum SweepStep {
    /// The item has more to zero from this position.
    More(usize),
    /// The item is zero; go on with the next.
    Done,
    /// Every item is zero.
    End,
}

/// Everything a sweep zeroes, in sweep order: input rings, the accumulator rings of both IR slots, the
/// pre-delay rings, then the levels.
pub(crate) struct SweepItems<'a> {
    pub(crate) inputs: &'a mut [TimeRing],
    pub(crate) acc: &'a mut [Vec<TimeRing>; 2],
    pub(crate) predelay: &'a mut [TimeRing],
    pub(crate) levels: &'a mut [LevelSlot],
}

impl SweepItems<'_> {
    /// Zeroes up to `budget` samples of item `item` from `pos`.
    pub(crate) fn sweep(self, item: usize, pos: usize, budget: usize) -> SweepStep {
        let step = |next: Option<usize>| next.map_or(SweepStep::Done, SweepStep::More);
        let ring = |r: &mut TimeRing| step(sweep(std::iter::once(r.samples_mut()), pos, budget));
        let mut k = item;
        if k < self.inputs.len() {
            return ring(&mut self.inputs[k]);
        }
        k -= self.inputs.len();
        for set in self.acc.iter_mut() {
            if k < set.len() {
                return ring(&mut set[k]);
            }
            k -= set.len();
        }
        if k < self.predelay.len() {
            return ring(&mut self.predelay[k]);
        }
        k -= self.predelay.len();
        match self.levels.get_mut(k) {
            Some(level) => step(level.sweep(pos, budget)),
            None => SweepStep::End,
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn a_sweep_walks_every_item_in_slices_then_ends() {
        let mut inputs = vec![TimeRing::new(10)];
        let mut acc = [vec![TimeRing::new(5)], vec![TimeRing::new(5)]];
        let mut predelay = vec![];
        for r in inputs.iter_mut().chain(acc.iter_mut().flatten()) {
            r.samples_mut().fill(1.0);
        }
        let len = inputs[0].len();
        let (mut item, mut pos, mut calls) = (0, 0, 0);
        loop {
            let items = SweepItems { inputs: &mut inputs, acc: &mut acc, predelay: &mut predelay, levels: &mut [] };
            calls += 1;
            match items.sweep(item, pos, 4) {
                SweepStep::More(p) => pos = p,
                SweepStep::Done => (item, pos) = (item + 1, 0),
                SweepStep::End => break,
            }
        }
        assert!(inputs.iter().chain(acc.iter().flatten()).all(|r| r.len() > 0));
        for r in inputs.iter_mut().chain(acc.iter_mut().flatten()) {
            assert!(r.samples_mut().iter().all(|&v| v == 0.0));
        }
        // The input ring takes ceil(len / 4) calls (its last one reports Done or More at the end).
        assert!(calls >= len.div_ceil(4) + 3, "{calls} calls for {len} + 2 rings");
    }
}
