//! Replays every committed fuzz input (`fuzz/corpus/<target>/` and `fuzz/regressions/<target>/`) through its
//! target's body on stable Rust: the corpus as a regression test, part of `scripts/check`.
//! The tests take one lock, so no other test allocates while a body's memory is measured (the bounds read
//! process-wide counters).

use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::time::Instant;

static ONE_AT_A_TIME: Mutex<()> = Mutex::new(());

fn inputs(dir: &Path) -> Vec<PathBuf> {
    let Ok(entries) = std::fs::read_dir(dir) else {
        return Vec::new();
    };
    let mut files: Vec<PathBuf> =
        entries.map(|e| e.expect("a readable folder").path()).filter(|p| p.is_file()).collect();
    files.sort();
    files
}

#[test]
fn every_committed_input_keeps_its_targets_contract() {
    let _one = ONE_AT_A_TIME.lock().unwrap_or_else(|e| e.into_inner());
    let fuzz = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../fuzz");
    for &(name, body) in partita_fuzz::TARGETS {
        let corpus = inputs(&fuzz.join("corpus").join(name));
        let regressions = inputs(&fuzz.join("regressions").join(name));
        assert!(!corpus.is_empty(), "no seed corpus for {name} in {}", fuzz.join("corpus").display());
        let start = Instant::now();
        for path in corpus.iter().chain(&regressions) {
            let data = std::fs::read(path).expect("a readable input");
            // A failing input is named before its panic message.
            eprintln!("{name}: {}", path.display());
            body(&data);
        }
        println!(
            "{name}: {} corpus and {} regression inputs in {:.2} s",
            corpus.len(),
            regressions.len(),
            start.elapsed().as_secs_f64()
        );
    }
}

/// The valid seeds are accepted: a target whose parser refused everything would keep every contract above
/// (a clear error is always allowed) and test nothing.
#[test]
fn valid_seeds_are_accepted() {
    let _one = ONE_AT_A_TIME.lock().unwrap_or_else(|e| e.into_inner());
    let corpus = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../fuzz/corpus");
    let valid = ["seed-pcm", "seed-float", "seed-extensible", "seed-list-before-fmt"];
    let mut read = 0;
    for path in inputs(&corpus.join("wav_reader")) {
        let name = path.file_name().unwrap().to_string_lossy().into_owned();
        if valid.iter().any(|v| name.starts_with(v)) {
            let data = std::fs::read(&path).unwrap();
            let audio = partita_io::read_wav_from(std::io::Cursor::new(&data[..]), &path, 1 << 20);
            assert!(audio.is_ok_and(|a| a.frames() > 0), "{name} refused");
            read += 1;
        }
    }
    assert!(read >= 8, "only {read} valid WAV seeds");
}

/// The plugin state seeds written as valid states decode (so the plugin_state target's contract is
/// exercised on accepted states, not only on refusals), and the refusals are the ones their names say.
#[test]
fn plugin_state_seeds_decode_as_named() {
    use partita_plugin::state::{SavedState, StateError};
    let dir = Path::new(env!("CARGO_MANIFEST_DIR")).join("../../fuzz/corpus/plugin_state");
    let read = |name: &str| SavedState::decode(&std::fs::read(dir.join(format!("seed-{name}"))).unwrap());
    for name in ["defaults", "custom-room", "file-path", "file-embedded-stereo", "file-embedded-true-stereo"] {
        assert!(read(name).is_ok(), "{name} refused: {:?}", read(name));
    }
    assert!(read("file-embedded-true-stereo").unwrap().file.unwrap().audio.is_some_and(|a| a.channel_count() == 4));
    assert_eq!(read("newer-version"), Err(StateError::Newer { version: 2 }));
    assert_eq!(read("not-ours"), Err(StateError::NotOurs));
    for name in ["truncated", "trailing", "nan-sample", "huge-frames", "version-zero"] {
        assert!(matches!(read(name), Err(StateError::Corrupt { .. })), "{name}: {:?}", read(name));
    }
}
