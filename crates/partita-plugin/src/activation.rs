//! What happens in `activate` (on the main thread): the IR at the host's rate, the plan for the latency
//! mode and render mode, the engine and its buffers. Every engine rebuild happens here, and only here.

use std::sync::atomic::Ordering;

use clack_extensions::latency::HostLatency;
use clack_plugin::prelude::*;
use partita_core::{Command, Engine, EngineOptions, Mix, Plan, Planner, Routing, Shape};

use crate::params::{ParamId, ParamValues, MAX_PREDELAY_MS, ZERO_LATENCY_BLOCK_FRAMES};
use crate::plugin::{Active, MainThread, Shared};
use crate::processor::Processor;
use crate::source::{engine_taps, make_ir};

/// The engine's shape for a routing: two inputs and outputs, two or four paths.
fn shape(true_stereo: bool) -> Shape {
    Shape { inputs: 2, outputs: 2, paths: if true_stereo { 4 } else { 2 } }
}

/// The IR length an engine is planned for: the IR rounded up to whole seconds (at least one), so a
/// slightly longer IR (a room parameter turned up) swaps in without a restart. Longer ones restart.
pub fn planned_ir_frames(ir_frames: usize, sample_rate_hz: u32) -> usize {
    let second = sample_rate_hz as usize;
    ir_frames.div_ceil(second).max(1) * second
}

/// The plan of an instance: the latency mode's block (zero latency: a direct-form head and block 64), the
/// automatic schedule without worker threads (a session may hold dozens of instances; the plan keeps every
/// level in the callback or spreads it over callbacks, `sliced`), costed for the host's rate and the
/// routing; under offline rendering the cheapest such plan, whatever its heaviest call.
///
/// # Errors
/// The planner's, for a zero IR length.
pub fn plan_for(
    latency_mode: Option<usize>,
    ir_frames: usize,
    sample_rate_hz: u32,
    true_stereo: bool,
    offline: bool,
) -> Result<Plan, partita_core::PlanError> {
    Planner::new()
        .block_frames(latency_mode.unwrap_or(ZERO_LATENCY_BLOCK_FRAMES))
        .zero_latency(latency_mode.is_none())
        .sample_rate_hz(sample_rate_hz)
        .shape(shape(true_stereo))
        .allow_workers(false)
        .offline(offline)
        .plan(planned_ir_frames(ir_frames, sample_rate_hz))
}

/// Pre-delay in frames at `sample_rate_hz`.
pub fn predelay_frames(ms: f64, sample_rate_hz: u32) -> usize {
    (ms.max(0.0) * 1e-3 * f64::from(sample_rate_hz)).round() as usize
}

/// The engine mix of the current parameter values.
pub fn mix_of(params: &ParamValues, sample_rate_hz: u32) -> Mix {
    Mix {
        wet: (params.get(ParamId::Wet) / 100.0) as f32,
        dry: (params.get(ParamId::Dry) / 100.0) as f32,
        output_gain_db: params.get(ParamId::OutputGain) as f32,
        predelay_frames: predelay_frames(params.get(ParamId::PreDelay), sample_rate_hz),
        bypass: params.get(ParamId::Bypass) >= 0.5,
    }
}

/// The engine command that sets mix parameter `id` to its current value. Never allocates.
///
/// # Panics
/// When `id` is not a mix parameter.
pub fn mix_command(params: &ParamValues, id: ParamId, sample_rate_hz: u32) -> Command {
    let mix = mix_of(params, sample_rate_hz);
    match id {
        ParamId::Wet => Command::WetGain(mix.wet),
        ParamId::Dry => Command::DryGain(mix.dry),
        ParamId::OutputGain => Command::OutputGainDb(mix.output_gain_db),
        ParamId::PreDelay => Command::PreDelayFrames(mix.predelay_frames),
        ParamId::Bypass => Command::Bypass(mix.bypass),
        _ => panic!("{id:?} is not a mix parameter"),
    }
}

/// Builds the engine of an activation. Allocates (main thread).
pub(crate) fn activate<'a>(
    host: HostAudioProcessorHandle<'a>,
    main_thread: &MainThread<'a>,
    shared: &'a Shared,
    config: PluginAudioConfiguration,
) -> Result<Processor<'a>, PluginError> {
    let rate = config.sample_rate.round() as u32;
    let max_frames = config.max_frames_count.max(1) as usize;
    let source = main_thread.source.borrow().clone();
    let ir = make_ir(&source, rate)?;
    let true_stereo = ir.channels() == 4;
    let latency_mode = shared.params.latency_mode();
    let offline = main_thread.offline.get();
    let plan = plan_for(latency_mode, ir.frames(), rate, true_stereo, offline)?;
    let options = EngineOptions {
        max_predelay_frames: predelay_frames(MAX_PREDELAY_MS, rate),
        offline,
        mix: mix_of(&shared.params, rate),
        ..EngineOptions::new(max_frames)
    };
    let routing = if true_stereo { Routing::TrueStereo } else { Routing::Stereo };
    let mut engine = Engine::with_options(&plan, &engine_taps(&ir, true_stereo), routing, options)?;
    let control = engine.control().ok_or(PluginError::Message("the engine's control was taken"))?;
    let latency = engine.latency_frames() as u32;
    shared.ir_frames.store(ir.frames() as u32, Ordering::Relaxed);
    shared.sample_rate_hz.store(rate, Ordering::Relaxed);
    let old_latency = shared.latency_frames.swap(latency, Ordering::Relaxed);
    *main_thread.active.borrow_mut() =
        Some(Active { control, sample_rate_hz: rate, true_stereo, latency_mode, offline });
    if old_latency != latency {
        if let Some(ext) = main_thread.host.get_extension::<HostLatency>() {
            ext.changed(&main_thread.host);
        }
    }
    let scratch = || vec![0.0f32; max_frames];
    Ok(Processor {
        engine,
        host,
        shared,
        input: [scratch(), scratch()],
        output: [scratch(), scratch()],
        sample_rate_hz: rate,
        pending_mix: 0,
    })
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn plans_start_no_thread_and_cover_whole_seconds() {
        for (mode, latency) in [(None, 0), (Some(64), 64), (Some(1024), 1024)] {
            for ts in [false, true] {
                let plan = plan_for(mode, 100_000, 48_000, ts, false).unwrap();
                assert_eq!(plan.latency_frames(), latency);
                assert_eq!(plan.ir_frames, 144_000);
                assert!(plan.covered_frames() >= 100_000);
                assert!(plan.levels.iter().all(|l| l.schedule != partita_core::Schedule::Workers), "{plan:?}");
            }
        }
        assert_eq!(planned_ir_frames(1, 44_100), 44_100);
        assert_eq!(planned_ir_frames(44_101, 44_100), 88_200);
    }
}
