//! The engine's two IR slots and the swap between them: pick-up of a prepared IR, the raised-cosine
//! crossfade (see [`crate::control`]), the flip to the new IR, and the hand-back of the old one to the
//! control side once no work in flight reads it. Runs on the audio thread, at block boundaries.

use std::ptr::NonNull;
use std::sync::atomic::Ordering;

use ringbuf::traits::{Consumer, Producer};

use crate::control::wire::{EngineEnds, Event, FadeState, StatusCells, SwapReport};
use crate::level::fdl::SlotMask;
use crate::level::LevelSlot;
use crate::prepared::{IrSet, PreparedIr};

/// A swap in progress, in this engine's frame coordinates (`emit` frames).
#[derive(Debug, Clone, Copy)]
pub(crate) struct SwapRun {
    pub(crate) old: usize,
    pub(crate) new: usize,
    pub(crate) picked: i64,
    pub(crate) start: i64,
    pub(crate) end: i64,
    /// The new IR is the primary one (the fade is over).
    pub(crate) flipped: bool,
    /// Last frame (exclusive) any old-IR result was delivered to.
    pub(crate) old_until: i64,
}

impl SwapRun {
    /// Weight of the new IR at frame `f`: the raised cosine of [`crate::control`].
    pub(crate) fn weight(&self, f: i64) -> f32 {
        if f < self.start {
            0.0
        } else if f >= self.end {
            1.0
        } else {
            let t = (f - self.start) as f64 / (self.end - self.start) as f64;
            (0.5 - 0.5 * (std::f64::consts::PI * t).cos()) as f32
        }
    }

    /// Moves every frame number by `-shift` (a reset restarts the frame grid).
    pub(crate) fn shift(&mut self, shift: i64) {
        self.picked -= shift;
        self.start -= shift;
        self.end -= shift;
        self.old_until -= shift;
    }
}

/// An IR set the engine owns, held by pointer. Worker jobs read its spectra through raw pointers while
/// the engine moves its own values around (picking a swap up, retiring the old set); a `Box` would assert
/// unique access on every move, which such readers must not overlap. A `NonNull` is a plain pointer: moving
/// it asserts nothing, and the set stays where it was allocated until it goes back into a `Box` to leave
/// the engine ([`into_box`](Self::into_box)) or be dropped.
#[derive(Debug)]
pub(crate) struct IrPtr(NonNull<IrSet>);

// SAFETY: an `IrPtr` owns its `IrSet` (plain vectors of floats, `Send`) exactly as a `Box` would; it is
// moved between threads only with the engine, and the engine reads the set only through `get`.
unsafe impl Send for IrPtr {}

impl IrPtr {
    pub(crate) fn new(set: Box<IrSet>) -> Self {
        Self(NonNull::from(Box::leak(set)))
    }

    /// The set, for reading (the engine's levels, and worker jobs through raw pointers derived from it).
    pub(crate) fn get(&self) -> &IrSet {
        // SAFETY: the pointer came from `Box::leak` in `new` and is freed only by `into_box` or `drop`,
        // which take `self`; nothing writes the set while the engine holds it.
        unsafe { self.0.as_ref() }
    }

    /// The set back in a `Box`, to hand to the control side. Its address does not change.
    pub(crate) fn into_box(self) -> Box<IrSet> {
        let ptr = self.0;
        std::mem::forget(self);
        // SAFETY: `ptr` came from `Box::leak` in `new`; `forget` above keeps `drop` from freeing it too.
        unsafe { Box::from_raw(ptr.as_ptr()) }
    }
}

impl Drop for IrPtr {
    fn drop(&mut self) {
        // SAFETY: as in `into_box`: the pointer came from `Box::leak` and is freed once, here.
        drop(unsafe { Box::from_raw(self.0.as_ptr()) });
    }
}

/// The two IR slots: `active` is heard when no swap runs.
#[derive(Debug)]
pub(crate) struct IrSlots {
    pub(crate) irs: [Option<IrPtr>; 2],
    pub(crate) active: usize,
    pub(crate) run: Option<SwapRun>,
}

impl IrSlots {
    /// The slots with `first` active.
    pub(crate) fn new(first: IrSet) -> Self {
        Self { irs: [Some(IrPtr::new(Box::new(first))), None], active: 0, run: None }
    }

    /// The IR slot heard alone when no swap runs, and the one fading out while a swap runs.
    pub(crate) fn first_heard(&self) -> usize {
        self.run.map_or(self.active, |s| s.old)
    }

    /// The IR slots a level release whose result starts at frame `start` and covers `n` frames must
    /// compute, noting how far the old IR's results reach.
    pub(crate) fn release_mask(&mut self, start: i64, n: usize) -> SlotMask {
        match &mut self.run {
            None => 1 << self.active,
            Some(s) if start < s.end => {
                s.old_until = s.old_until.max(start + n as i64);
                (1 << s.new) | (1 << s.old)
            }
            Some(s) => 1 << s.new,
        }
    }

    /// Moves a swap along at the boundary whose next output frame is `emit`: flip to the new IR when the
    /// crossfade ends, hand the old IR back once no work in flight reads it, finish when its accumulators
    /// have drained; or, when `may_start` and no swap runs, pick up a queued swap whose crossfade starts
    /// at `fade_from` (where no result computed before this boundary reaches). `out_frame` maps engine
    /// frames to output frames for the reports.
    pub(crate) fn advance(
        &mut self,
        emit: i64,
        levels: &[LevelSlot],
        ends: &mut EngineEnds,
        status: &StatusCells,
        (may_start, fade_from): (bool, i64),
        out_frame: impl Fn(i64) -> u64,
    ) {
        if let Some(mut s) = self.run {
            if !s.flipped && emit >= s.end {
                s.flipped = true;
                self.active = s.new;
                status.swaps_completed.fetch_add(1, Ordering::AcqRel);
            }
            if s.flipped && self.irs[s.old].is_some() && !levels.iter().any(|l| l.holds(s.old)) {
                if let Some(set) = self.irs[s.old].take().map(IrPtr::into_box) {
                    let new_id = self.irs[s.new].as_ref().map_or(0, |n| n.get().id);
                    let report = SwapReport {
                        new_id,
                        old_id: set.id,
                        picked_up: out_frame(s.picked),
                        fade_start: out_frame(s.start),
                        fade_end: out_frame(s.end),
                    };
                    if let Err(Event::Retired { ir, .. }) =
                        ends.events.try_push(Event::Retired { ir: PreparedIr { set }, report })
                    {
                        self.irs[s.old] = Some(IrPtr::new(ir.set)); // the queue is full: try again next boundary
                    }
                }
            }
            let state = if self.irs[s.old].is_none() && emit >= s.old_until {
                self.run = None;
                FadeState::Steady
            } else {
                self.run = Some(s);
                if s.flipped {
                    FadeState::Retiring
                } else if emit < s.start {
                    FadeState::Pending
                } else {
                    FadeState::Crossfading
                }
            };
            status.fade_state.store(state.to_u8(), Ordering::Release);
            if self.run.is_some() {
                return;
            }
        }
        if !may_start {
            return;
        }
        let Some(request) = ends.swaps.try_pop() else { return };
        let new = 1 - self.active;
        let id = request.set.id;
        self.irs[new] = Some(IrPtr::new(request.set));
        let start = fade_from.max(emit);
        let end = start + request.fade_frames as i64;
        self.run = Some(SwapRun { old: self.active, new, picked: emit, start, end, flipped: false, old_until: emit });
        status.fade_start.store(out_frame(start), Ordering::Release);
        status.fade_end.store(out_frame(end), Ordering::Release);
        status.ir_id.store(id, Ordering::Release);
        let state = if emit < start { FadeState::Pending } else { FadeState::Crossfading };
        status.fade_state.store(state.to_u8(), Ordering::Release);
    }

    /// Bytes of the largest IR held (one IR; a swap holds a second one while it runs).
    pub(crate) fn memory_bytes(&self) -> usize {
        self.irs.iter().flatten().map(|s| s.get().memory_bytes()).max().unwrap_or(0)
    }
}
