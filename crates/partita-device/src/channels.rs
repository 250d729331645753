//! Channel mapping between a device's channels and the engine's inputs and outputs.

use crate::error::DeviceError;

/// Which device channel feeds each engine input, and which engine output feeds each device output
/// channel (0-based).
///
/// The default ([`ChannelMap::default_for`]) takes engine input `m` from device channel `m` (the last
/// device channel when the device has fewer, so a mono microphone feeds both inputs of a stereo
/// engine), and sends engine output `n` to device channel `n`; a mono engine output also goes to device
/// channel 1 (both sides of headphones). Other device channels get silence.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct ChannelMap {
    /// For each engine input, the device input channel it reads.
    pub inputs: Vec<usize>,
    /// For each device output channel, the engine output it plays (or silence).
    pub outputs: Vec<Option<usize>>,
}

impl ChannelMap {
    /// The default mapping for `device_inputs` x `device_outputs` device channels and an engine of
    /// `engine_inputs` x `engine_outputs`. Allocates.
    pub fn default_for(
        device_inputs: usize,
        device_outputs: usize,
        engine_inputs: usize,
        engine_outputs: usize,
    ) -> Self {
        let inputs = (0..engine_inputs).map(|m| m.min(device_inputs.saturating_sub(1))).collect();
        let outputs = (0..device_outputs)
            .map(|d| {
                if d < engine_outputs {
                    Some(d)
                } else if engine_outputs == 1 && d == 1 {
                    Some(0)
                } else {
                    None
                }
            })
            .collect();
        Self { inputs, outputs }
    }

    /// A mapping from explicit lists: `inputs[m]` is the device channel of engine input `m`, and
    /// `outputs[n]` the device channel engine output `n` plays on (0-based). `None` keeps the default
    /// for that direction. Allocates.
    ///
    /// # Errors
    /// [`DeviceError::ChannelMap`] when a list has the wrong length or names a channel the device does
    /// not have.
    pub fn from_lists(
        inputs: Option<&[usize]>,
        outputs: Option<&[usize]>,
        device_inputs: usize,
        device_outputs: usize,
        engine_inputs: usize,
        engine_outputs: usize,
    ) -> Result<Self, DeviceError> {
        let mut map = Self::default_for(device_inputs, device_outputs, engine_inputs, engine_outputs);
        if let Some(list) = inputs {
            if list.len() != engine_inputs {
                return Err(DeviceError::ChannelMap(format!(
                    "the engine has {engine_inputs} input(s) but {} input channel(s) were given",
                    list.len()
                )));
            }
            if let Some(&bad) = list.iter().find(|&&c| c >= device_inputs) {
                return Err(DeviceError::ChannelMap(format!(
                    "input channel {} does not exist: the input device has {device_inputs}",
                    bad + 1
                )));
            }
            map.inputs = list.to_vec();
        }
        if let Some(list) = outputs {
            if list.len() != engine_outputs {
                return Err(DeviceError::ChannelMap(format!(
                    "the engine has {engine_outputs} output(s) but {} output channel(s) were given",
                    list.len()
                )));
            }
            map.outputs = vec![None; device_outputs];
            for (n, &d) in list.iter().enumerate() {
                if d >= device_outputs {
                    return Err(DeviceError::ChannelMap(format!(
                        "output channel {} does not exist: the output device has {device_outputs}",
                        d + 1
                    )));
                }
                map.outputs[d] = Some(n);
            }
        }
        Ok(map)
    }

    /// Device input channels the mapping needs (highest channel used + 1).
    pub fn device_inputs_needed(&self) -> usize {
        self.inputs.iter().max().map_or(0, |&c| c + 1)
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn defaults() {
        let m = ChannelMap::default_for(1, 2, 2, 2);
        assert_eq!(m.inputs, vec![0, 0]);
        assert_eq!(m.outputs, vec![Some(0), Some(1)]);
        let m = ChannelMap::default_for(8, 8, 1, 1);
        assert_eq!(m.inputs, vec![0]);
        assert_eq!(m.outputs[..3], [Some(0), Some(0), None]);
    }

    #[test]
    fn lists_are_checked() {
        let m = ChannelMap::from_lists(Some(&[3, 2]), Some(&[1, 0]), 4, 2, 2, 2).unwrap();
        assert_eq!(m.inputs, vec![3, 2]);
        assert_eq!(m.outputs, vec![Some(1), Some(0)]);
        assert!(ChannelMap::from_lists(Some(&[4, 0]), None, 4, 2, 2, 2).is_err());
        assert!(ChannelMap::from_lists(None, Some(&[0]), 4, 2, 2, 2).is_err());
    }
}
