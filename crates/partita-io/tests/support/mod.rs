//! Byte-by-byte WAV builders and scratch paths shared by the test binaries.
#![allow(dead_code)]

use std::path::{Path, PathBuf};

use partita_io::IoError;

/// A fresh path under the target's scratch directory, unique per test binary and name.
pub fn tmp(name: &str) -> PathBuf {
    let dir = PathBuf::from(env!("CARGO_TARGET_TMPDIR")).join("partita-io").join(env!("CARGO_CRATE_NAME"));
    std::fs::create_dir_all(&dir).unwrap();
    let path = dir.join(name);
    if path.is_dir() {
        std::fs::remove_dir_all(&path).unwrap();
    } else if path.exists() {
        std::fs::remove_file(&path).unwrap();
    }
    path
}

/// A fresh, empty scratch directory.
pub fn tmp_dir(name: &str) -> PathBuf {
    let dir = tmp(name);
    std::fs::create_dir_all(&dir).unwrap();
    dir
}

/// Writes `bytes` to a fresh scratch file.
pub fn file(name: &str, bytes: &[u8]) -> PathBuf {
    let path = tmp(name);
    std::fs::write(&path, bytes).unwrap();
    path
}

/// A chunk: id, 32-bit little-endian size, body, and a pad byte when the size is odd.
pub fn chunk(id: &[u8; 4], body: &[u8]) -> Vec<u8> {
    let mut v = id.to_vec();
    v.extend_from_slice(&(body.len() as u32).to_le_bytes());
    v.extend_from_slice(body);
    if body.len() % 2 == 1 {
        v.push(0);
    }
    v
}

/// A chunk header declaring `size` bytes followed by `body` as given (for lying sizes).
pub fn chunk_claiming(id: &[u8; 4], size: u32, body: &[u8]) -> Vec<u8> {
    let mut v = id.to_vec();
    v.extend_from_slice(&size.to_le_bytes());
    v.extend_from_slice(body);
    v
}

/// RIFF/WAVE around the chunks, with a correct RIFF size.
pub fn riff(chunks: &[Vec<u8>]) -> Vec<u8> {
    let body: Vec<u8> = chunks.concat();
    let mut v = b"RIFF".to_vec();
    v.extend_from_slice(&(4 + body.len() as u32).to_le_bytes());
    v.extend_from_slice(b"WAVE");
    v.extend_from_slice(&body);
    v
}

/// The 16-byte body of a plain `fmt ` chunk.
pub fn fmt_body(tag: u16, channels: u16, rate: u32, bits: u16) -> Vec<u8> {
    let block_align = channels * (bits / 8);
    let mut v = Vec::new();
    v.extend_from_slice(&tag.to_le_bytes());
    v.extend_from_slice(&channels.to_le_bytes());
    v.extend_from_slice(&rate.to_le_bytes());
    v.extend_from_slice(&(rate * u32::from(block_align)).to_le_bytes());
    v.extend_from_slice(&block_align.to_le_bytes());
    v.extend_from_slice(&bits.to_le_bytes());
    v
}

/// A plain `fmt ` chunk.
pub fn fmt(tag: u16, channels: u16, rate: u32, bits: u16) -> Vec<u8> {
    chunk(b"fmt ", &fmt_body(tag, channels, rate, bits))
}

/// `KSDATAFORMAT_SUBTYPE_*` for a format tag, as stored.
pub fn ks_guid(tag: u16) -> [u8; 16] {
    let mut g = [0u8; 16];
    g[..2].copy_from_slice(&tag.to_le_bytes());
    g[2..].copy_from_slice(&[0x00, 0x00, 0x00, 0x00, 0x10, 0x00, 0x80, 0x00, 0x00, 0xAA, 0x00, 0x38, 0x9B, 0x71]);
    g
}

/// A 40-byte `WAVE_FORMAT_EXTENSIBLE` `fmt ` chunk.
pub fn fmt_ext(guid: [u8; 16], channels: u16, rate: u32, bits: u16, valid_bits: u16, mask: u32) -> Vec<u8> {
    let mut v = fmt_body(0xFFFE, channels, rate, bits);
    v.extend_from_slice(&22u16.to_le_bytes());
    v.extend_from_slice(&valid_bits.to_le_bytes());
    v.extend_from_slice(&mask.to_le_bytes());
    v.extend_from_slice(&guid);
    chunk(b"fmt ", &v)
}

/// A complete plain WAV.
pub fn wav(tag: u16, channels: u16, rate: u32, bits: u16, data: &[u8]) -> Vec<u8> {
    riff(&[fmt(tag, channels, rate, bits), chunk(b"data", data)])
}

/// Interleaved integers as little-endian PCM of `bits` (8-bit: offset by 128, unsigned).
pub fn pcm_bytes(values: &[i32], bits: u16) -> Vec<u8> {
    let mut v = Vec::new();
    for &x in values {
        match bits {
            8 => v.push((x + 128) as u8),
            16 => v.extend_from_slice(&(x as i16).to_le_bytes()),
            24 => v.extend_from_slice(&x.to_le_bytes()[..3]),
            32 => v.extend_from_slice(&x.to_le_bytes()),
            _ => panic!("bits {bits}"),
        }
    }
    v
}

pub fn f32_bytes(values: &[f32]) -> Vec<u8> {
    values.iter().flat_map(|x| x.to_le_bytes()).collect()
}

pub fn f64_bytes(values: &[f64]) -> Vec<u8> {
    values.iter().flat_map(|x| x.to_le_bytes()).collect()
}

/// The message is one line that starts with the file name.
pub fn assert_names_file(err: &IoError, path: &Path) {
    let msg = err.to_string();
    let name = path.display().to_string();
    assert!(msg.starts_with(&format!("{name}: ")), "message does not start with the file name: {msg}");
    assert!(!msg.contains('\n'), "message is more than one line: {msg}");
    assert_eq!(err.path(), path);
}

/// Planar channels to interleaved.
pub fn interleave(channels: &[Vec<f32>]) -> Vec<f32> {
    let frames = channels[0].len();
    (0..frames).flat_map(|i| channels.iter().map(move |c| c[i])).collect()
}
