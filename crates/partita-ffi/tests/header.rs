//! The committed header `include/partita.h` is what cbindgen generates from `src/lib.rs` today, and it
//! compiles as C99 and C++11 with every warning an error.
//!
//! After changing the ABI, regenerate it with `PARTITA_BLESS=1 cargo test -p partita-ffi --test header`.

use std::path::{Path, PathBuf};
use std::process::Command;

fn crate_dir() -> PathBuf {
    PathBuf::from(env!("CARGO_MANIFEST_DIR"))
}

fn generate() -> String {
    let dir = crate_dir();
    let config = cbindgen::Config::from_file(dir.join("cbindgen.toml")).expect("cbindgen.toml parses");
    let bindings = cbindgen::Builder::new().with_crate(&dir).with_config(config).generate().expect("cbindgen runs");
    let mut out = Vec::new();
    bindings.write(&mut out);
    String::from_utf8(out).expect("UTF-8 header")
}

#[test]
fn committed_header_is_current() {
    let path = crate_dir().join("include/partita.h");
    let generated = generate();
    if std::env::var_os("PARTITA_BLESS").is_some() {
        std::fs::write(&path, &generated).expect("write the header");
    }
    let committed = std::fs::read_to_string(&path).unwrap_or_default();
    assert!(
        committed == generated,
        "include/partita.h differs from what cbindgen generates; regenerate it with \
         PARTITA_BLESS=1 cargo test -p partita-ffi --test header and commit it"
    );
    assert!(generated.contains("partita_engine_process"), "the header declares the entry points");
}

fn compile(compiler: &str, std: &str, source: &Path, dir: &Path, defines: &[&str]) {
    let out = dir.join(format!("{}.o", source.file_stem().unwrap().to_string_lossy()));
    let status = Command::new(compiler)
        .args([std, "-Wall", "-Wextra", "-Werror", "-pedantic", "-c"])
        .args(defines)
        .arg("-I")
        .arg(crate_dir().join("include"))
        .arg(source)
        .arg("-o")
        .arg(&out)
        .status()
        .unwrap_or_else(|e| panic!("run {compiler}: {e}"));
    assert!(status.success(), "{compiler} {std} failed on the header");
}

#[test]
fn header_compiles_as_c99_and_cpp11() {
    let dir = std::env::temp_dir().join(format!("partita-ffi-header-{}", std::process::id()));
    std::fs::create_dir_all(&dir).unwrap();
    let c = dir.join("use_header.c");
    let body = "#include \"partita.h\"\nint main(void) { PartitaPlanOptions o = {0}; o.struct_size = sizeof o; \
                return (int)partita_abi_version() - PARTITA_ABI_VERSION + (int)o.schedule; }\n";
    std::fs::write(&c, body).unwrap();
    let cpp = dir.join("use_header_cpp.cpp");
    std::fs::write(&cpp, body.replace("= {0}", "= PartitaPlanOptions()")).unwrap();
    for defines in [&[][..], &["-DPARTITA_TEST_ALLOC_COUNT"][..]] {
        compile("cc", "-std=c99", &c, &dir, defines);
        compile("c++", "-std=c++11", &cpp, &dir, defines);
    }
    std::fs::remove_dir_all(&dir).ok();
}
