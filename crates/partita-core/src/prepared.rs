//! Preparing an impulse response for one engine: cutting it into the engine's partitions and transforming
//! each one ([`PreparedIr`]). Runs on the control thread (or while an engine is built); allocates. The
//! audio thread only ever receives the finished spectra, by pointer.

use std::sync::atomic::{AtomicU64, Ordering};

use realfft::RealFftPlanner;

use crate::error::ControlError;
use crate::head::head_taps;
use crate::ir::ImpulseResponse;
use crate::level::fdl::{LevelIr, PrepareTimes};

/// One IR level's spectra recipe: which level, and which IR channels of its routing group.
#[derive(Debug, Clone)]
pub(crate) struct LevelSpec {
    pub(crate) n: usize,
    pub(crate) partitions: usize,
    pub(crate) offset: usize,
    pub(crate) channels: Vec<usize>,
}

/// Everything needed to prepare an IR for a given engine, off the audio thread: the engine's level slots
/// (which IR channels each one transforms), its head and its limits.
#[derive(Debug)]
pub(crate) struct SpectraRecipe {
    pub(crate) ir_channels: usize,
    pub(crate) covered_frames: usize,
    pub(crate) rate: u32,
    pub(crate) head_frames: usize,
    /// IR channel of each head path.
    pub(crate) head_channels: Vec<usize>,
    pub(crate) levels: Vec<LevelSpec>,
    pub(crate) max_predelay_frames: usize,
    next_id: AtomicU64,
}

impl SpectraRecipe {
    pub(crate) fn new(
        ir_channels: usize,
        covered_frames: usize,
        rate: u32,
        head: (usize, Vec<usize>),
        levels: Vec<LevelSpec>,
        max_predelay_frames: usize,
    ) -> Self {
        Self {
            ir_channels,
            covered_frames,
            rate,
            head_frames: head.0,
            head_channels: head.1,
            levels,
            max_predelay_frames,
            next_id: AtomicU64::new(0),
        }
    }

    /// Checks `ir` against the engine and transforms it. Allocates; runs on the caller's thread.
    pub(crate) fn prepare(&self, ir: &ImpulseResponse) -> Result<IrSet, ControlError> {
        self.prepare_with(ir, &mut RealFftPlanner::<f32>::new())
    }

    /// [`prepare`](Self::prepare) with the caller's FFT planner (whose twiddle tables it reuses).
    pub(crate) fn prepare_with(
        &self,
        ir: &ImpulseResponse,
        planner: &mut RealFftPlanner<f32>,
    ) -> Result<IrSet, ControlError> {
        self.prepare_timed(ir, planner, None)
    }

    /// [`prepare_with`](Self::prepare_with), recording per level slot where the time went when `times`
    /// is given (one entry per slot, in slot order).
    pub(crate) fn prepare_timed(
        &self,
        ir: &ImpulseResponse,
        planner: &mut RealFftPlanner<f32>,
        mut times: Option<&mut Vec<PrepareSplit>>,
    ) -> Result<IrSet, ControlError> {
        if ir.channels() != self.ir_channels {
            return Err(ControlError::RoutingMismatch { expected: self.ir_channels, got: ir.channels() });
        }
        if ir.sample_rate_hz() != self.rate {
            return Err(ControlError::RateMismatch { expected: self.rate, got: ir.sample_rate_hz() });
        }
        if ir.frames() > self.covered_frames {
            return Err(ControlError::IrTooLong { ir_frames: ir.frames(), max_frames: self.covered_frames });
        }
        let levels = self
            .levels
            .iter()
            .map(|spec| {
                let taps: Vec<&[f32]> = spec.channels.iter().map(|&c| ir.channel(c)).collect();
                let mut t = PrepareTimes::default();
                let level = LevelIr::new(
                    &taps,
                    (spec.n, spec.partitions, spec.offset),
                    planner,
                    times.is_some().then_some(&mut t),
                );
                if let Some(times) = times.as_deref_mut() {
                    times.push(PrepareSplit {
                        block_frames: spec.n,
                        partitions: spec.partitions,
                        ir_channels: spec.channels.len(),
                        plan_s: t.plan_s,
                        alloc_s: t.alloc_s,
                        fft_s: t.fft_s,
                    });
                }
                level
            })
            .collect();
        let head = head_taps(
            self.head_frames,
            self.head_channels.iter().map(|&c| {
                let taps = ir.channel(c);
                taps[..self.head_frames.min(taps.len())].to_vec()
            }),
        );
        Ok(IrSet { levels, head, frames: ir.frames(), id: self.next_id.fetch_add(1, Ordering::Relaxed) })
    }
}

/// An IR transformed for one engine: the spectra of every level and the head taps.
pub(crate) struct IrSet {
    /// Per engine level slot (level x routing group), in the engine's order.
    pub(crate) levels: Vec<LevelIr>,
    /// Reversed head taps per head path (empty without a head).
    pub(crate) head: Vec<Vec<f32>>,
    pub(crate) frames: usize,
    pub(crate) id: u64,
}

impl std::fmt::Debug for IrSet {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("IrSet").field("id", &self.id).field("frames", &self.frames).finish_non_exhaustive()
    }
}

impl IrSet {
    pub(crate) fn memory_bytes(&self) -> usize {
        self.levels.iter().map(LevelIr::memory_bytes).sum::<usize>() + 4 * self.head.iter().map(Vec::len).sum::<usize>()
    }
}

/// An impulse response prepared for one engine ([`Control::prepare`](crate::Control::prepare)): partitioned, transformed and
/// allocated, ready to be adopted by the audio thread with a pointer hand-off.
pub struct PreparedIr {
    pub(crate) set: Box<IrSet>,
}

impl std::fmt::Debug for PreparedIr {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("PreparedIr")
            .field("id", &self.set.id)
            .field("frames", &self.set.frames)
            .field("memory_bytes", &self.memory_bytes())
            .finish()
    }
}

impl PreparedIr {
    /// A number unique among the IRs prepared for this engine (the IR it was built with is 0).
    pub fn id(&self) -> u64 {
        self.set.id
    }

    /// Taps per channel.
    pub fn frames(&self) -> usize {
        self.set.frames
    }

    /// Bytes of spectra and taps it holds.
    pub fn memory_bytes(&self) -> usize {
        self.set.memory_bytes()
    }
}

/// Where the time of preparing one level slot went ([`Control::prepare_timed`](crate::Control), feature
/// `test-hooks`): what the control bench reports to attribute a slow preparation.
#[derive(Debug, Clone, Copy, PartialEq)]
pub struct PrepareSplit {
    /// The slot's level block N.
    pub block_frames: usize,
    /// Its partitions P.
    pub partitions: usize,
    /// IR channels it transforms.
    pub ir_channels: usize,
    /// Seconds of FFT planning and transform buffers.
    pub plan_s: f64,
    /// Seconds of spectra allocation (with one write per page).
    pub alloc_s: f64,
    /// Seconds of partition copies, forward FFTs and stores.
    pub fft_s: f64,
}
