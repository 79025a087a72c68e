//! Headless Chromium for the report tests (Debian's `chromium` package;
//! `.ci/run` installs it when missing). Tests skip with a message when it is
//! not installed: the structural HTML checks still run.
#![allow(dead_code)]

use std::path::Path;
use std::process::Command;

/// Flags for a quiet, offline, sandbox-free headless run.
const FLAGS: [&str; 10] = [
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--enable-logging=stderr",
    "--v=0",
];

/// The Chromium command, if one is installed.
pub fn find() -> Option<&'static str> {
    ["chromium", "chromium-browser"].into_iter().find(|c| {
        Command::new(c)
            .arg("--version")
            .output()
            .is_ok_and(|o| o.status.success())
    })
}

/// What a page looked like once loaded.
pub struct Rendered {
    /// The DOM after loading (`--dump-dom`).
    pub dom: String,
    /// Console messages Chromium logged while loading it.
    pub console: Vec<String>,
    /// PNG screenshot bytes.
    pub png: Vec<u8>,
}

/// Load `page` in headless Chromium: its DOM, console messages and a
/// screenshot. `scratch` holds the browser profile and the screenshot.
pub fn render(chromium: &str, page: &Path, scratch: &Path) -> Rendered {
    let url = format!("file://{}", page.display());
    let profile_flag = format!("--user-data-dir={}", scratch.join("profile").display());
    let dom = Command::new(chromium)
        .args(FLAGS)
        .arg(&profile_flag)
        .arg("--dump-dom")
        .arg(&url)
        .output()
        .expect("run chromium");
    assert!(
        dom.status.success(),
        "{}",
        String::from_utf8_lossy(&dom.stderr)
    );
    let log = String::from_utf8_lossy(&dom.stderr);
    let console = log
        .lines()
        .filter(|l| l.contains("CONSOLE"))
        .map(String::from)
        .collect();
    let shot = scratch.join("page.png");
    let s = Command::new(chromium)
        .args(FLAGS)
        .arg(&profile_flag)
        .arg(format!("--screenshot={}", shot.display()))
        .arg("--window-size=1100,1400")
        .arg(&url)
        .output()
        .expect("run chromium");
    assert!(s.status.success(), "{}", String::from_utf8_lossy(&s.stderr));
    Rendered {
        dom: String::from_utf8_lossy(&dom.stdout).into_owned(),
        console,
        png: std::fs::read(&shot).expect("screenshot written"),
    }
}

/// Whether bytes start with the PNG signature (ISO/IEC 15948, section 5.2).
pub fn is_png(bytes: &[u8]) -> bool {
    bytes.starts_with(&[0x89, b'P', b'N', b'G', 0x0D, 0x0A, 0x1A, 0x0A])
}
