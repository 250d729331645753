//! The audio thread's side: the engine, its input and output scratch, and parameter events turned into
//! engine commands at their sample positions. [`Processor::process`] never allocates, locks, logs or
//! waits (`tests/host.rs` runs every host call with the allocation trap armed on the process thread).

use std::sync::atomic::Ordering;

use clack_extensions::params::PluginAudioProcessorParams;
use clack_extensions::tail::{PluginTailImpl, TailLength};
use clack_plugin::events::event_types::ParamValueEvent;
use clack_plugin::prelude::*;
use partita_core::{Command, Engine};

use crate::activation::{activate, mix_command};
use crate::params::ParamId;
use crate::plugin::{MainThread, Shared};

/// The audio processor of one activated instance.
pub struct Processor<'a> {
    pub(crate) engine: Engine,
    pub(crate) host: HostAudioProcessorHandle<'a>,
    pub(crate) shared: &'a Shared,
    /// Host input copied here first: hosts may process in place, and the engine reads and writes apart.
    pub(crate) input: [Vec<f32>; 2],
    pub(crate) output: [Vec<f32>; 2],
    pub(crate) sample_rate_hz: u32,
    /// Mix parameters changed but not yet accepted by the engine (bit = parameter id).
    pub(crate) pending_mix: u32,
}

impl std::fmt::Debug for Processor<'_> {
    fn fmt(&self, f: &mut std::fmt::Formatter<'_>) -> std::fmt::Result {
        f.debug_struct("Processor").field("engine", &self.engine).finish_non_exhaustive()
    }
}

impl<'a> PluginAudioProcessor<'a, Shared, MainThread<'a>> for Processor<'a> {
    fn activate(
        host: HostAudioProcessorHandle<'a>,
        main_thread: &MainThread<'a>,
        shared: &'a Shared,
        audio_config: PluginAudioConfiguration,
    ) -> Result<Self, PluginError> {
        activate(host, main_thread, shared, audio_config)
    }

    fn process(&mut self, _process: Process, mut audio: Audio, events: Events) -> Result<ProcessStatus, PluginError> {
        let frames = (audio.frames_count() as usize).min(self.input[0].len());
        self.take_input(&mut audio, frames);
        let mut at = 0;
        for event in events.input {
            let t = (event.header().time() as usize).clamp(at, frames);
            self.render(at, t);
            at = t;
            if let Some(change) = event.as_event::<ParamValueEvent>() {
                self.param_changed(change);
            }
        }
        self.render(at, frames);
        self.give_output(&mut audio, frames);
        Ok(ProcessStatus::Tail)
    }

    fn deactivate(self, main_thread: &MainThread<'a>) {
        main_thread.deactivated();
    }

    fn reset(&mut self) {
        self.engine.reset();
    }
}

impl Processor<'_> {
    /// Copies the main port's input into the scratch (a mono input feeds both sides; no input is silence).
    fn take_input(&mut self, audio: &mut Audio, frames: usize) {
        let mut got = 0;
        if let Some(mut pair) = audio.port_pair(0) {
            if let Ok(channels) = pair.channels() {
                if let Some(mut channels) = channels.into_f32() {
                    for (c, pair) in channels.iter_mut().enumerate().take(2) {
                        let src = match &pair {
                            ChannelPair::InputOnly(i) | ChannelPair::InputOutput(i, _) => Some(&i[..frames]),
                            ChannelPair::InPlace(b) => Some(&b[..frames]),
                            ChannelPair::OutputOnly(_) => None,
                        };
                        match src {
                            Some(src) => self.input[c][..frames].copy_from_slice(src),
                            None => self.input[c][..frames].fill(0.0),
                        }
                        got = c + 1;
                    }
                }
            }
        }
        match got {
            0 => self.input.iter_mut().for_each(|x| x[..frames].fill(0.0)),
            1 => {
                let (l, r) = self.input.split_at_mut(1);
                r[0][..frames].copy_from_slice(&l[0][..frames]);
            }
            _ => {}
        }
    }

    /// Copies the rendered output to the main port.
    fn give_output(&mut self, audio: &mut Audio, frames: usize) {
        let Some(mut pair) = audio.port_pair(0) else { return };
        let Ok(channels) = pair.channels() else { return };
        let Some(mut channels) = channels.into_f32() else { return };
        for (c, pair) in channels.iter_mut().enumerate() {
            let dst = match pair {
                ChannelPair::OutputOnly(o) | ChannelPair::InputOutput(_, o) => o,
                ChannelPair::InPlace(b) => b,
                ChannelPair::InputOnly(_) => continue,
            };
            dst[..frames].copy_from_slice(&self.output[c.min(1)][..frames]);
        }
    }

    /// Runs the engine over frames `from..to` of the scratch, after handing it the pending mix changes.
    fn render(&mut self, from: usize, to: usize) {
        self.send_pending_mix();
        if from >= to {
            return;
        }
        let [il, ir] = &self.input;
        let [ol, or] = &mut self.output;
        let result = self.engine.process(&[&il[from..to], &ir[from..to]], &mut [&mut ol[from..to], &mut or[from..to]]);
        // The buffers are ours and sized at activation: an error here would be a bug; the engine has then
        // zeroed the outputs, which is what the host hears.
        debug_assert!(result.is_ok(), "{result:?}");
    }

    /// Stores a parameter change; mix parameters go to the engine, the others to the main thread.
    fn param_changed(&mut self, change: &ParamValueEvent) {
        let Some(id) = change.param_id().and_then(|id| ParamId::from_raw(id.get())) else { return };
        if self.shared.params.set(id, change.value()).is_none() {
            return;
        }
        if id.is_mix() {
            self.pending_mix |= 1 << id as u32;
        } else if id.changes_ir() {
            self.shared.ir_dirty.store(true, Ordering::Release);
            self.host.request_callback();
        } else if id == ParamId::Latency {
            self.shared.latency_dirty.store(true, Ordering::Release);
            self.host.request_callback();
        }
    }

    /// Sends every changed mix parameter's current value; one the engine's queue refuses stays pending.
    fn send_pending_mix(&mut self) {
        if self.pending_mix == 0 {
            return;
        }
        for id in ParamId::ALL {
            if self.pending_mix & (1 << id as u32) == 0 {
                continue;
            }
            let command: Command = mix_command(&self.shared.params, id, self.sample_rate_hz);
            if self.engine.send(command).is_ok() {
                self.pending_mix &= !(1 << id as u32);
            }
        }
    }
}

impl PluginAudioProcessorParams for Processor<'_> {
    fn flush(&mut self, input_parameter_changes: &InputEvents, _output_parameter_changes: &mut OutputEvents) {
        for event in input_parameter_changes {
            if let Some(change) = event.as_event::<ParamValueEvent>() {
                self.param_changed(change);
            }
        }
        self.send_pending_mix();
    }
}

impl PluginTailImpl for Processor<'_> {
    fn get(&self) -> TailLength {
        let ir = self.shared.ir_frames.load(Ordering::Relaxed);
        let predelay =
            (self.shared.params.get(ParamId::PreDelay) * 1e-3 * f64::from(self.sample_rate_hz)).round() as u32;
        TailLength::Finite(ir.saturating_add(predelay))
    }
}
