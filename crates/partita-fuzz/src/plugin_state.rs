//! The CLAP plugin's saved state (`partita_plugin::state`): any bytes a host hands back through
//! [`SavedState::decode`], then the parameter values through the plugin's own table.
//!
//! Contract: a clear refusal (not ours, a newer version, or damaged, each with a one-line message), or a
//! state that encodes back to exactly the bytes given (the format has one spelling per state), with at most
//! 1024 parameters, an embedded IR of 1 to 4 channels, at least one frame, a rate above 0 and only finite
//! samples; reading it takes at most 4 times the input's bytes plus 64 KiB (the samples are converted once,
//! nothing is read ahead of the data). Every parameter value, NaN and infinities included, ends inside its
//! parameter's range when the plugin's table takes it (NaN is refused and leaves the value as it was).

use partita_plugin::params::{ParamId, ParamValues};
use partita_plugin::state::{SavedState, StateError};

use crate::memory::bounded;

/// The plugin state reader on `data`.
///
/// # Panics
/// When the contract (module docs) is broken.
pub fn plugin_state(data: &[u8]) {
    let limit = 4 * data.len() + (64 << 10);
    let decoded = bounded("decoding a plugin state", "4 x input + 64 KiB", limit, || SavedState::decode(data));
    let state = match decoded {
        Ok(s) => s,
        Err(e) => {
            let message = e.to_string();
            assert!(!message.is_empty() && !message.contains('\n') && message.len() < 200, "{message:?}");
            match e {
                StateError::NotOurs => assert!(!data.starts_with(b"PTTACLAP"), "our magic refused as not ours"),
                StateError::Newer { version } => assert!(message.contains("update the plugin"), "{version}: {message}"),
                StateError::Corrupt { .. } => assert!(message.contains("damaged"), "{message}"),
            }
            return;
        }
    };
    assert_eq!(state.encode(), data, "an accepted state does not encode back to its bytes");
    assert!(state.params.len() <= 1024, "{} parameters accepted", state.params.len());
    if let Some(audio) = state.file.as_ref().and_then(|f| f.audio.as_ref()) {
        assert!((1..=4).contains(&audio.channel_count()), "{} embedded channels", audio.channel_count());
        assert!(audio.frames() >= 1 && audio.sample_rate_hz > 0);
        assert!(audio.channels.iter().all(|c| c.len() == audio.frames()), "ragged embedded channels");
        assert!(audio.channels.iter().flatten().all(|s| s.is_finite()), "non-finite embedded samples accepted");
    }
    let table = ParamValues::new(8);
    for &(id, value) in &state.params {
        let Some(id) = ParamId::from_raw(id) else { continue };
        let before = table.get(id);
        let stored = table.set(id, value);
        let (lo, hi) = table.range(id);
        let now = table.get(id);
        assert!(now.is_finite() && (lo..=hi).contains(&now), "{id:?} = {now} outside {lo}..={hi} after {value}");
        match stored {
            Some(v) => assert_eq!(v.to_bits(), now.to_bits()),
            None => assert!(value.is_nan() && now.to_bits() == before.to_bits(), "{id:?}: refused {value}"),
        }
    }
}
