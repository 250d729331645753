//! Builds the C test programs in `tests/c/` with `cc` against this crate's shared and static libraries
//! and runs them: rendering against a direct-form convolution in C (mono, stereo, true stereo, from a
//! WAV file), a swap from a second thread checked against the crossfade, every refusal path, and (the
//! library carries the `test-alloc-count` feature in tests) no allocation in process, status and
//! next_event. Each program also runs once built with AddressSanitizer and LeakSanitizer
//! (`-fsanitize=address`, linked to the shared library); that instruments only the C side: the Rust library is not instrumented, so
//! its own heap errors would not be seen (its leaks would, as LeakSanitizer checks the whole process).
//!
//! The libraries are the ones `cargo test` built for this crate (next to the test executable).

use std::path::{Path, PathBuf};
use std::process::Command;

const PROGRAMS: [&str; 3] = ["render", "swap", "refusals"];

fn crate_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

/// The directory holding libpartita_ffi.so and .a: the test executable's `deps` folder or its parent.
fn lib_dir() -> PathBuf {
    let exe = std::env::current_exe().expect("test executable path");
    let deps = exe.parent().expect("deps dir").to_path_buf();
    for dir in [deps.clone(), deps.parent().expect("profile dir").to_path_buf()] {
        if dir.join("libpartita_ffi.so").exists() && dir.join("libpartita_ffi.a").exists() {
            return dir;
        }
    }
    panic!("libpartita_ffi.so and .a not found next to {}", exe.display());
}

/// Links `libpartita_ffi.so` under its soname (libpartita_ffi.so.1) in `dir`, as an installed library
/// would be.
fn install_shared(lib: &Path, dir: &Path) {
    let versioned = dir.join("libpartita_ffi.so.1");
    std::fs::copy(lib.join("libpartita_ffi.so"), &versioned).expect("copy the shared library");
    let plain = dir.join("libpartita_ffi.so");
    std::fs::remove_file(&plain).ok();
    std::os::unix::fs::symlink("libpartita_ffi.so.1", &plain).expect("symlink");
}

fn build(program: &str, dir: &Path, lib: &Path, link: &str, asan: bool) -> PathBuf {
    let exe = dir.join(format!("{program}-{link}{}", if asan { "-asan" } else { "" }));
    let mut cc = Command::new("cc");
    cc.args([
        "-std=c99",
        "-D_DEFAULT_SOURCE",
        "-O1",
        "-g",
        "-Wall",
        "-Wextra",
        "-Werror",
        "-DPARTITA_TEST_ALLOC_COUNT",
    ])
    .arg("-I")
    .arg(crate_dir().join("include"))
    .arg(crate_dir().join("tests/c").join(format!("{program}.c")))
    .arg("-o")
    .arg(&exe);
    if asan {
        cc.arg("-fsanitize=address").arg("-fno-omit-frame-pointer");
    }
    match link {
        "shared" => {
            cc.arg("-L").arg(dir).arg(format!("-Wl,-rpath,{}", dir.display())).arg("-lpartita_ffi");
        }
        _ => {
            cc.arg(lib.join("libpartita_ffi.a"));
        }
    }
    // What a static Rust library needs from the system (`rustc --print native-static-libs`).
    cc.args(["-lpthread", "-ldl", "-lm", "-lgcc_s", "-lc"]);
    let out = cc.output().unwrap_or_else(|e| panic!("run cc: {e}"));
    assert!(out.status.success(), "cc {program} ({link}) failed:\n{}", String::from_utf8_lossy(&out.stderr));
    exe
}

fn run(exe: &Path, dir: &Path) -> String {
    let out = Command::new(exe).arg(dir).output().unwrap_or_else(|e| panic!("run {}: {e}", exe.display()));
    let text = format!("{}{}", String::from_utf8_lossy(&out.stdout), String::from_utf8_lossy(&out.stderr));
    assert!(out.status.success(), "{} failed:\n{text}", exe.display());
    text
}

fn scratch(name: &str) -> PathBuf {
    let dir = std::env::temp_dir().join(format!("partita-ffi-c-{name}-{}", std::process::id()));
    std::fs::create_dir_all(&dir).expect("scratch dir");
    dir
}

fn run_all(name: &str, asan: bool) {
    let lib = lib_dir();
    let dir = scratch(name);
    install_shared(&lib, &dir);
    for program in PROGRAMS {
        // Under ASan the shared build only (the static one is the same C code and library).
        let links: &[&str] = if asan { &["shared"] } else { &["shared", "static"] };
        for &link in links {
            let exe = build(program, &dir, &lib, link, asan);
            let text = run(&exe, &dir);
            println!("--- {program} ({link}{}) ---\n{text}", if asan { ", ASan" } else { "" });
            assert!(text.contains(&format!("{program}: ok (0 failures)")), "{program}: no success line:\n{text}");
        }
    }
    std::fs::remove_dir_all(&dir).ok();
}

#[test]
fn c_programs_shared_and_static() {
    run_all("plain", false);
}

#[test]
fn c_programs_under_address_sanitizer() {
    run_all("asan", true);
}

/// The C example in `examples/c/` builds against the header and the shared library, and renders a raw
/// mono file through a WAV IR long enough for the automatic plan to have levels larger than the call, a
/// 1-channel IR (mono) and a 2-channel one (mono to stereo): the output has the input's frames plus the
/// latency and one second of tail, and every sample is the direct convolution's (so no level's contribution
/// went missing while the example ran faster than real time).
#[test]
fn c_example_builds_and_renders() {
    let lib = lib_dir();
    let dir = scratch("example");
    install_shared(&lib, &dir);
    let source = crate_dir().join("../../examples/c/partita_render.c");
    let exe = dir.join("partita_render");
    let out = Command::new("cc")
        .args(["-std=c99", "-Wall", "-Wextra", "-Werror", "-O1"])
        .arg("-I")
        .arg(crate_dir().join("include"))
        .arg(&source)
        .arg("-o")
        .arg(&exe)
        .arg("-L")
        .arg(&dir)
        .arg(format!("-Wl,-rpath,{}", dir.display()))
        .args(["-lpartita_ffi", "-lpthread"])
        .output()
        .expect("run cc");
    assert!(out.status.success(), "cc example failed:\n{}", String::from_utf8_lossy(&out.stderr));

    // One second at 48 kHz: the automatic plan puts its larger levels on workers.
    let mono = [example_ir(EXAMPLE_RATE as usize, 1)];
    render_example(&exe, &dir, "mono", &mono);
    // A 2-channel IR with a mono input: mono to stereo, as the example's header comment promises.
    let stereo = [example_ir(EXAMPLE_RATE as usize, 2), example_ir(EXAMPLE_RATE as usize, 3)];
    render_example(&exe, &dir, "mono-to-stereo", &stereo);
    std::fs::remove_dir_all(&dir).ok();
}

const EXAMPLE_RATE: u32 = 48_000;

/// A decaying pseudo-random IR (a small LCG, so each seed gives other taps).
fn example_ir(frames: usize, seed: u32) -> Vec<f32> {
    let mut state = seed.wrapping_mul(2_654_435_761).wrapping_add(1);
    (0..frames)
        .map(|i| {
            state = state.wrapping_mul(1_664_525).wrapping_add(1_013_904_223);
            let noise = (state >> 8) as f32 / (1u32 << 24) as f32 - 0.5;
            noise * (-(i as f32) / 6000.0).exp()
        })
        .collect()
}

/// Runs the example with a mono input (impulses every 10 ms) through `ir` (written as both IR files, so
/// the swap halfway through leaves the output unchanged), and checks the output: input plus latency plus
/// one second of frames, output channel `o` the input convolved with IR channel `o`.
fn render_example(exe: &Path, dir: &Path, name: &str, ir: &[Vec<f32>]) {
    let channels: Vec<&[f32]> = ir.iter().map(Vec::as_slice).collect();
    for file in ["ir1", "ir2"] {
        partita_io::write_wav(
            &dir.join(format!("{name}-{file}.wav")),
            &channels,
            EXAMPLE_RATE,
            partita_io::SampleFormat::F32,
            partita_io::Dither::default(),
        )
        .expect("write IR");
    }
    let input: Vec<f32> = (0..4800).map(|i| if i % 480 == 0 { 0.5 } else { 0.0 }).collect();
    let bytes: Vec<u8> = input.iter().flat_map(|v| v.to_le_bytes()).collect();
    std::fs::write(dir.join(format!("{name}-in.f32")), bytes).expect("write input");
    let path = |suffix: &str| dir.join(format!("{name}-{suffix}"));
    let text = run_args(exe, &[path("ir1.wav"), path("ir2.wav"), "1".into(), path("in.f32"), path("out.f32")]);
    println!("--- example, {name} ---\n{text}");
    assert!(
        text.contains("swapped IR") || text.contains("no swap happened"),
        "{name}: the example says whether the swap happened:\n{text}"
    );
    let rendered = std::fs::read(path("out.f32")).expect("output written");
    let samples: Vec<f32> = rendered.chunks_exact(4).map(|b| f32::from_le_bytes([b[0], b[1], b[2], b[3]])).collect();
    let latency: usize = text
        .split("latency ")
        .nth(1)
        .and_then(|s| s.split_whitespace().next())
        .and_then(|s| s.parse().ok())
        .expect("the example prints its latency");
    let outputs = ir.len();
    let frames = input.len() + latency + EXAMPLE_RATE as usize;
    assert_eq!(samples.len(), frames * outputs, "{name}: output length");
    for (o, taps) in ir.iter().enumerate() {
        let mut expected = vec![0.0f64; frames];
        for (k, &x) in input.iter().enumerate().filter(|(_, &x)| x != 0.0) {
            for (j, &h) in taps.iter().enumerate() {
                if let Some(e) = expected.get_mut(latency + k + j) {
                    *e += f64::from(x) * f64::from(h);
                }
            }
        }
        let peak = expected.iter().fold(0.0f64, |m, v| m.max(v.abs()));
        let worst =
            (0..frames).map(|n| (f64::from(samples[n * outputs + o]) - expected[n]).abs()).fold(0.0f64, f64::max);
        assert!(worst <= 2e-6 * peak, "{name}: output {o} differs by {worst:e} (peak {peak:e})");
    }
}

fn run_args(exe: &Path, args: &[PathBuf]) -> String {
    let out = Command::new(exe).args(args).output().unwrap_or_else(|e| panic!("run {}: {e}", exe.display()));
    let text = format!("{}{}", String::from_utf8_lossy(&out.stdout), String::from_utf8_lossy(&out.stderr));
    assert!(out.status.success(), "{} failed:\n{text}", exe.display());
    text
}

/// The shared library exports only `partita_*` symbols, and its soname is versioned.
#[test]
fn shared_library_exports_only_partita_symbols() {
    let lib = lib_dir().join("libpartita_ffi.so");
    let out = Command::new("nm").args(["-D", "--defined-only"]).arg(&lib).output().expect("run nm");
    assert!(out.status.success(), "nm failed");
    let text = String::from_utf8_lossy(&out.stdout);
    let names: Vec<&str> = text.lines().filter_map(|l| l.split_whitespace().nth(2)).collect();
    assert!(names.contains(&"partita_engine_process"), "exports: {names:?}");
    let foreign: Vec<&&str> = names.iter().filter(|n| !n.starts_with("partita_")).collect();
    assert!(foreign.is_empty(), "symbols without the partita_ prefix: {foreign:?}");
    let out = Command::new("readelf").arg("-d").arg(&lib).output().expect("run readelf");
    assert!(String::from_utf8_lossy(&out.stdout).contains("[libpartita_ffi.so.1]"), "soname is libpartita_ffi.so.1");
}
