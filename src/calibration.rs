//! The planner's measured cost model, calibrated on this machine and cached in the user's cache
//! directory (`$XDG_CACHE_HOME/partita`, else `~/.cache/partita`). Core takes the costs as data; the
//! file I/O lives here.

use std::path::PathBuf;

use partita_core::{Kernel, MachineCosts};

/// Level blocks the calibration measures: 2^k and 3 * 2^k from 16 to 65,536 frames.
pub fn calibration_sizes() -> Vec<usize> {
    let mut v: Vec<usize> = (4..=16).flat_map(|k| [1usize << k, 3 << (k - 1)]).filter(|&n| n <= 1 << 16).collect();
    v.sort_unstable();
    v.dedup();
    v
}

fn cache_path(kernel: Kernel) -> Option<PathBuf> {
    let base = std::env::var_os("XDG_CACHE_HOME")
        .map(PathBuf::from)
        .or_else(|| std::env::var_os("HOME").map(|h| PathBuf::from(h).join(".cache")))?;
    let name = format!("machine-costs-{}-m{CALIBRATION_METHOD}-{}.json", env!("CARGO_PKG_VERSION"), kernel.name());
    Some(base.join("partita").join(name))
}

/// The calibration method's number, in the cache file's name: a new method never reads an old cache.
/// 2: the least of five batch means per measurement (1: one mean over all repetitions).
const CALIBRATION_METHOD: u32 = 2;

/// Costs for this machine: read from the cache when present, else measured (well under a second) and
/// cached. `fresh` forces a new measurement. A cache that cannot be read or written is ignored.
pub fn machine_costs(kernel: Kernel, fresh: bool) -> MachineCosts {
    let path = cache_path(kernel);
    if !fresh {
        if let Some(costs) = path
            .as_ref()
            .and_then(|p| std::fs::read_to_string(p).ok())
            .and_then(|s| serde_json::from_str::<MachineCosts>(&s).ok())
        {
            return costs;
        }
    }
    let costs = MachineCosts::calibrate(&calibration_sizes(), kernel);
    if let Some(p) = path {
        if let Some(dir) = p.parent() {
            let _ = std::fs::create_dir_all(dir);
        }
        if let Ok(json) = serde_json::to_string_pretty(&costs) {
            let _ = std::fs::write(p, json);
        }
    }
    costs
}
