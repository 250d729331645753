//! `partita plan` end to end: the JSON keys, the S1 figures and the latency-budget choice.

use std::process::Command;

fn plan_json(args: &[&str]) -> serde_json::Value {
    let out = Command::new(env!("CARGO_BIN_EXE_partita"))
        .arg("plan")
        .args(args)
        .args(["--json", "--model", "flops"])
        .output()
        .expect("run partita");
    assert!(out.status.success(), "partita plan {args:?} failed: {}", String::from_utf8_lossy(&out.stderr));
    serde_json::from_slice(&out.stdout).expect("plan --json prints JSON")
}

#[test]
fn json_has_the_documented_keys() {
    let v = plan_json(&["--ir-seconds", "10", "--channels", "2", "--block", "64"]);
    for key in ["block_frames", "latency_frames", "levels", "flops_per_sample", "predicted_load_pct"] {
        assert!(v.get(key).is_some(), "missing {key}: {v}");
    }
    for level in v["levels"].as_array().unwrap() {
        for key in ["block_frames", "partitions", "offset_frames", "schedule"] {
            assert!(level.get(key).is_some(), "level missing {key}: {level}");
        }
    }
    assert_eq!(v["block_frames"], 64);
    assert_eq!(v["latency_frames"], 64);
    // S1: within 1.5x of the flop-model optimum of about 914 flops/sample (DESIGN.md section 3).
    let flops = v["flops_per_sample"].as_f64().unwrap();
    assert!(flops <= 1.5 * 914.0, "{flops}");
    // Direct form costs 2 L flops per sample (textbook: L multiply-adds per output sample).
    assert_eq!(v["direct_flops_per_sample"].as_f64().unwrap(), 2.0 * 480_000.0);
    assert!(v.get("measured_load_pct").is_none(), "not measured without --measure");
}

#[test]
fn zero_latency_and_schedules_show_in_the_plan() {
    let zero_workers = ["--ir-seconds", "2", "--block", "128", "--zero-latency", "--schedule", "workers"];
    let v = plan_json(&[&zero_workers[..], &["--min-worker-frames", "0"]].concat());
    assert_eq!(v["latency_frames"], 0);
    assert_eq!(v["head_frames"], 128);
    let levels = v["levels"].as_array().unwrap();
    assert_eq!(levels[0]["schedule"], "sync");
    assert!(levels.iter().skip(1).all(|l| l["schedule"] == "workers"), "{levels:?}");
    // By default a worker level is at least the host period plus 20 ms of audio: 128 + 960 frames here.
    let v = plan_json(&zero_workers);
    let levels = v["levels"].as_array().unwrap();
    for l in levels {
        let n = l["block_frames"].as_u64().unwrap();
        assert_eq!(l["schedule"], if n < 1088 { "sync" } else { "workers" }, "{levels:?}");
    }
    assert!(levels.iter().any(|l| l["schedule"] == "workers"), "{levels:?}");
    // --min-worker-frames keeps the smaller levels in the callback.
    let v = plan_json(&["--ir-seconds", "10", "--block", "64", "--schedule", "workers", "--min-worker-frames", "1024"]);
    let levels = v["levels"].as_array().unwrap();
    for l in levels {
        let want = if l["block_frames"].as_u64().unwrap() < 1024 { "sync" } else { "workers" };
        assert_eq!(l["schedule"], want, "{levels:?}");
    }
    assert!(levels.iter().filter(|l| l["schedule"] == "sync").count() >= 2, "{levels:?}");
    // --min-sliced-frames: 0 slices every level above the block; the default keeps those below 2048 whole.
    for (min, bound) in [("0", 65), ("2048", 2048)] {
        let v = plan_json(&["--ir-seconds", "10", "--block", "64", "--schedule", "sliced", "--min-sliced-frames", min]);
        let levels = v["levels"].as_array().unwrap();
        for l in levels {
            let want = if l["block_frames"].as_u64().unwrap() < bound { "sync" } else { "sliced" };
            assert_eq!(l["schedule"], want, "--min-sliced-frames {min}: {levels:?}");
        }
    }
    let v = plan_json(&["--ir-seconds", "10", "--block", "64", "--schedule", "sliced"]);
    assert!(
        v["levels"].as_array().unwrap().iter().any(|l| l["block_frames"].as_u64().unwrap() < 2048
            && l["block_frames"].as_u64().unwrap() > 64
            && l["schedule"] == "sync"),
        "{v}"
    );
}

#[test]
fn latency_budget_chooses_a_block_that_fits() {
    let v = plan_json(&["--ir-seconds", "3", "--latency-ms", "5"]);
    let latency = v["latency_frames"].as_u64().unwrap();
    assert!(latency <= 240, "5 ms at 48 kHz is 240 frames, got {latency}");
    assert!(v["reason"].as_str().unwrap().contains("fits"), "{v}");
}

#[test]
fn measure_reports_load_and_worst_callback() {
    let v = plan_json(&["--ir-seconds", "0.5", "--block", "256", "--measure", "--measure-seconds", "0.5"]);
    let load = v["measured_load_pct"].as_f64().unwrap();
    let worst = v["worst_callback_pct"].as_f64().unwrap();
    assert!(load > 0.0 && worst > 0.0, "{v}");
    // The heaviest phase's median is a callback time of the run, so at most the worst one.
    let largest = v["levels"].as_array().unwrap().iter().map(|l| l["block_frames"].as_u64().unwrap()).max().unwrap();
    assert_eq!(v["phase_callbacks"].as_u64().unwrap(), largest / 256, "{v}");
    let phase = v["worst_phase_median_pct"].as_f64().unwrap();
    assert!(phase > 0.0 && phase <= worst, "{v}");
}

#[test]
fn measure_reports_its_pacing() {
    for pacing in ["sleep", "spin", "none"] {
        let v = plan_json(&[
            "--ir-seconds",
            "0.2",
            "--block",
            "256",
            "--measure",
            "--measure-seconds",
            "0.3",
            "--pacing",
            pacing,
        ]);
        assert_eq!(v["pacing"], pacing, "{v}");
        assert!(v["measured_load_pct"].as_f64().unwrap() > 0.0, "{v}");
    }
}

#[test]
fn custom_levels_and_bad_input_give_clear_errors() {
    let v = plan_json(&["--ir-seconds", "0.1", "--block", "64", "--levels", "64x3,256x18"]);
    assert_eq!(v["levels"][1]["offset_frames"], 192);
    for (args, needle) in [
        (vec!["--ir-seconds", "0.1", "--levels", "64x2,256x20"], "offset rule"),
        (vec!["--ir-seconds", "-1"], "positive"),
        (vec!["--block", "64"], "--ir-seconds"),
        (vec!["--ir-seconds", "1", "--channels", "3"], "--routing"),
        (vec!["--ir-seconds", "1", "--routing", "matrix:2y3"], "matrix:MxN"),
        (vec!["--ir-seconds", "1", "--measure", "--pacing", "busy"], "sleep, spin or none"),
    ] {
        let out = Command::new(env!("CARGO_BIN_EXE_partita")).arg("plan").args(&args).output().unwrap();
        assert!(!out.status.success(), "{args:?} should fail");
        let err = String::from_utf8_lossy(&out.stderr);
        assert!(err.contains(needle), "{args:?}: {err}");
        // Our own errors are one line; argument errors are clap's (a line, then a hint).
        if err.starts_with("partita: error:") {
            assert_eq!(err.lines().count(), 1, "one clear line, got: {err}");
        } else {
            assert!(err.lines().next().unwrap().contains(needle), "{err}");
        }
    }
}

#[test]
fn workers_and_sliced_s1_report_measured_load_and_worst_callback() {
    // S1 (10 s stereo, block 64) measured briefly: a functional check that the keys are there and
    // sane, not a performance figure (those come from the benches).
    for schedule in ["workers", "sliced"] {
        let v = plan_json(&[
            "--ir-seconds",
            "10",
            "--channels",
            "2",
            "--block",
            "64",
            "--schedule",
            schedule,
            "--measure",
            "--measure-seconds",
            "1",
        ]);
        let load = v["measured_load_pct"].as_f64().unwrap();
        let worst = v["worst_callback_pct"].as_f64().unwrap();
        assert!(load > 0.0 && load < 100.0 && worst > 0.0, "{schedule}: {v}");
        // Levels above the block run on the schedule; under `sliced`, levels below 2,048 frames stay
        // sync (Planner::min_sliced_frames).
        let levels = v["levels"].as_array().unwrap();
        let big = |l: &&serde_json::Value| l["block_frames"].as_u64().unwrap() >= 2048;
        assert!(levels.iter().filter(big).all(|l| l["schedule"] == schedule), "{v}");
        assert!(levels.iter().filter(big).count() >= 1, "{v}");
    }
}

/// `plan --host-period N`: worker levels are at least 2N frames (shorter ones run in the callback), the JSON
/// says the period, and `--measure` calls the engine with N frames per call without a late result.
#[test]
fn host_period_keeps_worker_levels_at_least_two_periods_long() {
    let v = plan_json(&[
        "--ir-seconds",
        "10",
        "--schedule",
        "workers",
        "--host-period",
        "1024",
        "--measure",
        "--measure-seconds",
        "1",
    ]);
    assert_eq!(v["host_period_frames"], 1024);
    // The predicted heaviest call is reported beside the measured heaviest position.
    let predicted = v["predicted_heaviest_call_pct"].as_f64().unwrap();
    assert!(predicted > 0.0 && predicted.is_finite(), "{v}");
    assert!(v["worst_phase_median_pct"].as_f64().is_some(), "{v}");
    let levels = v["levels"].as_array().unwrap();
    let workers: Vec<u64> =
        levels.iter().filter(|l| l["schedule"] == "workers").map(|l| l["block_frames"].as_u64().unwrap()).collect();
    assert!(!workers.is_empty() && workers.iter().all(|&n| n >= 2048), "{levels:?}");
    assert_eq!(v["late_results"], 0, "{v}");
    let out = Command::new(env!("CARGO_BIN_EXE_partita"))
        .args(["plan", "--ir-seconds", "1", "--host-period", "0"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(1));
    assert!(String::from_utf8_lossy(&out.stderr).contains("--host-period"), "{}", String::from_utf8_lossy(&out.stderr));
}

/// `plan --schedule auto`, the default: the planner picks the schedules; for S1 at block 64 under the flop
/// model, the predicted heaviest call stays within the default 8% headroom (where the all-sync plan's does
/// not), and a smaller `--headroom-pct` is honoured. `--offline` takes the cheapest plan without workers.
/// An unknown schedule names the choices.
#[test]
fn schedule_auto_keeps_the_predicted_heaviest_call_within_the_headroom() {
    let s1 = ["--ir-seconds", "10", "--channels", "2", "--block", "64"];
    let sync = plan_json(&[&s1[..], &["--schedule", "sync"]].concat());
    assert!(sync["predicted_heaviest_call_pct"].as_f64().unwrap() > 8.0, "{sync}");
    assert_eq!(sync["schedule"], "sync");
    let auto = plan_json(&s1);
    assert_eq!(auto, plan_json(&[&s1[..], &["--schedule", "auto"]].concat()), "auto is the default");
    assert_eq!(auto["schedule"], "auto (headroom 8%)");
    assert!(auto["predicted_heaviest_call_pct"].as_f64().unwrap() <= 8.0, "{auto}");
    assert!(auto["levels"].as_array().unwrap().iter().any(|l| l["schedule"] != "sync"), "{auto}");
    let tight = plan_json(&[&s1[..], &["--schedule", "auto", "--headroom-pct", "5"]].concat());
    assert!(tight["predicted_heaviest_call_pct"].as_f64().unwrap() <= 5.0, "{tight}");
    let out = Command::new(env!("CARGO_BIN_EXE_partita"))
        .args(["plan", "--ir-seconds", "1", "--schedule", "fast"])
        .output()
        .unwrap();
    assert_eq!(out.status.code(), Some(2), "clap refuses the value");
    assert!(String::from_utf8_lossy(&out.stderr).contains("auto, sync, sliced or workers"));
    for bad in ["0", "-3", "nan"] {
        let out = Command::new(env!("CARGO_BIN_EXE_partita"))
            .args(["plan", "--ir-seconds", "1", "--headroom-pct", bad])
            .output()
            .unwrap();
        assert_eq!(out.status.code(), Some(1), "--headroom-pct {bad}");
        assert!(String::from_utf8_lossy(&out.stderr).contains("--headroom-pct must be a positive number"));
    }
    let offline = plan_json(&[&s1[..], &["--offline"]].concat());
    assert_eq!(offline["offline"], true);
    let levels = offline["levels"].as_array().unwrap();
    assert!(levels.iter().all(|l| l["schedule"] != "workers"), "{levels:?}");
    assert!(
        offline["predicted_load_pct"].as_f64().unwrap() <= sync["predicted_load_pct"].as_f64().unwrap() + 1e-9,
        "{offline}"
    );
}
