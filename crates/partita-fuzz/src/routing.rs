//! Routing text (`--routing`, its alias `--layout`) and the other small words the command reads
//! (`--normalize`, `--schedule`), then the routing resolved and chosen for channel counts from the input.
//!
//! Contract: text is refused with a message that names what was given and lists the accepted forms, or it
//! parses to a routing whose canonical spelling parses back to itself, whose channel counts stay within
//! [`Routing::MAX_SIDE`] and multiply without overflow; resolving it gives exactly one path per IR
//! channel with indices in range, and [`Routing::choose`] returns only routings that accept the IR.

use partita_core::{Routing, Schedule};
use partita_io::Normalize;

use crate::input::Input;

/// Routing text on `data`: two channel-count bytes, then the text.
///
/// # Panics
/// When the contract (module docs) is broken.
pub fn routing_text(data: &[u8]) {
    let mut input = Input::new(data);
    let ir_channels = usize::from(input.u8());
    let input_channels = usize::from(input.u8());
    let text = String::from_utf8_lossy(input.rest());

    // The other words share the text: each either parses or says what it accepts.
    match text.parse::<Normalize>() {
        Ok(n) => assert_eq!(n.to_string().parse::<Normalize>().ok(), Some(n)),
        Err(e) => assert!(e.to_string().contains("none, peak or energy"), "{e}"),
    }
    match text.parse::<Schedule>() {
        Ok(s) => assert_eq!(s.as_str().parse::<Schedule>().ok(), Some(s)),
        Err(e) => assert!(e.contains("sync, workers or sliced"), "{e}"),
    }

    let routing = match text.parse::<Routing>() {
        Ok(r) => r,
        Err(e) => {
            let message = e.to_string();
            assert!(message.contains("matrix:MxN"), "{message}");
            return;
        }
    };
    let canonical = routing.to_string();
    assert_eq!(canonical.parse::<Routing>().ok(), Some(routing), "{canonical} does not parse back");
    let (inputs, outputs) = (routing.inputs(), routing.outputs());
    assert!((1..=Routing::MAX_SIDE).contains(&inputs), "{inputs} inputs accepted from {text:?}");
    assert!((1..=Routing::MAX_SIDE).contains(&outputs), "{outputs} outputs accepted from {text:?}");
    let needed = routing.ir_channels();
    let map = routing.resolve(needed).unwrap_or_else(|e| panic!("{routing} refuses its own IR channel count: {e}"));
    assert_eq!((map.inputs, map.outputs), (inputs, outputs));
    if let Routing::Matrix { .. } = routing {
        assert_eq!(map.paths.len(), needed, "{routing}: one path per IR channel");
    }
    for p in &map.paths {
        assert!(p.input < inputs && p.output < outputs && p.ir_channel < needed, "{routing}: path {p:?}");
    }
    if let Ok(map) = routing.resolve(ir_channels) {
        assert!(routing.accepts_ir_channels(ir_channels));
        assert!(map.paths.iter().all(|p| p.ir_channel < ir_channels));
    }
    if let Ok(chosen) = Routing::choose(Some(routing), ir_channels, input_channels) {
        assert!(chosen.accepts_ir_channels(ir_channels), "{chosen} chosen for {ir_channels} IR channels");
        assert_eq!(chosen.inputs(), input_channels, "{chosen} chosen for {input_channels} inputs");
    }
}
