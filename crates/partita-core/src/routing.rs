//! Which impulse-response channel connects which input to which output.

use crate::error::RoutingError;

/// How engine inputs reach engine outputs through the IR's channels.
///
/// For a matrix of `inputs` x `outputs`, IR channel `m * outputs + n` connects input `m` to output `n`
/// (so true stereo, a 2 x 2 matrix, orders its channels LL, LR, RL, RR: first letter the input).
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Routing {
    /// One input, one output, a 1-channel IR.
    Mono,
    /// One input, two outputs, a 2-channel IR (channel 0 to the left output, 1 to the right).
    MonoToStereo,
    /// Two inputs, two outputs, left to left and right to right. A 1-channel IR serves both sides;
    /// a 2-channel IR gives channel 0 to the left and channel 1 to the right.
    Stereo,
    /// Two inputs, two outputs, a 4-channel IR in the order LL, LR, RL, RR (first letter the input).
    TrueStereo,
    /// A general matrix: `inputs * outputs` IR channels, channel `m * outputs + n` for input `m` to output `n`.
    Matrix {
        /// Number of inputs.
        inputs: usize,
        /// Number of outputs.
        outputs: usize,
    },
}

/// One path through the engine: `input` convolved with IR channel `ir_channel`, summed into `output`.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub struct Path {
    /// Input index.
    pub input: usize,
    /// Output index.
    pub output: usize,
    /// IR channel index.
    pub ir_channel: usize,
}

/// A routing resolved against an IR's channel count.
#[derive(Debug, Clone, PartialEq, Eq)]
pub struct RouteMap {
    /// Number of inputs.
    pub inputs: usize,
    /// Number of outputs.
    pub outputs: usize,
    /// Every path, ordered by output then input.
    pub paths: Vec<Path>,
}

impl Routing {
    /// The routing usually meant by an IR channel count on a stream of `input_channels`:
    /// 1 IR channel on 1 or 2 inputs is mono or stereo, 2 channels on 1 input is mono to stereo,
    /// 2 on 2 is stereo, 4 on 2 is true stereo. Other combinations return `None` (give a matrix).
    pub fn infer(ir_channels: usize, input_channels: usize) -> Option<Self> {
        match (ir_channels, input_channels) {
            (1, 1) => Some(Self::Mono),
            (1, 2) | (2, 2) => Some(Self::Stereo),
            (2, 1) => Some(Self::MonoToStereo),
            (4, 2) => Some(Self::TrueStereo),
            _ => None,
        }
    }

    /// Number of engine inputs.
    pub fn inputs(&self) -> usize {
        match self {
            Self::Mono | Self::MonoToStereo => 1,
            Self::Stereo | Self::TrueStereo => 2,
            Self::Matrix { inputs, .. } => *inputs,
        }
    }

    /// Number of engine outputs.
    pub fn outputs(&self) -> usize {
        match self {
            Self::Mono => 1,
            Self::MonoToStereo | Self::Stereo | Self::TrueStereo => 2,
            Self::Matrix { outputs, .. } => *outputs,
        }
    }

    /// Resolves the paths for an IR with `ir_channels` channels.
    ///
    /// # Errors
    /// [`RoutingError`] when the channel count does not fit the routing, or a matrix is empty.
    pub fn resolve(&self, ir_channels: usize) -> Result<RouteMap, RoutingError> {
        let wrong = |expected| RoutingError::ChannelCount {
            routing: format!("{self:?}").to_lowercase(),
            expected,
            got: ir_channels,
        };
        let path = |input, output, ir_channel| Path { input, output, ir_channel };
        let paths = match *self {
            Self::Mono if ir_channels == 1 => vec![path(0, 0, 0)],
            Self::Mono => return Err(wrong("1")),
            Self::MonoToStereo if ir_channels == 2 => vec![path(0, 0, 0), path(0, 1, 1)],
            Self::MonoToStereo => return Err(wrong("2")),
            Self::Stereo if ir_channels == 1 => vec![path(0, 0, 0), path(1, 1, 0)],
            Self::Stereo if ir_channels == 2 => vec![path(0, 0, 0), path(1, 1, 1)],
            Self::Stereo => return Err(wrong("1 or 2")),
            Self::TrueStereo if ir_channels == 4 => matrix_paths(2, 2),
            Self::TrueStereo => return Err(wrong("4")),
            Self::Matrix { inputs, outputs } => {
                if inputs == 0 || outputs == 0 {
                    return Err(RoutingError::EmptyMatrix);
                }
                if ir_channels != inputs * outputs {
                    return Err(RoutingError::ChannelCount {
                        routing: format!("{inputs}x{outputs} matrix"),
                        expected: "inputs x outputs",
                        got: ir_channels,
                    });
                }
                matrix_paths(inputs, outputs)
            }
        };
        let mut paths = paths;
        paths.sort_by_key(|p| (p.output, p.input));
        Ok(RouteMap { inputs: self.inputs(), outputs: self.outputs(), paths })
    }
}

fn matrix_paths(inputs: usize, outputs: usize) -> Vec<Path> {
    (0..inputs)
        .flat_map(|m| (0..outputs).map(move |n| Path { input: m, output: n, ir_channel: m * outputs + n }))
        .collect()
}

impl RouteMap {
    /// Splits the routing into independent groups: inputs and outputs joined by any path share a group.
    /// Plain stereo is two groups (left, right); true stereo is one. Groups can run at different
    /// callback phases. Returns, per group, its inputs and outputs in ascending order.
    pub fn groups(&self) -> Vec<(Vec<usize>, Vec<usize>)> {
        // Union-find over inputs 0..M and outputs M..M+N.
        let m = self.inputs;
        let mut parent: Vec<usize> = (0..m + self.outputs).collect();
        fn find(parent: &mut [usize], mut i: usize) -> usize {
            while parent[i] != i {
                parent[i] = parent[parent[i]];
                i = parent[i];
            }
            i
        }
        for p in &self.paths {
            let a = find(&mut parent, p.input);
            let b = find(&mut parent, m + p.output);
            parent[a] = b;
        }
        let mut roots: Vec<usize> = Vec::new();
        let mut groups: Vec<(Vec<usize>, Vec<usize>)> = Vec::new();
        for node in 0..parent.len() {
            let r = find(&mut parent, node);
            let g = match roots.iter().position(|&x| x == r) {
                Some(g) => g,
                None => {
                    roots.push(r);
                    groups.push((Vec::new(), Vec::new()));
                    groups.len() - 1
                }
            };
            if node < m {
                groups[g].0.push(node);
            } else {
                groups[g].1.push(node - m);
            }
        }
        groups
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn true_stereo_order_is_input_major() {
        let map = Routing::TrueStereo.resolve(4).unwrap();
        // LR (channel 1) is left in -> right out.
        assert!(map.paths.contains(&Path { input: 0, output: 1, ir_channel: 1 }));
        assert!(map.paths.contains(&Path { input: 1, output: 0, ir_channel: 2 }));
        assert_eq!(map.groups().len(), 1);
    }

    #[test]
    fn stereo_splits_into_two_groups() {
        let map = Routing::Stereo.resolve(1).unwrap();
        assert_eq!(map.groups(), vec![(vec![0], vec![0]), (vec![1], vec![1])]);
    }

    #[test]
    fn wrong_channel_count_is_refused() {
        let err = Routing::TrueStereo.resolve(2).unwrap_err();
        assert!(err.to_string().contains("4 channel"), "{err}");
        assert!(Routing::Matrix { inputs: 0, outputs: 2 }.resolve(0).is_err());
        assert!(Routing::Matrix { inputs: 2, outputs: 3 }.resolve(5).is_err());
    }
}
