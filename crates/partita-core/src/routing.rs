//! Which impulse-response channel connects which input to which output, how a routing is written, and how one
//! is chosen from the channel counts of an impulse response and an input.

use std::fmt;
use std::str::FromStr;

use crate::error::{RoutingError, RoutingParseError};

/// How engine inputs reach engine outputs through the IR's channels.
///
/// For a matrix of `inputs` x `outputs`, IR channel `m * outputs + n` connects input `m` to output `n`
/// (so true stereo, a 2 x 2 matrix, orders its channels LL, LR, RL, RR: first letter the input).
///
/// Written as `mono`, `mono-to-stereo`, `stereo`, `true-stereo` (or `truestereo`) and `matrix:MxN` (M inputs,
/// N outputs); parsing ignores case and surrounding whitespace, and `Display` gives the canonical spelling.
///
/// ```
/// use partita_core::Routing;
///
/// let r: Routing = "Matrix:2x3".parse()?;
/// assert_eq!(r, Routing::Matrix { inputs: 2, outputs: 3 });
/// assert_eq!(r.to_string(), "matrix:2x3");
/// assert_eq!(r.ir_channels(), 6);
/// // No routing given: a 2-channel IR on a mono input is mono to stereo, on a stereo input stereo.
/// assert_eq!(Routing::choose(None, 2, 1)?, Routing::MonoToStereo);
/// assert_eq!(Routing::choose(None, 2, 2)?, Routing::Stereo);
/// # Ok::<(), Box<dyn std::error::Error>>(())
/// ```
#[derive(Debug, Clone, Copy, PartialEq, Eq, Hash)]
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
    /// The most inputs, and the most outputs, a routing may have: 1024 (a matrix of them has a million IR
    /// channels and paths). Parsing and [`resolve`](Self::resolve) refuse larger matrices, so the channel
    /// counts of any accepted routing multiply without overflow.
    pub const MAX_SIDE: usize = 1024;

    /// The routing an IR channel count means when none is given: 1 mono, 2 stereo, 4 true stereo; `None` for
    /// any other count (give a matrix).
    pub fn for_ir_channels(ir_channels: usize) -> Option<Self> {
        match ir_channels {
            1 => Some(Self::Mono),
            2 => Some(Self::Stereo),
            4 => Some(Self::TrueStereo),
            _ => None,
        }
    }

    /// The IR channel count this routing needs by default: mono 1, mono to stereo 2, stereo 2, true stereo 4,
    /// a matrix M x N.
    pub fn ir_channels(&self) -> usize {
        match *self {
            Self::Mono => 1,
            Self::MonoToStereo | Self::Stereo => 2,
            Self::TrueStereo => 4,
            Self::Matrix { inputs, outputs } => inputs.saturating_mul(outputs),
        }
    }

    /// Whether an IR of `ir_channels` channels fits this routing (stereo takes 1 or 2; an empty matrix takes
    /// none).
    pub fn accepts_ir_channels(&self, ir_channels: usize) -> bool {
        match *self {
            Self::Stereo => ir_channels == 1 || ir_channels == 2,
            Self::Matrix { inputs, outputs } => {
                (1..=Self::MAX_SIDE).contains(&inputs)
                    && (1..=Self::MAX_SIDE).contains(&outputs)
                    && ir_channels == inputs * outputs
            }
            _ => ir_channels == self.ir_channels(),
        }
    }

    /// The routing of an impulse response on its own, before any input is known: `requested`, checked against
    /// the IR's channel count, or the default for that count ([`Routing::for_ir_channels`]).
    ///
    /// # Errors
    /// [`RoutingError::NoDefault`] when nothing is requested and the count has no default;
    /// [`RoutingError::ChannelCount`] or [`RoutingError::EmptyMatrix`] when the requested routing does not fit.
    pub fn choose_for_ir(requested: Option<Self>, ir_channels: usize) -> Result<Self, RoutingError> {
        match requested {
            Some(routing) => routing.resolve(ir_channels).map(|_| routing),
            None => Self::for_ir_channels(ir_channels).ok_or(RoutingError::NoDefault { ir_channels }),
        }
    }

    /// The routing for an impulse response of `ir_channels` channels on an input of `input_channels`: the IR's
    /// routing ([`Routing::choose_for_ir`]) fitted to the input.
    ///
    /// | IR's routing | IR channels | input channels | result |
    /// |---|---|---|---|
    /// | mono | 1 | 1 | mono |
    /// | mono | 1 | 2 | stereo (the one channel serves both sides) |
    /// | stereo | 1 | 1 | mono |
    /// | stereo | 2 | 1 | mono to stereo |
    /// | stereo | 1 or 2 | 2 | stereo |
    /// | mono to stereo | 2 | 1 | mono to stereo |
    /// | true stereo | 4 | 2 | true stereo |
    /// | matrix M x N | M x N | M | the matrix |
    ///
    /// Without a requested routing the IR's is its channel count's default: 1 mono, 2 stereo, 4 true stereo.
    ///
    /// # Errors
    /// As [`Routing::choose_for_ir`]; [`RoutingError::InputChannels`] when the input's channel count is not in
    /// the table for the IR's routing.
    pub fn choose(requested: Option<Self>, ir_channels: usize, input_channels: usize) -> Result<Self, RoutingError> {
        let routing = Self::choose_for_ir(requested, ir_channels)?;
        let chosen = match (routing, ir_channels, input_channels) {
            (Self::Mono, _, 1) | (Self::Stereo, 1, 1) => Some(Self::Mono),
            (Self::Mono | Self::Stereo, _, 2) => Some(Self::Stereo),
            (Self::Stereo | Self::MonoToStereo, _, 1) => Some(Self::MonoToStereo),
            (Self::TrueStereo, _, 2) => Some(Self::TrueStereo),
            (Self::Matrix { inputs, .. }, _, n) if n == inputs => Some(routing),
            _ => None,
        };
        chosen.ok_or(RoutingError::InputChannels { routing, ir_channels, input_channels })
    }

    /// What input this routing (of an impulse response, before [`Routing::choose`] fits it) takes, in words.
    pub(crate) fn takes(&self) -> String {
        match *self {
            Self::Mono | Self::Stereo => "a mono or stereo input".into(),
            Self::MonoToStereo => "a mono input".into(),
            Self::TrueStereo => "a stereo (2-channel) input".into(),
            Self::Matrix { inputs, .. } => format!("a {inputs}-channel input"),
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
        let wrong = |expected| RoutingError::ChannelCount { routing: self.to_string(), expected, got: ir_channels };
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
                if inputs > Self::MAX_SIDE || outputs > Self::MAX_SIDE {
                    return Err(RoutingError::MatrixTooLarge { inputs, outputs, max_side: Self::MAX_SIDE });
                }
                if ir_channels != inputs * outputs {
                    return Err(RoutingError::ChannelCount {
                        routing: self.to_string(),
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

impl fmt::Display for Routing {
    fn fmt(&self, f: &mut fmt::Formatter<'_>) -> fmt::Result {
        match self {
            Self::Mono => f.write_str("mono"),
            Self::MonoToStereo => f.write_str("mono-to-stereo"),
            Self::Stereo => f.write_str("stereo"),
            Self::TrueStereo => f.write_str("true-stereo"),
            Self::Matrix { inputs, outputs } => write!(f, "matrix:{inputs}x{outputs}"),
        }
    }
}

impl FromStr for Routing {
    type Err = RoutingParseError;

    /// Parses `mono`, `mono-to-stereo`, `stereo`, `true-stereo` (or `truestereo`) or `matrix:MxN` with M and N
    /// from 1 to [`Routing::MAX_SIDE`], in any case, surrounding whitespace ignored.
    fn from_str(s: &str) -> Result<Self, Self::Err> {
        let err = || RoutingParseError { given: s.to_string() };
        match s.trim().to_ascii_lowercase().as_str() {
            "mono" => Ok(Self::Mono),
            "mono-to-stereo" => Ok(Self::MonoToStereo),
            "stereo" => Ok(Self::Stereo),
            "true-stereo" | "truestereo" => Ok(Self::TrueStereo),
            other => {
                let dims = other.strip_prefix("matrix:").ok_or_else(err)?;
                let (m, n) = dims.split_once('x').ok_or_else(err)?;
                let inputs: usize = m.trim().parse().map_err(|_| err())?;
                let outputs: usize = n.trim().parse().map_err(|_| err())?;
                if !(1..=Self::MAX_SIDE).contains(&inputs) || !(1..=Self::MAX_SIDE).contains(&outputs) {
                    return Err(err());
                }
                Ok(Self::Matrix { inputs, outputs })
            }
        }
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
    fn matrices_past_the_limit_are_refused() {
        // Found by fuzzing (fuzz/regressions/routing_text): "matrix:3333333333x3" was accepted, and a
        // larger one overflowed the channel product or made resolve allocate without bound.
        let side = Routing::MAX_SIDE;
        assert_eq!(format!("matrix:{side}x1").parse::<Routing>(), Ok(Routing::Matrix { inputs: side, outputs: 1 }));
        for text in
            [format!("matrix:{}x1", side + 1), "matrix:3333333333 x 3".into(), "matrix:99999999999x99999999999".into()]
        {
            let err = text.parse::<Routing>().unwrap_err();
            assert!(err.to_string().contains("both from 1 to 1024"), "{err}");
        }
        let huge = Routing::Matrix { inputs: usize::MAX, outputs: 3 };
        assert_eq!(huge.ir_channels(), usize::MAX);
        assert!(!huge.accepts_ir_channels(usize::MAX));
        assert!(matches!(huge.resolve(usize::MAX), Err(RoutingError::MatrixTooLarge { max_side: 1024, .. })));
    }

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

    #[test]
    fn parses_every_form_and_round_trips_through_display() {
        for (text, want) in [
            ("mono", Routing::Mono),
            ("mono-to-stereo", Routing::MonoToStereo),
            ("stereo", Routing::Stereo),
            ("true-stereo", Routing::TrueStereo),
            ("matrix:3x2", Routing::Matrix { inputs: 3, outputs: 2 }),
            ("matrix:1x6", Routing::Matrix { inputs: 1, outputs: 6 }),
        ] {
            let got: Routing = text.parse().unwrap();
            assert_eq!(got, want, "{text}");
            assert_eq!(got.to_string(), text);
            assert_eq!(got.to_string().parse::<Routing>().unwrap(), got);
        }
    }

    #[test]
    fn parsing_ignores_case_and_surrounding_whitespace() {
        for (text, want) in [
            ("  Mono ", Routing::Mono),
            ("MONO-TO-STEREO", Routing::MonoToStereo),
            ("\tStereo\n", Routing::Stereo),
            ("TrueStereo", Routing::TrueStereo),
            ("True-Stereo", Routing::TrueStereo),
            (" MATRIX:2X3 ", Routing::Matrix { inputs: 2, outputs: 3 }),
            ("matrix: 2 x 3", Routing::Matrix { inputs: 2, outputs: 3 }),
        ] {
            assert_eq!(text.parse::<Routing>().unwrap(), want, "{text:?}");
        }
    }

    #[test]
    fn refuses_malformed_text() {
        for bad in ["", "quad", "matrix:", "matrix:2", "matrix:0x2", "matrix:2x0", "matrix:ax2", "matrix:2x-1"] {
            let err = bad.parse::<Routing>().unwrap_err();
            assert_eq!(err, RoutingParseError { given: bad.to_string() });
            assert!(err.to_string().contains("matrix:MxN"), "{bad}: {err}");
            assert!(err.to_string().contains("true-stereo"), "{bad}: {err}");
        }
    }

    #[test]
    fn default_routings_follow_the_ir_channel_count() {
        assert_eq!(Routing::for_ir_channels(1), Some(Routing::Mono));
        assert_eq!(Routing::for_ir_channels(2), Some(Routing::Stereo));
        assert_eq!(Routing::for_ir_channels(4), Some(Routing::TrueStereo));
        assert_eq!(Routing::choose_for_ir(None, 4), Ok(Routing::TrueStereo));
        for n in [0, 3, 5, 6, 8] {
            assert_eq!(Routing::for_ir_channels(n), None);
            let err = Routing::choose_for_ir(None, n).unwrap_err();
            assert_eq!(err, RoutingError::NoDefault { ir_channels: n });
            assert!(err.to_string().contains("matrix:MxN"), "{err}");
            assert!(err.to_string().contains("--routing"), "{err}");
        }
    }

    #[test]
    fn ir_channel_counts_of_each_routing() {
        let m23 = Routing::Matrix { inputs: 2, outputs: 3 };
        for (routing, needs, accepts) in [
            (Routing::Mono, 1, &[1][..]),
            (Routing::MonoToStereo, 2, &[2][..]),
            (Routing::Stereo, 2, &[1, 2][..]),
            (Routing::TrueStereo, 4, &[4][..]),
            (m23, 6, &[6][..]),
        ] {
            assert_eq!(routing.ir_channels(), needs, "{routing}");
            for n in 0..9 {
                assert_eq!(routing.accepts_ir_channels(n), accepts.contains(&n), "{routing} with {n}");
                assert_eq!(routing.accepts_ir_channels(n), routing.resolve(n).is_ok(), "{routing} with {n}");
            }
        }
        assert!(!Routing::Matrix { inputs: 0, outputs: 2 }.accepts_ir_channels(0));
    }

    #[test]
    fn matrix_channel_index_is_input_major() {
        // Channel m * N + n connects input m to output n: for 2x3, channel 4 is input 1 -> output 1.
        let map = Routing::Matrix { inputs: 2, outputs: 3 }.resolve(6).unwrap();
        let p = map.paths.iter().find(|p| p.ir_channel == 4).unwrap();
        assert_eq!((p.input, p.output), (1, 1));
        let p = map.paths.iter().find(|p| p.ir_channel == 2).unwrap();
        assert_eq!((p.input, p.output), (0, 2));
        // True stereo: LR (channel 1) is left in -> right out; RL (channel 2) right in -> left out.
        let map = Routing::TrueStereo.resolve(4).unwrap();
        let p = map.paths.iter().find(|p| p.ir_channel == 1).unwrap();
        assert_eq!((p.input, p.output), (0, 1));
        let p = map.paths.iter().find(|p| p.ir_channel == 2).unwrap();
        assert_eq!((p.input, p.output), (1, 0));
    }

    #[test]
    fn a_requested_routing_that_does_not_fit_the_ir_is_refused() {
        assert_eq!(Routing::choose_for_ir(Some(Routing::TrueStereo), 4), Ok(Routing::TrueStereo));
        let m23 = Routing::Matrix { inputs: 2, outputs: 3 };
        assert_eq!(Routing::choose_for_ir(Some(m23), 6), Ok(m23));
        let err = Routing::choose_for_ir(Some(Routing::TrueStereo), 2).unwrap_err();
        assert!(matches!(err, RoutingError::ChannelCount { got: 2, .. }), "{err:?}");
        assert!(err.to_string().contains("true-stereo"), "{err}");
        assert!(Routing::choose_for_ir(Some(m23), 5).is_err());
        assert!(Routing::choose_for_ir(Some(Routing::Mono), 2).is_err());
        let empty = Routing::Matrix { inputs: 0, outputs: 2 };
        assert_eq!(Routing::choose_for_ir(Some(empty), 0), Err(RoutingError::EmptyMatrix));
    }

    #[test]
    fn choice_table_without_a_requested_routing() {
        use Routing::*;
        for (ir, input, want) in
            [(1, 1, Mono), (1, 2, Stereo), (2, 1, MonoToStereo), (2, 2, Stereo), (4, 2, TrueStereo)]
        {
            assert_eq!(Routing::choose(None, ir, input), Ok(want), "{ir}-channel IR on {input} input(s)");
        }
        for (ir, input, routing) in [(1, 3, Mono), (2, 3, Stereo), (4, 1, TrueStereo), (4, 4, TrueStereo)] {
            let err = Routing::choose(None, ir, input).unwrap_err();
            assert_eq!(err, RoutingError::InputChannels { routing, ir_channels: ir, input_channels: input });
        }
        for ir in [3, 6] {
            assert_eq!(Routing::choose(None, ir, 2), Err(RoutingError::NoDefault { ir_channels: ir }));
        }
    }

    #[test]
    fn choice_table_with_a_requested_routing() {
        use Routing::*;
        let m12 = Matrix { inputs: 1, outputs: 2 };
        let m23 = Matrix { inputs: 2, outputs: 3 };
        for (requested, ir, input, want) in [
            (Mono, 1, 1, Mono),
            (Mono, 1, 2, Stereo),
            (Stereo, 1, 1, Mono),
            (Stereo, 2, 1, MonoToStereo),
            (Stereo, 1, 2, Stereo),
            (Stereo, 2, 2, Stereo),
            (MonoToStereo, 2, 1, MonoToStereo),
            (TrueStereo, 4, 2, TrueStereo),
            (m12, 2, 1, m12),
            (m23, 6, 2, m23),
        ] {
            assert_eq!(Routing::choose(Some(requested), ir, input), Ok(want), "{requested}, {ir} IR ch, {input} in");
        }
        for (requested, ir, input) in [(MonoToStereo, 2, 2), (TrueStereo, 4, 1), (m23, 6, 3), (Mono, 1, 3)] {
            let err = Routing::choose(Some(requested), ir, input).unwrap_err();
            let want = RoutingError::InputChannels { routing: requested, ir_channels: ir, input_channels: input };
            assert_eq!(err, want);
        }
        // The requested routing must fit the IR before the input is looked at.
        assert!(matches!(Routing::choose(Some(TrueStereo), 1, 2), Err(RoutingError::ChannelCount { got: 1, .. })));
        assert!(matches!(Routing::choose(Some(Mono), 2, 1), Err(RoutingError::ChannelCount { got: 2, .. })));
    }

    #[test]
    fn input_mismatch_says_what_the_routing_takes() {
        let err = Routing::choose(None, 4, 1).unwrap_err().to_string();
        for needle in ["1-channel input", "true-stereo", "4-channel impulse response", "a stereo (2-channel) input"] {
            assert!(err.contains(needle), "`{needle}` missing: {err}");
        }
        let err = Routing::choose(Some(Routing::Matrix { inputs: 3, outputs: 1 }), 3, 2).unwrap_err().to_string();
        assert!(err.contains("matrix:3x1") && err.contains("a 3-channel input") && err.contains("--routing"), "{err}");
        let err = Routing::choose(Some(Routing::MonoToStereo), 2, 2).unwrap_err().to_string();
        assert!(err.contains("a mono input"), "{err}");
    }
}
