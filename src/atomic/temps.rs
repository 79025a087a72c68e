//! Temporary files beside an output: created exclusively under names nobody
//! can predict, recorded while open, and recognised when a killed run left
//! them behind.
//!
//! A temporary for `out.csv` is `.out.csv.tmp-PID-RANDOM`; a backup of the
//! old `out.csv` kept while a set of outputs is replaced (see `set`) is
//! `.out.csv.old-PID-RANDOM`. The process id tells a later run whether the
//! writer is still alive: a run that was killed (SIGKILL, power loss) cannot
//! clean up, so the next run on the same output removes the leftovers of
//! processes that no longer exist.

use std::ffi::OsString;
use std::fs;
use std::io;
use std::path::{Path, PathBuf};
use std::sync::{Mutex, MutexGuard};

use tempfile::NamedTempFile;

/// The kind of leftover, as written in its name.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Kind {
    /// New content being written (`.NAME.tmp-…`).
    Temporary,
    /// The previous content, kept until a set of outputs is in place
    /// (`.NAME.old-…`).
    Backup,
}

impl Kind {
    fn tag(self) -> &'static str {
        match self {
            Kind::Temporary => "tmp",
            Kind::Backup => "old",
        }
    }
}

/// Random characters in a name: 10 from 62 letters and digits, about 2⁵⁹
/// names, so a name cannot be guessed in advance.
const RANDOM_CHARS: usize = 10;

/// The name prefix for `target`'s leftovers of one kind from process `pid`.
fn prefix(target: &Path, kind: Kind, pid: u32) -> String {
    format!(".{}.{}-{pid}-", file_name(target), kind.tag())
}

fn file_name(target: &Path) -> String {
    target
        .file_name()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "output".into())
}

/// The folder `target` is in (`.` for a bare name).
pub fn folder(target: &Path) -> &Path {
    match target.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    }
}

/// Paths this process has created and not yet renamed or removed.
static OPEN: Mutex<Vec<PathBuf>> = Mutex::new(Vec::new());

/// The list of open temporaries, locked. A poisoned lock still holds the
/// list; the paths are what matters.
pub fn lock_open() -> MutexGuard<'static, Vec<PathBuf>> {
    OPEN.lock().unwrap_or_else(|p| p.into_inner())
}

/// Record a path to remove if the run is interrupted.
pub fn record(path: &Path) {
    lock_open().push(path.to_path_buf());
}

/// Forget a path (renamed into place or removed).
pub fn forget(path: &Path) {
    lock_open().retain(|p| p != path);
}

/// Create a temporary beside `target`, exclusively (never through an
/// existing name or link), readable and writable by its owner only until
/// [`match_permissions`] gives it the target's.
pub fn create(target: &Path) -> io::Result<NamedTempFile> {
    remove_stale(target);
    // Record before creating, under the lock, so an interrupt between the
    // two cannot leave an unrecorded file: the name is only known after
    // creation, so the lock is held across it.
    let mut open = lock_open();
    let file = tempfile::Builder::new()
        .prefix(&prefix(target, Kind::Temporary, std::process::id()))
        .rand_bytes(RANDOM_CHARS)
        .tempfile_in(folder(target))?;
    open.push(file.path().to_path_buf());
    Ok(file)
}

/// Give a temporary the permissions the output will have: the existing
/// target's, or for a new file what a plain create gives (0666 less the
/// umask) rather than the temporary's owner-only 0600.
pub fn match_permissions(file: &fs::File, target: &Path) -> io::Result<()> {
    match fs::metadata(target) {
        Ok(m) if m.is_file() => file.set_permissions(m.permissions()),
        _ => new_file_permissions(file),
    }
}

#[cfg(unix)]
fn new_file_permissions(file: &fs::File) -> io::Result<()> {
    use std::os::unix::fs::PermissionsExt;
    let mask = current_umask();
    file.set_permissions(fs::Permissions::from_mode(0o666 & !mask))
}

#[cfg(not(unix))]
fn new_file_permissions(_file: &fs::File) -> io::Result<()> {
    Ok(())
}

/// The process's umask, read from /proc (Linux); 022, the usual default,
/// where it cannot be read (common practice, no source).
#[cfg(unix)]
fn current_umask() -> u32 {
    let status = fs::read_to_string("/proc/self/status").unwrap_or_default();
    status
        .lines()
        .find_map(|l| l.strip_prefix("Umask:"))
        .and_then(|v| u32::from_str_radix(v.trim(), 8).ok())
        .unwrap_or(0o022)
}

/// Make a hard link to `target` under a fresh backup name beside it, so the
/// old content survives the rename of a new file over `target`.
pub fn backup(target: &Path) -> io::Result<PathBuf> {
    remove_stale(target);
    let mut open = lock_open();
    let made = tempfile::Builder::new()
        .prefix(&prefix(target, Kind::Backup, std::process::id()))
        .rand_bytes(RANDOM_CHARS)
        .make_in(folder(target), |p| fs::hard_link(target, p))?;
    // `make_in` returns a handle that would delete the link when dropped;
    // keep the path and let the caller decide.
    let path = made.into_temp_path().keep().map_err(|e| e.error)?;
    open.push(path.clone());
    Ok(path)
}

/// Sync the folder holding `target`, so a rename into it survives a power
/// loss. Best effort: some file systems cannot sync a folder, and the file
/// is in place either way.
pub fn sync_folder(target: &Path) {
    #[cfg(unix)]
    if let Ok(dir) = fs::File::open(folder(target)) {
        let _ = dir.sync_all();
    }
    #[cfg(not(unix))]
    let _ = target;
}

/// A leftover beside `target` whose writer no longer runs.
fn is_stale(name: &str, target: &Path) -> bool {
    [Kind::Temporary, Kind::Backup].into_iter().any(|kind| {
        let start = format!(".{}.{}-", file_name(target), kind.tag());
        let Some(rest) = name.strip_prefix(&start) else {
            return false;
        };
        let Some((pid, random)) = rest.split_once('-') else {
            return false;
        };
        let well_formed =
            random.len() == RANDOM_CHARS && random.bytes().all(|b| b.is_ascii_alphanumeric());
        match pid.parse::<u32>() {
            Ok(pid) if well_formed => pid != std::process::id() && !process_alive(pid),
            _ => false,
        }
    })
}

/// Remove the leftovers of killed runs beside `target`. Errors are ignored:
/// a leftover that cannot be removed costs space, not correctness.
pub fn remove_stale(target: &Path) {
    let Ok(entries) = fs::read_dir(folder(target)) else {
        return;
    };
    for entry in entries.flatten() {
        let name: OsString = entry.file_name();
        let Some(name) = name.to_str() else { continue };
        let plain = entry.file_type().is_ok_and(|t| t.is_file());
        if plain && is_stale(name, target) {
            let _ = fs::remove_file(entry.path());
        }
    }
}

/// Whether process `pid` exists on this machine. Linux answers through
/// /proc; elsewhere every writer is taken as alive, so nothing is removed.
/// Runs on other machines sharing a network folder are not seen: their
/// leftovers may be taken for a killed run's (documented in DEVELOPERS.md).
fn process_alive(pid: u32) -> bool {
    let proc = Path::new("/proc");
    if !proc.join("self").exists() {
        return true;
    }
    proc.join(pid.to_string()).exists()
}

#[cfg(test)]
mod tests {
    use super::*;

    fn scratch(tag: &str) -> PathBuf {
        let dir = std::env::temp_dir().join(format!("unblend-temps-{tag}-{}", std::process::id()));
        let _ = fs::remove_dir_all(&dir);
        fs::create_dir_all(&dir).unwrap();
        dir
    }

    /// A process id that is not running: a child that has been waited for.
    fn dead_pid() -> u32 {
        let mut child = std::process::Command::new("true").spawn().unwrap();
        let pid = child.id();
        child.wait().unwrap();
        pid
    }

    #[test]
    fn temporary_names_are_unpredictable_and_created_exclusively() {
        let dir = scratch("names");
        let target = dir.join("out.csv");
        let a = create(&target).unwrap();
        let b = create(&target).unwrap();
        assert_ne!(a.path(), b.path());
        let name = a.path().file_name().unwrap().to_string_lossy().into_owned();
        let expected = format!(".out.csv.tmp-{}-", std::process::id());
        assert!(name.starts_with(&expected), "{name}");
        assert_eq!(name.len(), expected.len() + RANDOM_CHARS);
        assert!(lock_open().iter().any(|p| p == a.path()));
        drop((a, b));
        fs::remove_dir_all(&dir).unwrap();
    }

    #[cfg(unix)]
    #[test]
    fn a_planted_link_at_a_temporary_name_is_never_followed() {
        // Exclusive creation (O_EXCL) fails on an existing name, link or
        // not; the random name then differs, so a planted link's target is
        // never written. Here every name a plain counter would use is planted.
        let dir = scratch("planted");
        let victim = dir.join("victim.txt");
        fs::write(&victim, b"precious").unwrap();
        let target = dir.join("out.csv");
        for n in 0..8 {
            let name = format!(".out.csv.tmp-{}-{n}", std::process::id());
            std::os::unix::fs::symlink(&victim, dir.join(name)).unwrap();
        }
        let mut t = create(&target).unwrap();
        io::Write::write_all(&mut t, b"new").unwrap();
        assert_eq!(fs::read(&victim).unwrap(), b"precious");
        fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn leftovers_of_a_dead_process_are_removed_and_live_ones_kept() {
        let dir = scratch("stale");
        let target = dir.join("wells.csv");
        let dead = dead_pid();
        let stale_tmp = dir.join(format!(".wells.csv.tmp-{dead}-abcdeABCDE"));
        let stale_old = dir.join(format!(".wells.csv.old-{dead}-0123456789"));
        let live = dir.join(format!(".wells.csv.tmp-{}-abcdeABCDE", std::process::id()));
        let other_output = dir.join(format!(".samples.csv.tmp-{dead}-abcdeABCDE"));
        let not_ours = dir.join(format!(".wells.csv.tmp-{dead}-short"));
        for p in [&stale_tmp, &stale_old, &live, &other_output, &not_ours] {
            fs::write(p, b"x").unwrap();
        }
        remove_stale(&target);
        assert!(!stale_tmp.exists() && !stale_old.exists());
        assert!(live.exists(), "this process's own temporary is kept");
        assert!(
            other_output.exists(),
            "another output's leftovers wait for it"
        );
        assert!(
            not_ours.exists(),
            "a name we never make is not ours to remove"
        );
        fs::remove_dir_all(&dir).unwrap();
    }

    #[cfg(unix)]
    #[test]
    fn temporaries_take_the_targets_permissions() {
        use std::os::unix::fs::PermissionsExt;
        let dir = scratch("perm");
        let target = dir.join("out.csv");
        fs::write(&target, b"old").unwrap();
        fs::set_permissions(&target, fs::Permissions::from_mode(0o640)).unwrap();
        let t = create(&target).unwrap();
        match_permissions(t.as_file(), &target).unwrap();
        let mode = t.as_file().metadata().unwrap().permissions().mode() & 0o777;
        assert_eq!(mode, 0o640);
        let fresh = dir.join("new.csv");
        let t = create(&fresh).unwrap();
        match_permissions(t.as_file(), &fresh).unwrap();
        let mode = t.as_file().metadata().unwrap().permissions().mode() & 0o777;
        // A new output gets what a plain create gives (std's File::create).
        let plain = dir.join("plain.csv");
        fs::File::create(&plain).unwrap();
        let plain_mode = fs::metadata(&plain).unwrap().permissions().mode() & 0o777;
        assert_eq!(mode, plain_mode);
        fs::remove_dir_all(&dir).unwrap();
    }
}
