//! Running the `relume` binary from the tests, with a scratch folder per test binary.

use std::ffi::OsStr;
use std::path::{Path, PathBuf};
use std::process::{Command, Output};
use std::sync::OnceLock;

/// The binary under test: `RELUME_TEST_BIN` if set (to run a test file against another
/// build), else this build's.
pub fn bin() -> String {
    std::env::var("RELUME_TEST_BIN").unwrap_or_else(|_| env!("CARGO_BIN_EXE_relume").to_string())
}

/// Runs the binary with `args`.
pub fn relume<S: AsRef<OsStr>>(args: &[S]) -> Output {
    Command::new(bin()).args(args).output().unwrap()
}

/// A scratch folder of this test binary, made on first use.
pub fn dir() -> &'static Path {
    static DIR: OnceLock<PathBuf> = OnceLock::new();
    DIR.get_or_init(|| {
        let exe = std::env::current_exe().unwrap();
        let stem = exe.file_stem().unwrap().to_string_lossy().to_string();
        let d = std::env::temp_dir().join(format!("relume-{stem}-{}", std::process::id()));
        std::fs::create_dir_all(&d).unwrap();
        d
    })
}

/// `name` in the scratch folder.
pub fn path(name: &str) -> String {
    dir().join(name).display().to_string()
}

/// Writes `text` to `name` in the scratch folder; returns its path.
pub fn write(name: &str, text: &str) -> String {
    let p = path(name);
    std::fs::write(&p, text).unwrap();
    p
}

/// Standard error as text.
pub fn stderr(o: &Output) -> String {
    String::from_utf8_lossy(&o.stderr).to_string()
}

/// Runs, expects exit 2 without a panic or a backtrace hint, returns standard error.
pub fn fails<S: AsRef<OsStr> + std::fmt::Debug>(args: &[S]) -> String {
    let o = relume(args);
    let err = stderr(&o);
    assert_eq!(o.status.code(), Some(2), "{args:?}: {err}");
    assert!(
        !err.contains("panicked") && !err.contains("RUST_BACKTRACE"),
        "{err}"
    );
    err
}

/// Runs, expects success, returns (standard output, standard error).
pub fn ok<S: AsRef<OsStr> + std::fmt::Debug>(args: &[S]) -> (String, String) {
    let o = relume(args);
    let err = stderr(&o);
    assert!(o.status.success(), "{args:?}: {err}");
    (String::from_utf8_lossy(&o.stdout).to_string(), err)
}
