//! Replays every committed fuzz input (`fuzz/corpus/<target>/` and `fuzz/regressions/<target>/`) through its
//! target's body on stable Rust: the corpus as a regression test, part of `scripts/check`. One test, so the
//! inputs run one at a time (the memory bounds read process-wide counters).

use std::path::{Path, PathBuf};
use std::time::Instant;

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
