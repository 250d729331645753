//! The C ABI driven through its `extern "C"` functions: a sequence of calls chosen by the input, with
//! arbitrary lengths, channel counts, `struct_size` values, option fields, NULLs and call orders.
//!
//! What the contract (`crates/partita-ffi/src/lib.rs`) allows, and so what this target does: any pointer
//! may be NULL; a `struct_size` may be any value as long as the memory behind the struct is at least that
//! many bytes (here: a buffer of max(struct_size, sizeof) bytes, struct_size up to 1 KiB); buffers hold
//! the lengths passed (here: frames up to [`MAX_CALL_FRAMES`], IR lengths up to [`MAX_IR_FRAMES`]); plans
//! are made for at most [`MAX_PLANNED_BLOCKS`] blocks or for lengths past the limits (`plannable`);
//! destroying twice through the same variable is allowed (`PARTITA_ERR_NULL`), so is destroying an
//! engine before or after its control and using the control after its engine is gone; a prepared IR is
//! swapped only into the control that made it. Undefined behaviour the target never does: using a copy of
//! a freed handle, buffers shorter than the lengths given, one handle on two threads at once.
//!
//! Contract checked: every return code is one of the documented codes (never `PARTITA_ERR_PANIC`); a
//! successful create writes a non-NULL handle, a failed one leaves `*out` NULL; a failed non-real-time call
//! leaves a non-empty message; `partita_error_name` returns a name for any code; figures read back are
//! within the limits; output is finite after a successful process call (non-finite input is replaced by
//! zero); after the last destroy nothing the calls allocated is left (LeakSanitizer under `scripts/fuzz`).

use std::ffi::CStr;
use std::ptr::{null, null_mut};

use partita_ffi::*;

use crate::input::Input;

/// The longest buffers this target passes to a process call, in frames.
pub const MAX_CALL_FRAMES: usize = 4096;
/// The longest IR buffers this target passes, in frames.
pub const MAX_IR_FRAMES: usize = 4096;
/// The most operations one input runs.
const MAX_OPS: usize = 64;

/// A struct buffer: at least `sizeof(T)` and `struct_size` bytes, 8-byte aligned, the struct at its start.
struct SizedStruct<T: Copy> {
    words: Vec<u64>,
    _t: std::marker::PhantomData<T>,
}

impl<T: Copy> SizedStruct<T> {
    fn new(value: T, struct_size: u32) -> Self {
        let bytes = std::mem::size_of::<T>().max(struct_size as usize).max(4);
        let mut words = vec![0u64; bytes.div_ceil(8)];
        // SAFETY: `words` is 8-aligned (every struct here has alignment <= 8) and at least size_of::<T>() bytes.
        unsafe { std::ptr::write(words.as_mut_ptr().cast::<T>(), value) };
        // Every option struct starts with a u32 struct_size.
        // SAFETY: the buffer holds at least 4 bytes at an aligned address.
        unsafe { std::ptr::write(words.as_mut_ptr().cast::<u32>(), struct_size) };
        Self { words, _t: std::marker::PhantomData }
    }

    fn ptr(&self) -> *const T {
        self.words.as_ptr().cast()
    }

    fn mut_ptr(&mut self) -> *mut T {
        self.words.as_mut_ptr().cast()
    }

    fn read(&self) -> T {
        // SAFETY: the buffer was made from a T and holds at least size_of::<T>() bytes.
        unsafe { std::ptr::read(self.ptr()) }
    }
}

/// A `struct_size`: usually the right one, sometimes too small, larger (a later version's struct), or wild.
fn struct_size<T>(input: &mut Input<'_>) -> u32 {
    let size = std::mem::size_of::<T>() as u32;
    match input.u8() % 8 {
        0 => 0,
        1 => size - 4,
        2 => size + 8 * u32::from(input.u8() % 16),
        3 => u32::from(input.u8()) * 4,
        _ => size,
    }
}

fn check_code(code: i32, what: &str) {
    assert!((PARTITA_OK..=PARTITA_ERR_PROCESS).contains(&code), "{what} returned {code}");
}

/// A non-real-time call's failure leaves a message.
fn check_message(code: i32, what: &str) {
    check_code(code, what);
    if code != PARTITA_OK {
        // SAFETY: the library returns a valid NUL-terminated string, live until the next call here.
        let message = unsafe { CStr::from_ptr(partita_last_error_message()) };
        assert!(!message.to_bytes().is_empty(), "{what} failed with {code} and no message");
    }
}

fn check_name(code: i32) {
    let name = partita_error_name(code);
    assert!(!name.is_null(), "no name for code {code}");
    // SAFETY: a static NUL-terminated string.
    let name = unsafe { CStr::from_ptr(name) }.to_str().expect("ASCII names");
    assert!(name.starts_with("PARTITA_"), "code {code} is named {name}");
}

/// IR buffers chosen by the input: channel count, length, rate, NULLs.
struct IrBuffers {
    channels: Vec<Vec<f32>>,
    table: Vec<*const f32>,
    table_null: bool,
    count: u32,
    frames: u64,
    rate: u32,
}

impl IrBuffers {
    fn new(input: &mut Input<'_>) -> Self {
        let count = u32::from(input.u8() % 7);
        let frames = match input.u8() % 4 {
            0 => 0,
            1 => 1 + usize::from(input.u8()),
            2 => 1 + (usize::from(input.u8()) << 4),
            _ => MAX_IR_FRAMES,
        };
        let rate = match input.u8() % 4 {
            0 => 0,
            1 => input.u32(),
            _ => 48_000,
        };
        let mut noise = partita_core::synth::Noise::new(u64::from(input.u8()));
        let flavour = input.u8();
        let channels: Vec<Vec<f32>> = (0..count)
            .map(|_| {
                let mut taps =
                    partita_core::synth::decaying_noise(frames, (frames as f64 / 4.0).max(1.0), noise.next_u64());
                if flavour == 1 && frames > 0 {
                    taps[frames / 2] = f32::NAN;
                }
                if flavour == 2 {
                    taps.iter_mut().for_each(|t| *t *= 1e30);
                }
                taps
            })
            .collect();
        let null_channel = input.u8();
        let table = channels
            .iter()
            .enumerate()
            .map(|(c, t)| if usize::from(null_channel) == c + 1 { null() } else { t.as_ptr() })
            .collect();
        Self { channels, table, table_null: flavour == 3, count, frames: frames as u64, rate }
    }

    fn ptr(&self) -> *const *const f32 {
        if self.table_null {
            null()
        } else {
            self.table.as_ptr()
        }
    }
}

/// The handles alive, each behind the variable the C caller would keep.
#[derive(Default)]
struct State {
    plan: Option<*mut PartitaPlan>,
    engine: *mut PartitaEngine,
    control: *mut PartitaControl,
    /// Which control made each prepared IR.
    prepared: Vec<(*mut PartitaPrepared, u32)>,
    control_id: u32,
    engine_channels: (u32, u32),
    max_frames: u32,
}

/// The C ABI on `data`: up to 64 calls, each chosen and filled in by the following bytes.
///
/// # Panics
/// When the contract (module docs) is broken.
pub fn c_abi(data: &[u8]) {
    let mut input = Input::new(data);
    let mut s = State::default();
    for _ in 0..MAX_OPS {
        if input.is_empty() {
            break;
        }
        step(&mut input, &mut s);
    }
    // Tear down in a chosen order; every destroy of a live handle succeeds.
    let control_first = input.flag();
    if control_first {
        destroy_control(&mut s);
    }
    if !s.engine.is_null() {
        // SAFETY: the variable holds a live engine.
        assert_eq!(unsafe { partita_engine_destroy(&mut s.engine) }, PARTITA_OK);
        assert!(s.engine.is_null());
    }
    destroy_control(&mut s);
    for (mut p, _) in s.prepared.drain(..) {
        // SAFETY: a live prepared IR.
        assert_eq!(unsafe { partita_prepared_destroy(&mut p) }, PARTITA_OK);
    }
    if let Some(mut p) = s.plan.take() {
        // SAFETY: a live plan.
        assert_eq!(unsafe { partita_plan_destroy(&mut p) }, PARTITA_OK);
    }
}

fn destroy_control(s: &mut State) {
    if !s.control.is_null() {
        // SAFETY: the variable holds a live control.
        assert_eq!(unsafe { partita_control_destroy(&mut s.control) }, PARTITA_OK);
        assert!(s.control.is_null());
    }
}

fn step(input: &mut Input<'_>, s: &mut State) {
    match input.u8() % 16 {
        0 => plan_create(input, s),
        1 => {
            let size = struct_size::<PartitaPlanInfo>(input);
            let mut info = SizedStruct::new(PartitaPlanInfo::default(), size);
            let plan = s.plan.unwrap_or(null_mut());
            // SAFETY: plan NULL or live; the info buffer holds max(size, sizeof) bytes.
            let code = unsafe { partita_plan_info(plan, info.mut_ptr()) };
            check_code(code, "partita_plan_info");
            if code == PARTITA_OK {
                let i = info.read();
                assert_eq!(i.struct_size, size, "plan_info changed struct_size");
                assert!(i.block_frames > 0 && i.covered_frames > 0);
                // A zero-latency plan for an IR no longer than one block is its direct-form head alone.
                assert!(
                    i.levels > 0 || i.latency_frames == 0,
                    "a plan without levels and latency {}",
                    i.latency_frames
                );
                assert!(i.worker_levels + i.sliced_levels <= i.levels);
                assert!(i.predicted_load_pct.is_finite() && i.predicted_heaviest_call_pct.is_finite());
            }
        }
        2 => {
            // Destroy through the variable (a second time gives PARTITA_ERR_NULL), or a NULL variable.
            let code = match s.plan.as_mut() {
                // SAFETY: the variable holds a live plan or NULL.
                Some(p) if input.flag() => unsafe { partita_plan_destroy(p) },
                // SAFETY: NULL is allowed.
                _ => unsafe { partita_plan_destroy(null_mut()) },
            };
            check_message(code, "partita_plan_destroy");
            if s.plan.is_some_and(|p| p.is_null()) {
                s.plan = None;
            }
        }
        3 => engine_create(input, s),
        4 => {
            let size = struct_size::<PartitaEngineInfo>(input);
            let mut info = SizedStruct::new(PartitaEngineInfo::default(), size);
            // SAFETY: engine NULL or live; the buffer holds max(size, sizeof) bytes.
            let code = unsafe { partita_engine_info(s.engine, info.mut_ptr()) };
            check_code(code, "partita_engine_info");
            if code == PARTITA_OK {
                let i = info.read();
                assert_eq!((i.inputs, i.outputs), s.engine_channels);
                assert!(i.inputs <= PARTITA_MAX_CHANNELS && i.outputs <= PARTITA_MAX_CHANNELS);
                assert!(i.block_frames > 0 && i.max_host_frames == s.max_frames && i.sample_rate_hz > 0);
            }
        }
        5 => {
            if !s.control.is_null() {
                return; // One control at a time: a second one would be a second variable for the test to track.
            }
            let mut out = null_mut();
            // SAFETY: engine NULL or live; out writable.
            let code = unsafe { partita_engine_take_control(s.engine, &mut out) };
            check_message(code, "partita_engine_take_control");
            if code == PARTITA_OK {
                assert!(!out.is_null());
                s.control = out;
                s.control_id += 1;
            } else {
                assert!(out.is_null());
            }
        }
        6 | 7 => process(input, s),
        8 => control_prepare(input, s),
        9 => {
            if let Some((mut p, _)) = s.prepared.pop() {
                // SAFETY: a live prepared IR; the second destroy through the same variable is allowed.
                assert_eq!(unsafe { partita_prepared_destroy(&mut p) }, PARTITA_OK);
                assert_eq!(unsafe { partita_prepared_destroy(&mut p) }, PARTITA_ERR_NULL);
            }
        }
        10 => {
            let fade = input.size_u32();
            let id = s.control_id;
            let Some(i) = s.prepared.iter().position(|&(_, made_by)| made_by == id) else {
                // SAFETY: control NULL or live; a NULL prepared IR variable is allowed.
                let code = unsafe { partita_control_swap(s.control, null_mut(), fade) };
                return check_message(code, "partita_control_swap");
            };
            if s.control.is_null() {
                return;
            }
            let (mut p, _) = s.prepared.remove(i);
            // SAFETY: a live control and a live prepared IR it made.
            let code = unsafe { partita_control_swap(s.control, &mut p, fade) };
            check_message(code, "partita_control_swap");
            if code == PARTITA_OK {
                assert!(p.is_null(), "a successful swap leaves the prepared IR with the caller");
            } else {
                assert!(!p.is_null());
                s.prepared.push((p, id));
            }
        }
        11 => {
            let command = i32::from(input.u8() % 9) - 1;
            let value = match input.u8() % 4 {
                0 => input.f64(),
                1 => f64::from(input.u8()),
                2 => -f64::from(input.u8()) / 4.0,
                _ => f64::from(input.u8()) / 64.0,
            };
            // SAFETY: control NULL or live.
            let code = unsafe { partita_control_send(s.control, command, value) };
            check_message(code, "partita_control_send");
        }
        12 => {
            let size = struct_size::<PartitaEvent>(input);
            let mut event = SizedStruct::new(PartitaEvent::default(), size);
            // SAFETY: control NULL or live; the buffer holds max(size, sizeof) bytes.
            let code = unsafe { partita_control_next_event(s.control, event.mut_ptr()) };
            check_code(code, "partita_control_next_event");
            if code == PARTITA_OK {
                let kind = event.read().kind;
                assert!((PARTITA_EVENT_NONE..=PARTITA_EVENT_UNKNOWN).contains(&kind), "event kind {kind}");
            }
        }
        13 => {
            let size = struct_size::<PartitaEngineStatus>(input);
            let mut status = SizedStruct::new(PartitaEngineStatus::default(), size);
            // SAFETY: control NULL or live; the buffer holds max(size, sizeof) bytes.
            let code = unsafe { partita_control_status(s.control, status.mut_ptr()) };
            check_code(code, "partita_control_status");
            if code == PARTITA_OK {
                let st = status.read();
                assert!(st.peak.is_finite() && st.peak >= 0.0, "status peak {}", st.peak);
                assert!((PARTITA_FADE_STEADY..=PARTITA_FADE_RETIRING).contains(&st.fade_state));
            }
        }
        14 => {
            if input.flag() {
                destroy_control(s);
                // SAFETY: the variable is NULL now: allowed, and refused.
                assert_eq!(unsafe { partita_control_destroy(&mut s.control) }, PARTITA_ERR_NULL);
            } else if !s.engine.is_null() {
                // SAFETY: a live engine, then the same (now NULL) variable.
                assert_eq!(unsafe { partita_engine_destroy(&mut s.engine) }, PARTITA_OK);
                assert_eq!(unsafe { partita_engine_destroy(&mut s.engine) }, PARTITA_ERR_NULL);
            }
        }
        _ => {
            let code = input.u32() as i32;
            check_name(code);
            check_name(i32::from(input.u8() % 16));
            assert_eq!(partita_abi_version(), PARTITA_ABI_VERSION);
        }
    }
}

fn plan_create(input: &mut Input<'_>, s: &mut State) {
    let size = struct_size::<PartitaPlanOptions>(input);
    let ir_frames = match input.u8() % 4 {
        0 => input.u64(),
        1 => u64::from(input.size_u32()),
        _ => u64::from(input.u8()) << (input.u8() % 16),
    };
    let block_frames = input.size_u32();
    let options = PartitaPlanOptions {
        struct_size: size,
        sample_rate_hz: input.pick(&[0, 48_000, 44_100, 1, 384_000]),
        ir_frames: plannable(ir_frames, block_frames),
        block_frames,
        latency_budget_frames: input.size_u32(),
        zero_latency: i32::from(input.u8() % 2),
        schedule: i32::from(input.u8() % 6) - 1,
        host_period_frames: input.size_u32(),
        offline: i32::from(input.u8() % 2),
        routing: i32::from(input.u8() % 8) - 1,
        matrix_inputs: u32::from(input.u8() % 5),
        matrix_outputs: u32::from(input.u8() % 5),
    };
    let options = SizedStruct::new(options, size);
    let null_options = input.u8() == 1;
    let mut out = null_mut();
    let options_ptr = if null_options { null() } else { options.ptr() };
    // SAFETY: options NULL or a buffer of max(struct_size, sizeof) bytes; out writable.
    let code = unsafe { partita_plan_create(options_ptr, &mut out) };
    check_message(code, "partita_plan_create");
    if code != PARTITA_OK {
        assert!(out.is_null(), "a failed plan_create wrote a handle");
        return;
    }
    assert!(!out.is_null());
    if let Some(mut old) = s.plan.replace(out) {
        // SAFETY: the plan this one replaces, live.
        assert_eq!(unsafe { partita_plan_destroy(&mut old) }, PARTITA_OK);
    }
}

/// The most engine blocks of IR this target plans (see `plannable`).
pub const MAX_PLANNED_BLOCKS: u64 = 1 << 12;

/// An IR length to plan: lengths past the planner's limits stay (they must be refused quickly), lengths
/// within them are folded to at most [`MAX_PLANNED_BLOCKS`] blocks. An automatic plan of a long IR is
/// allowed to take seconds (the ABI documents it), more under AddressSanitizer: a timeout here, not a
/// defect.
fn plannable(ir_frames: u64, block_frames: u32) -> u64 {
    let cap = MAX_PLANNED_BLOCKS * u64::from(block_frames.max(1));
    let limit = partita_core::Plan::MAX_COVERED_FRAMES as u64;
    if ir_frames > cap && ir_frames <= limit {
        ir_frames % cap
    } else {
        ir_frames
    }
}

fn engine_options(input: &mut Input<'_>) -> (PartitaEngineOptions, u32) {
    let size = struct_size::<PartitaEngineOptions>(input);
    let options = PartitaEngineOptions {
        struct_size: size,
        routing: i32::from(input.u8() % 8) - 1,
        matrix_inputs: u32::from(input.u8() % 5),
        matrix_outputs: u32::from(input.u8() % 5),
        max_host_frames: input.size_u32(),
        host_period_frames: input.size_u32(),
        offline: i32::from(input.u8() % 2),
        max_predelay_frames: input.size_u32(),
    };
    (options, size)
}

fn engine_create(input: &mut Input<'_>, s: &mut State) {
    let (options, size) = engine_options(input);
    let ir = IrBuffers::new(input);
    let use_plan = input.flag();
    let plan = if use_plan { s.plan.unwrap_or(null_mut()) } else { null_mut() };
    let options_buf = SizedStruct::new(options, size);
    let mut out = null_mut();
    // SAFETY: plan NULL or live; the IR table holds `count` pointers (NULL or to `frames` floats) or is
    // NULL; options a buffer of max(struct_size, sizeof) bytes; out writable.
    let code =
        unsafe { partita_engine_create(plan, ir.ptr(), ir.count, ir.frames, ir.rate, options_buf.ptr(), &mut out) };
    check_message(code, "partita_engine_create");
    drop(ir.channels);
    if code != PARTITA_OK {
        assert!(out.is_null(), "a failed engine_create wrote a handle");
        return;
    }
    assert!(!out.is_null());
    if !s.engine.is_null() {
        // SAFETY: the engine this one replaces, live.
        assert_eq!(unsafe { partita_engine_destroy(&mut s.engine) }, PARTITA_OK);
    }
    s.engine = out;
    let mut info = SizedStruct::new(PartitaEngineInfo::default(), std::mem::size_of::<PartitaEngineInfo>() as u32);
    // SAFETY: a live engine and a full-size info struct.
    assert_eq!(unsafe { partita_engine_info(s.engine, info.mut_ptr()) }, PARTITA_OK);
    let i = info.read();
    assert!(i.inputs >= 1 && i.outputs >= 1);
    assert_eq!(i.max_host_frames, options.max_host_frames);
    s.engine_channels = (i.inputs, i.outputs);
    s.max_frames = i.max_host_frames;
}

fn control_prepare(input: &mut Input<'_>, s: &mut State) {
    let ir = IrBuffers::new(input);
    let mut out = null_mut();
    // SAFETY: control NULL or live; IR table as in engine_create; out writable.
    let code = unsafe { partita_control_prepare(s.control, ir.ptr(), ir.count, ir.frames, ir.rate, &mut out) };
    check_message(code, "partita_control_prepare");
    if code == PARTITA_OK {
        assert!(!out.is_null());
        s.prepared.push((out, s.control_id));
    } else {
        assert!(out.is_null());
    }
}

fn process(input: &mut Input<'_>, s: &mut State) {
    let interleaved = input.flag();
    let (ins, outs) = match input.u8() % 4 {
        0 => (u32::from(input.u8() % 70), u32::from(input.u8() % 70)),
        _ => s.engine_channels,
    };
    let frames = match input.u8() % 4 {
        0 => input.size_u32().min(MAX_CALL_FRAMES as u32),
        1 => s.max_frames.min(MAX_CALL_FRAMES as u32),
        _ => u32::from(input.u8()),
    };
    let nonfinite = input.u8();
    let mut noise = partita_core::synth::Noise::new(u64::from(nonfinite));
    let n = frames as usize;
    let mut input_buffers: Vec<Vec<f32>> = (0..ins).map(|_| noise.vec(n)).collect();
    if let Some(first) = input_buffers.first_mut().filter(|b| !b.is_empty()) {
        match nonfinite % 4 {
            0 => first[0] = f32::NAN,
            1 => first[n / 2] = f32::INFINITY,
            2 => first[n - 1] = 1e30,
            _ => {}
        }
    }
    let mut output_buffers: Vec<Vec<f32>> = (0..outs).map(|_| vec![f32::NAN; n]).collect();
    let code = if interleaved {
        let x: Vec<f32> = (0..n).flat_map(|f| input_buffers.iter().map(move |c| c[f])).collect();
        let mut y = vec![f32::NAN; n * outs as usize];
        let (xp, yp) = match input.u8() {
            1 => (null(), y.as_mut_ptr()),
            2 => (x.as_ptr(), null_mut()),
            _ => (x.as_ptr(), y.as_mut_ptr()),
        };
        // SAFETY: engine NULL or live; x holds frames x ins floats and y frames x outs (or NULL).
        let code = unsafe { partita_engine_process_interleaved(s.engine, xp, ins, yp, outs, frames) };
        if code == PARTITA_OK {
            assert!(y.iter().all(|v| v.is_finite()), "non-finite interleaved output");
        }
        code
    } else {
        let null_at = usize::from(input.u8());
        let mut x: Vec<*const f32> = input_buffers.iter().map(|c| c.as_ptr()).collect();
        let mut y: Vec<*mut f32> = output_buffers.iter_mut().map(|c| c.as_mut_ptr()).collect();
        if null_at > 0 && null_at <= x.len() {
            x[null_at - 1] = null();
        } else if null_at > 128 && null_at - 128 <= y.len() {
            y[null_at - 129] = null_mut();
        }
        let (xp, yp) = match input.u8() {
            1 => (null(), y.as_ptr()),
            2 => (x.as_ptr(), null()),
            _ => (x.as_ptr(), y.as_ptr()),
        };
        // SAFETY: engine NULL or live; the tables hold `ins` and `outs` pointers, each NULL or to `frames`
        // floats, distinct from each other.
        let code = unsafe { partita_engine_process(s.engine, xp, ins, yp, outs, frames) };
        if code == PARTITA_OK {
            for (o, c) in output_buffers.iter().enumerate() {
                assert!(c.iter().all(|v| v.is_finite()), "non-finite output on channel {o}");
            }
        }
        code
    };
    check_code(code, "partita_engine_process");
    if code == PARTITA_OK && frames > 0 {
        assert!(!s.engine.is_null() && (ins, outs) == s.engine_channels && frames <= s.max_frames);
    }
    input_buffers.clear();
}
