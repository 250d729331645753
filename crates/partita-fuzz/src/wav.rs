//! The WAV reader on any bytes.
//!
//! Contract: [`partita_io::read_wav_from`] either refuses with one line naming the file, or returns audio
//! with at least one channel, equal channel lengths, a rate above 0, finite samples and no more samples than
//! the input has bytes; and it never holds more than [`BYTES_PER_INPUT_BYTE`] x the input's size plus
//! [`FIXED_BYTES`] at once, whatever the header claims.

use std::io::Cursor;
use std::path::Path;

use partita_io::{read_wav_from, Audio, MAX_DECODED_BYTES};

use crate::{check_message, memory};

/// Decoded f32 per input byte at most (8-bit PCM: one byte becomes 4), plus the channel table (24 bytes per
/// channel, at least 2 bytes of header per channel), rounded up.
pub const BYTES_PER_INPUT_BYTE: usize = 16;
/// The read buffer (64 KiB plus one frame of at most 65535 channels x 8 bytes) and small change.
pub const FIXED_BYTES: usize = 1 << 20;

/// The name the errors must carry.
pub(crate) const NAME: &str = "fuzz.wav";

/// Checks decoded audio against the reader's promises; `input_bytes` is the file's size.
pub(crate) fn check_audio(audio: &Audio, input_bytes: usize) {
    assert!(audio.sample_rate_hz > 0, "a rate of 0 Hz was accepted");
    assert!(!audio.channels.is_empty(), "audio without channels was returned");
    let frames = audio.frames();
    for (c, samples) in audio.channels.iter().enumerate() {
        assert_eq!(samples.len(), frames, "channel {c} has {} frames, channel 0 {frames}", samples.len());
        if let Some(i) = samples.iter().position(|v| !v.is_finite()) {
            panic!("channel {c} frame {i} is {}", samples[i]);
        }
    }
    assert!(frames * audio.channels.len() <= input_bytes, "more samples than input bytes");
}

/// The WAV reader on `data` as a whole file.
///
/// # Panics
/// When the contract (module docs) is broken.
pub fn wav_reader(data: &[u8]) {
    let rule = "16 x input bytes + 1 MiB";
    let limit = BYTES_PER_INPUT_BYTE * data.len() + FIXED_BYTES;
    let result = memory::bounded("reading a WAV", rule, limit, || {
        read_wav_from(Cursor::new(data), Path::new(NAME), MAX_DECODED_BYTES)
    });
    match result {
        Ok(audio) => check_audio(&audio, data.len()),
        Err(e) => check_message(&e.to_string(), NAME),
    }
}
