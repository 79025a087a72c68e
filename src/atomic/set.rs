//! Replacing several outputs of one run as a set: all old or all new.
//!
//! Every file is first finished (flushed, given its permissions, synced);
//! a failure there leaves every output as it was. Then each existing output
//! is kept under a backup name (a hard link, so no content is copied), the
//! new files are renamed over the outputs one by one, and the backups are
//! removed once every rename has succeeded. If a rename fails, the outputs
//! already replaced get their backups back (or are removed, when they did
//! not exist before), so the set is old again.
//!
//! A run killed outright (SIGKILL, power loss) in the middle of the renames
//! cannot roll back; its backups are then removed as stale by the next run.

use super::{AtomicFile, CommitPhase, temps, test_pause};
use crate::error::{Error, Result};
use std::fs;
use std::path::PathBuf;

/// Put a set of finished files into place together: afterwards either every
/// target has its new content, or (on error) every target has its old one.
/// Files written straight to a device or pipe have no old content to keep
/// and are only flushed.
pub fn commit_all(mut files: Vec<AtomicFile>) -> Result<()> {
    for f in &mut files {
        let shown = f.shown.clone();
        f.finish_writing().map_err(|e| Error::io(shown, e))?;
    }
    let backups = keep_old(&files)?;
    test_pause("before-commit");
    let phase = CommitPhase::begin();
    for i in 0..files.len() {
        if let Err(e) = files[i].rename_into_place(false) {
            let restored = roll_back(&files[..i], &backups);
            drop(phase);
            let shown = &files[i].shown;
            return Err(Error::Invalid(format!("{shown}: {e}: {restored}")));
        }
        if i == 0 {
            test_pause("inside-commit");
        }
    }
    drop(phase);
    for f in files.iter().filter(|f| !f.direct) {
        temps::sync_folder(&f.target);
    }
    for b in backups.into_iter().flatten() {
        let _ = fs::remove_file(&b);
        temps::forget(&b);
    }
    Ok(())
}

/// A backup of each target that exists as a regular file (`None` for a new
/// output or a device). On failure the backups made so far are removed and
/// nothing has changed.
fn keep_old(files: &[AtomicFile]) -> Result<Vec<Option<PathBuf>>> {
    let mut backups = Vec::with_capacity(files.len());
    for f in files {
        let existing = !f.direct && fs::metadata(&f.target).is_ok_and(|m| m.is_file());
        if !existing {
            backups.push(None);
            continue;
        }
        match temps::backup(&f.target) {
            Ok(b) => backups.push(Some(b)),
            Err(e) => {
                for b in backups.into_iter().flatten() {
                    let _ = fs::remove_file(&b);
                    temps::forget(&b);
                }
                return Err(Error::io(
                    f.shown.clone(),
                    std::io::Error::new(e.kind(), format!("cannot keep its old content: {e}")),
                ));
            }
        }
    }
    Ok(backups)
}

/// Undo the renames of `done`: old content back from its backup, new
/// outputs removed. Says what happened, for the error message.
fn roll_back(done: &[AtomicFile], backups: &[Option<PathBuf>]) -> String {
    let mut problems = Vec::new();
    for (f, backup) in done.iter().zip(backups) {
        if f.direct {
            continue;
        }
        let undone = match backup {
            Some(b) => fs::rename(b, &f.target).map(|()| temps::forget(b)),
            None => fs::remove_file(&f.target),
        };
        if let Err(e) = undone {
            let kept = backup
                .as_ref()
                .map(|b| format!(" (its old content is in {})", b.display()))
                .unwrap_or_default();
            problems.push(format!("{} could not be restored: {e}{kept}", f.shown));
        }
    }
    for b in backups.iter().skip(done.len()).flatten() {
        let _ = fs::remove_file(b);
        temps::forget(b);
    }
    if problems.is_empty() {
        "outputs left as they were".into()
    } else {
        problems.join("; ")
    }
}

#[cfg(test)]
mod tests {
    use super::super::stage_with;
    use super::*;
    use std::path::Path;

    fn scratch(tag: &str) -> PathBuf {
        let dir = std::env::temp_dir().join(format!("unblend-set-{tag}-{}", std::process::id()));
        let _ = fs::remove_dir_all(&dir);
        fs::create_dir_all(&dir).unwrap();
        dir
    }

    fn leftovers(dir: &Path) -> Vec<String> {
        fs::read_dir(dir)
            .unwrap()
            .filter_map(|e| e.ok())
            .map(|e| e.file_name().to_string_lossy().into_owned())
            .filter(|n| n.starts_with('.'))
            .collect()
    }

    #[test]
    fn a_set_replaces_every_file_and_leaves_no_backups() {
        let dir = scratch("whole");
        let (a, b) = (dir.join("wells.csv"), dir.join("run-log.txt"));
        fs::write(&a, b"old a").unwrap();
        let files = vec![
            stage_with(&a, |w| w.write_all(b"new a")).unwrap(),
            stage_with(&b, |w| w.write_all(b"new b")).unwrap(),
        ];
        commit_all(files).unwrap();
        assert_eq!(fs::read(&a).unwrap(), b"new a");
        assert_eq!(fs::read(&b).unwrap(), b"new b");
        assert!(leftovers(&dir).is_empty(), "{:?}", leftovers(&dir));
        fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn a_failed_rename_puts_the_whole_old_set_back() {
        let dir = scratch("rollback");
        let (a, b, c) = (dir.join("a.csv"), dir.join("b.csv"), dir.join("c.csv"));
        fs::write(&a, b"old a").unwrap();
        fs::write(&c, b"old c").unwrap();
        let files = vec![
            stage_with(&a, |w| w.write_all(b"new a")).unwrap(),
            stage_with(&b, |w| w.write_all(b"new b")).unwrap(),
            stage_with(&c, |w| w.write_all(b"new c")).unwrap(),
        ];
        // A folder now stands where the third output goes: its rename fails
        // after the first two have been renamed.
        fs::remove_file(&c).unwrap();
        fs::create_dir(&c).unwrap();
        fs::write(c.join("inside"), b"x").unwrap();
        let e = commit_all(files).unwrap_err().to_string();
        assert!(e.contains("outputs left as they were"), "{e}");
        assert_eq!(fs::read(&a).unwrap(), b"old a");
        assert!(!b.exists(), "an output that did not exist is removed again");
        assert!(leftovers(&dir).is_empty(), "{:?}", leftovers(&dir));
        fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn a_failure_before_the_renames_changes_nothing() {
        let dir = scratch("before");
        let a = dir.join("a.csv");
        fs::write(&a, b"old a").unwrap();
        let staged = stage_with(&a, |w| w.write_all(b"new a")).unwrap();
        let r = stage_with(&dir.join("b.csv"), |w| {
            w.write_all(b"half")?;
            Err(std::io::Error::other("disk full"))
        });
        assert!(r.is_err());
        drop(staged);
        assert_eq!(fs::read(&a).unwrap(), b"old a");
        assert!(leftovers(&dir).is_empty(), "{:?}", leftovers(&dir));
        fs::remove_dir_all(&dir).unwrap();
    }
}
