//! Helpers shared by the integration tests: a scratch folder removed on
//! drop, the binary runner, and the typed JSON of `fit --format json` (typed,
//! so a schema change is caught). Each test file uses only some of them.
#![allow(dead_code)]

pub mod chromium;

use serde::Deserialize;
use std::io::Write;
use std::path::{Path, PathBuf};
use std::process::{Command, Stdio};

/// The binary under test.
pub const BIN: &str = env!("CARGO_BIN_EXE_unblend");
/// The repository root (the demo library, demo data).
pub const ROOT: &str = env!("CARGO_MANIFEST_DIR");

/// A scratch folder, new and empty, removed when the test ends.
pub struct Scratch(PathBuf);

impl Scratch {
    /// `unblend-<tag>-<pid>` in the system's temporary folder.
    pub fn new(tag: &str) -> Self {
        let p = std::env::temp_dir().join(format!("unblend-{tag}-{}", std::process::id()));
        let _ = std::fs::remove_dir_all(&p);
        std::fs::create_dir_all(&p).expect("scratch folder");
        Scratch(p)
    }

    /// Write `content` to `name` in the folder; returns the path as text.
    pub fn write(&self, name: &str, content: &[u8]) -> String {
        let p = self.0.join(name);
        std::fs::write(&p, content).expect("write test file");
        p.display().to_string()
    }
}

impl std::ops::Deref for Scratch {
    type Target = Path;
    fn deref(&self) -> &Path {
        &self.0
    }
}

impl AsRef<Path> for Scratch {
    fn as_ref(&self) -> &Path {
        &self.0
    }
}

impl Drop for Scratch {
    fn drop(&mut self) {
        let _ = std::fs::remove_dir_all(&self.0);
    }
}

/// What a run of the binary gave.
pub struct Run {
    /// Exit code.
    pub code: i32,
    /// Standard output.
    pub stdout: String,
    /// Standard error.
    pub stderr: String,
}

/// Run the binary in `dir` with `args`, optional standard input and extra
/// environment (`UNBLEND_LIBRARY` is cleared first). Fails the test if the
/// program panicked: nothing panics on user input.
pub fn run_in(dir: &Path, args: &[&str], stdin: Option<&[u8]>, env: &[(&str, &str)]) -> Run {
    let mut cmd = Command::new(BIN);
    cmd.args(args)
        .current_dir(dir)
        .env_remove("UNBLEND_LIBRARY");
    for (k, v) in env {
        cmd.env(k, v);
    }
    cmd.stdin(if stdin.is_some() {
        Stdio::piped()
    } else {
        Stdio::null()
    });
    cmd.stdout(Stdio::piped()).stderr(Stdio::piped());
    let mut child = cmd.spawn().expect("binary starts");
    if let Some(bytes) = stdin {
        child
            .stdin
            .take()
            .expect("piped")
            .write_all(bytes)
            .expect("stdin written");
    }
    let out = child.wait_with_output().expect("binary finishes");
    let r = Run {
        code: out.status.code().expect("exited normally, not by a signal"),
        stdout: String::from_utf8_lossy(&out.stdout).into_owned(),
        stderr: String::from_utf8_lossy(&out.stderr).into_owned(),
    };
    assert!(
        !r.stderr.contains("panicked"),
        "{args:?} panicked:\n{}",
        r.stderr
    );
    r
}

/// The JSON document of `fit --format json`.
#[derive(Debug, Deserialize)]
pub struct FitJson {
    pub samples: Vec<SampleJson>,
    pub failed: Vec<FailedJson>,
    pub warnings: Vec<String>,
    pub components: Vec<String>,
}

/// One fitted sample.
#[derive(Debug, Deserialize, PartialEq)]
pub struct SampleJson {
    pub sample: String,
    pub components: Vec<ComponentJson>,
    pub residual_rms: f64,
    pub r_squared: Option<f64>,
    pub range_nm: [f64; 2],
    pub n_points: usize,
    pub pathlength_cm: f64,
    pub flags: Vec<String>,
}

/// One component's result in a sample.
#[derive(Debug, Deserialize, PartialEq)]
pub struct ComponentJson {
    pub name: String,
    pub concentration_mol_per_l: f64,
    pub std_error_mol_per_l: Option<f64>,
    pub concentration_mg_per_l: Option<f64>,
    pub mole_fraction: Option<f64>,
}

/// A sample that could not be fitted.
#[derive(Debug, Deserialize)]
pub struct FailedJson {
    pub sample: String,
    pub error: String,
}
