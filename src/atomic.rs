//! Whole-or-nothing file writes, shared by the library store and the outputs.
//!
//! Content goes to a temporary file beside the target (same folder, so the
//! rename stays on one file system), created exclusively under a name nobody
//! can predict (see `temps`), given the target's permissions, flushed to disk,
//! and renamed over the target only when complete; the folder is then synced.
//! A failed or interrupted run leaves either the old file or the new one,
//! never half of one. Several outputs of one run are replaced as a set (see
//! [`commit_all`]): all old or all new.
//!
//! Interrupts (Ctrl-C, SIGINT, SIGTERM; see [`on_interrupt`]) before the
//! commit point remove the temporaries and the program exits, leaving every
//! output as it was. From the commit point on (the first rename over an output) the run
//! finishes and says what it wrote; a second interrupt after the renames
//! ends it at once. Temporaries of a run that was killed outright are
//! removed by the next run on the same output.

mod set;
pub mod temps;

pub use set::commit_all;

use crate::error::{Error, Result};
use std::fs::{self, File};
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicBool, AtomicU8, Ordering};
use tempfile::TempPath;

/// Nothing has been renamed over an output yet.
const IDLE: u8 = 0;
/// Outputs are being renamed into place: interrupts wait.
const COMMITTING: u8 = 1;
/// At least one output has been replaced.
const COMMITTED: u8 = 2;

static PHASE: AtomicU8 = AtomicU8::new(IDLE);
/// An interrupt arrived after the commit point and was deferred.
static DEFERRED: AtomicBool = AtomicBool::new(false);

/// What the program should do about an interrupt.
#[derive(Debug, Clone, Copy, PartialEq, Eq)]
pub enum Interrupt {
    /// Exit now (the temporaries are already removed), saying this.
    Exit(&'static str),
    /// Let the run finish, saying this: outputs are being or have been
    /// replaced.
    Finish(&'static str),
}

/// Decide what an interrupt (Ctrl-C, SIGINT or SIGTERM) does, from the
/// signal-handling thread; the caller (the program, never the library)
/// prints the message and exits on [`Interrupt::Exit`]. Before the commit
/// point: every temporary is removed and the outputs keep their previous
/// content. Inside or after it: the run finishes, unless an interrupt was
/// already deferred and the renames are over.
pub fn on_interrupt() -> Interrupt {
    let open = temps::lock_open();
    let phase = PHASE.load(Ordering::SeqCst);
    let again = DEFERRED.swap(true, Ordering::SeqCst);
    let message = match phase {
        IDLE => "interrupted: outputs left as they were",
        COMMITTING => {
            return Interrupt::Finish(
                "interrupt received while outputs are being replaced: finishing",
            );
        }
        _ if !again => {
            return Interrupt::Finish("interrupt received after outputs were replaced: finishing");
        }
        _ => "interrupted: outputs already replaced are kept, later ones were not written",
    };
    for p in open.iter() {
        let _ = fs::remove_file(p);
    }
    // Keep the list locked until the process exits, so no writer can record
    // a new temporary or start renaming meanwhile.
    std::mem::forget(open);
    Interrupt::Exit(message)
}

/// The commit point of a run: while one lives, interrupts are deferred.
/// Beginning one waits for an interrupt being handled (which then exits).
struct CommitPhase;

impl CommitPhase {
    fn begin() -> Self {
        let _open = temps::lock_open();
        PHASE.store(COMMITTING, Ordering::SeqCst);
        CommitPhase
    }
}

impl Drop for CommitPhase {
    fn drop(&mut self) {
        let _open = temps::lock_open();
        PHASE.store(COMMITTED, Ordering::SeqCst);
    }
}

/// A test hook: with `UNBLEND_TEST_PAUSE=POINT:MS` in the environment, sleep
/// MS milliseconds at `POINT` (`before-commit`, or `inside-commit` after the
/// first rename), so tests can deliver a signal there.
fn test_pause(point: &str) {
    let Ok(v) = std::env::var("UNBLEND_TEST_PAUSE") else {
        return;
    };
    if let Some((p, ms)) = v.split_once(':')
        && p == point
        && let Ok(ms) = ms.parse::<u64>()
    {
        std::thread::sleep(std::time::Duration::from_millis(ms));
    }
}

/// Where a write to `target` goes.
enum Placement {
    /// An existing device, pipe or socket (`/dev/null`, `/dev/stdout`, a
    /// FIFO): written straight to. Renaming a file over it would replace the
    /// device node itself (as root, `/dev/null` would become a plain file).
    Direct,
    /// A regular file, new or existing, at this path (a symbolic link's
    /// target, so the link stays a link): written beside it, then renamed.
    Replace(PathBuf),
}

fn placement(target: &Path) -> Placement {
    match fs::metadata(target) {
        Ok(m) if !m.is_file() && !m.is_dir() => Placement::Direct,
        Ok(m) if m.is_file() => {
            let linked = fs::symlink_metadata(target).is_ok_and(|l| l.file_type().is_symlink());
            match linked.then(|| fs::canonicalize(target)) {
                Some(Ok(real)) => Placement::Replace(real),
                _ => Placement::Replace(target.to_path_buf()),
            }
        }
        _ => Placement::Replace(target.to_path_buf()),
    }
}

fn exists_error(shown: &str) -> Error {
    Error::Invalid(format!(
        "{shown} already exists: choose another name or pass --replace"
    ))
}

/// Write a file atomically: `fill` writes the content; on success the file is
/// renamed into place. With `no_clobber`, an existing target is an error and
/// is left untouched (safe against concurrent writers).
pub fn write_with<F>(target: &Path, no_clobber: bool, fill: F) -> Result<()>
where
    F: FnOnce(&mut (dyn Write + Send)) -> std::io::Result<()>,
{
    let shown = target.display().to_string();
    if no_clobber && matches!(placement(target), Placement::Direct) {
        return Err(exists_error(&shown));
    }
    let file = stage_with(target, fill)?;
    if no_clobber {
        file.commit_new()
    } else {
        file.commit()
    }
}

/// Write `target`'s content under a temporary name and return it, not yet
/// in place: commit it alone or with others through [`commit_all`].
pub fn stage_with<F>(target: &Path, fill: F) -> Result<AtomicFile>
where
    F: FnOnce(&mut (dyn Write + Send)) -> std::io::Result<()>,
{
    let mut file = AtomicFile::create(target)?;
    let shown = target.display().to_string();
    fill(&mut file).map_err(|e| Error::io(shown, e))?;
    Ok(file)
}

/// Write bytes atomically.
pub fn write_bytes(target: &Path, bytes: &[u8]) -> Result<()> {
    write_with(target, false, |w| w.write_all(bytes))
}

/// A file being written under a temporary name beside its target, for
/// outputs that are filled bit by bit (streamed) rather than in one call.
///
/// Nothing appears at the target until [`AtomicFile::commit`] (or
/// [`commit_all`] for a set); dropping an uncommitted file removes the
/// temporary. Devices and pipes are written in place as the content comes.
pub struct AtomicFile {
    /// Where the content goes (a link's target, so the link stays).
    target: PathBuf,
    /// The path as the user gave it, for messages.
    shown: String,
    writer: Option<BufWriter<File>>,
    /// The temporary's name; `None` when writing straight to a device or
    /// pipe, or once renamed into place.
    temp: Option<TempPath>,
    direct: bool,
}

impl AtomicFile {
    /// Create the temporary file for `target`.
    pub fn create(target: &Path) -> Result<Self> {
        let shown = target.display().to_string();
        let io = |e| Error::io(shown.clone(), e);
        let real = match placement(target) {
            Placement::Direct => {
                let file = fs::OpenOptions::new()
                    .write(true)
                    .open(target)
                    .map_err(io)?;
                return Ok(AtomicFile {
                    target: target.to_path_buf(),
                    shown,
                    writer: Some(BufWriter::with_capacity(1 << 16, file)),
                    temp: None,
                    direct: true,
                });
            }
            Placement::Replace(path) => path,
        };
        let (file, temp) = temps::create(&real).map_err(io)?.into_parts();
        Ok(AtomicFile {
            target: real,
            shown,
            writer: Some(BufWriter::with_capacity(1 << 16, file)),
            temp: Some(temp),
            direct: false,
        })
    }

    /// The target path.
    pub fn target(&self) -> &Path {
        &self.target
    }

    /// Flush the content, give it the target's permissions and sync it to
    /// disk: everything short of the rename, so a failure here leaves the
    /// target untouched.
    fn finish_writing(&mut self) -> std::io::Result<()> {
        let Some(w) = self.writer.take() else {
            return Ok(());
        };
        let file = w.into_inner().map_err(|e| e.into_error())?;
        if self.direct {
            return Ok(());
        }
        temps::match_permissions(&file, &self.target)?;
        file.sync_all()
    }

    /// Rename the finished temporary over the target (the commit point of
    /// this file). With `no_clobber`, fail if the target exists.
    fn rename_into_place(&mut self, no_clobber: bool) -> std::io::Result<()> {
        let Some(temp) = self.temp.take() else {
            return Ok(());
        };
        let path = temp.to_path_buf();
        let renamed = if no_clobber {
            temp.persist_noclobber(&self.target)
        } else {
            temp.persist(&self.target)
        };
        match renamed {
            Ok(()) => {
                temps::forget(&path);
                Ok(())
            }
            Err(e) => {
                self.temp = Some(e.path);
                Err(e.error)
            }
        }
    }

    fn commit_as(mut self, no_clobber: bool) -> Result<()> {
        let shown = self.shown.clone();
        self.finish_writing()
            .map_err(|e| Error::io(shown.clone(), e))?;
        test_pause("before-commit");
        let _phase = (!self.direct).then(CommitPhase::begin);
        match self.rename_into_place(no_clobber) {
            Err(e) if no_clobber && e.kind() == std::io::ErrorKind::AlreadyExists => {
                Err(exists_error(&shown))
            }
            Err(e) => Err(Error::io(shown, e)),
            Ok(()) => {
                temps::sync_folder(&self.target);
                Ok(())
            }
        }
    }

    /// Flush, sync and rename the file into place.
    pub fn commit(self) -> Result<()> {
        self.commit_as(false)
    }

    /// Like [`AtomicFile::commit`], but an existing target is an error and
    /// stays as it was.
    pub fn commit_new(self) -> Result<()> {
        self.commit_as(true)
    }
}

fn committed() -> std::io::Error {
    std::io::Error::other("file already committed")
}

impl Write for AtomicFile {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        self.writer.as_mut().ok_or_else(committed)?.write(buf)
    }

    fn write_all(&mut self, buf: &[u8]) -> std::io::Result<()> {
        self.writer.as_mut().ok_or_else(committed)?.write_all(buf)
    }

    fn flush(&mut self) -> std::io::Result<()> {
        match &mut self.writer {
            Some(w) => w.flush(),
            None => Ok(()),
        }
    }
}

impl Drop for AtomicFile {
    fn drop(&mut self) {
        // The temporary's handle removes the file as it drops.
        if let Some(temp) = self.temp.take() {
            let path = temp.to_path_buf();
            drop(temp);
            temps::forget(&path);
        }
    }
}

#[cfg(test)]
mod tests {
    use super::*;

    #[test]
    fn failed_write_leaves_old_file_and_no_temp() {
        let dir = std::env::temp_dir().join(format!("unblend-atomic-{}", std::process::id()));
        fs::create_dir_all(&dir).unwrap();
        let target = dir.join("out.csv");
        write_bytes(&target, b"old").unwrap();
        let r = write_with(&target, false, |w| {
            w.write_all(b"half")?;
            Err(std::io::Error::other("interrupted"))
        });
        assert!(r.is_err());
        assert_eq!(fs::read(&target).unwrap(), b"old");
        let leftovers: Vec<_> = fs::read_dir(&dir)
            .unwrap()
            .filter_map(|e| e.ok())
            .filter(|e| e.file_name().to_string_lossy().contains(".tmp-"))
            .collect();
        assert!(leftovers.is_empty());
        let e = write_with(&target, true, |w| w.write_all(b"new")).unwrap_err();
        assert!(e.to_string().contains("already exists"));
        assert_eq!(fs::read(&target).unwrap(), b"old");
        fs::remove_dir_all(&dir).unwrap();
    }

    #[cfg(unix)]
    #[test]
    fn devices_and_pipes_are_written_in_place_and_links_stay_links() {
        use std::os::unix::fs::FileTypeExt;
        let dir = std::env::temp_dir().join(format!("unblend-atomic-d-{}", std::process::id()));
        fs::create_dir_all(&dir).unwrap();
        // A named pipe stands in for /dev/null or /dev/stdout: renaming a
        // temporary over it would replace the node with a plain file.
        let fifo = dir.join("pipe");
        let made = std::process::Command::new("mkfifo").arg(&fifo).status();
        if made.is_ok_and(|s| s.success()) {
            for streamed in [false, true] {
                let path = fifo.clone();
                let reader = std::thread::spawn(move || fs::read(path).unwrap());
                if streamed {
                    let mut f = AtomicFile::create(&fifo).unwrap();
                    f.write_all(b"streamed").unwrap();
                    f.commit().unwrap();
                } else {
                    write_bytes(&fifo, b"whole").unwrap();
                }
                let got = reader.join().unwrap();
                assert_eq!(
                    got,
                    if streamed {
                        &b"streamed"[..]
                    } else {
                        &b"whole"[..]
                    }
                );
                assert!(fs::symlink_metadata(&fifo).unwrap().file_type().is_fifo());
            }
        }
        let real = dir.join("real.csv");
        let link = dir.join("link.csv");
        write_bytes(&real, b"old").unwrap();
        std::os::unix::fs::symlink(&real, &link).unwrap();
        write_bytes(&link, b"new").unwrap();
        assert!(
            fs::symlink_metadata(&link)
                .unwrap()
                .file_type()
                .is_symlink()
        );
        assert_eq!(fs::read(&real).unwrap(), b"new");
        fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn streamed_file_appears_only_on_commit() {
        let dir = std::env::temp_dir().join(format!("unblend-atomic-s-{}", std::process::id()));
        fs::create_dir_all(&dir).unwrap();
        let target = dir.join("wells.csv");
        let mut f = AtomicFile::create(&target).unwrap();
        f.write_all(b"a,b\n").unwrap();
        assert!(!target.exists());
        f.commit().unwrap();
        assert_eq!(fs::read(&target).unwrap(), b"a,b\n");
        let mut g = AtomicFile::create(&target).unwrap();
        g.write_all(b"half").unwrap();
        drop(g);
        assert_eq!(fs::read(&target).unwrap(), b"a,b\n");
        let leftovers = fs::read_dir(&dir)
            .unwrap()
            .filter_map(|e| e.ok())
            .filter(|e| e.file_name().to_string_lossy().contains(".tmp-"))
            .count();
        assert_eq!(leftovers, 0);
        fs::remove_dir_all(&dir).unwrap();
    }
}
