//! Whole-or-nothing file writes, shared by the library store and the outputs.
//!
//! Content goes to a temporary file beside the target (same folder, so the
//! rename stays on one file system), is flushed to disk, and is renamed over
//! the target only when complete. A failed or interrupted run leaves either
//! the old file or the new one, never half of one.
//!
//! Temporaries still open are recorded, so that an interrupted run (Ctrl-C,
//! SIGINT or SIGTERM; see [`remove_temporaries_for_exit`]) removes them before
//! the program exits instead of leaving `.NAME.tmp-…` files beside the outputs.

use crate::error::{Error, Result};
use std::fs::{self, File};
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::Mutex;
use std::sync::atomic::{AtomicU64, Ordering};

static COUNTER: AtomicU64 = AtomicU64::new(0);

/// Temporary files created and not yet renamed or removed.
static OPEN: Mutex<Vec<PathBuf>> = Mutex::new(Vec::new());

fn open_temp(tmp: &Path) {
    if let Ok(mut open) = OPEN.lock() {
        open.push(tmp.to_path_buf());
    }
}

fn close_temp(tmp: &Path) {
    if let Ok(mut open) = OPEN.lock() {
        open.retain(|p| p != tmp);
    }
}

/// Remove every temporary file this process has open, for a run that is
/// being interrupted; the caller (the program, never the library) then exits.
/// The targets are untouched: they keep their previous content (or stay
/// absent). The list stays locked from here on, so no writer can record a
/// new temporary before the process ends.
pub fn remove_temporaries_for_exit() {
    // A poisoned lock still holds the list; the paths are what matters.
    let open = OPEN.lock().unwrap_or_else(|p| p.into_inner());
    for p in open.iter() {
        let _ = fs::remove_file(p);
    }
    // Keep the lock held until the process exits.
    std::mem::forget(open);
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

/// Write to a device or pipe in place (no temporary, no rename, no sync).
fn write_direct<F>(target: &Path, fill: F) -> std::io::Result<()>
where
    F: FnOnce(&mut (dyn Write + Send)) -> std::io::Result<()>,
{
    let file = fs::OpenOptions::new().write(true).open(target)?;
    let mut w = BufWriter::with_capacity(1 << 16, file);
    fill(&mut w)?;
    w.flush()
}

/// A temporary name beside `target`, unique to this process and call.
pub fn temp_path(target: &Path) -> PathBuf {
    let n = COUNTER.fetch_add(1, Ordering::Relaxed);
    let name = target
        .file_name()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_else(|| "output".into());
    let tmp = format!(".{name}.tmp-{}-{n}", std::process::id());
    target.with_file_name(tmp)
}

/// Write a file atomically: `fill` writes the content; on success the file is
/// renamed into place. With `no_clobber`, an existing target is an error and
/// is left untouched (safe against concurrent writers).
pub fn write_with<F>(target: &Path, no_clobber: bool, fill: F) -> Result<()>
where
    F: FnOnce(&mut (dyn Write + Send)) -> std::io::Result<()>,
{
    let shown = target.display().to_string();
    let target = match placement(target) {
        Placement::Direct if no_clobber => {
            return Err(Error::Invalid(format!(
                "{shown} already exists: choose another name or pass --replace"
            )));
        }
        Placement::Direct => return write_direct(target, fill).map_err(|e| Error::io(shown, e)),
        Placement::Replace(path) => path,
    };
    let target = target.as_path();
    let tmp = temp_path(target);
    open_temp(&tmp);
    let result = (|| -> std::io::Result<()> {
        let file = File::create(&tmp)?;
        let mut w = BufWriter::with_capacity(1 << 16, file);
        fill(&mut w)?;
        let file = w.into_inner().map_err(|e| e.into_error())?;
        file.sync_all()?;
        if no_clobber {
            // hard_link fails if the target exists: an atomic "create new".
            fs::hard_link(&tmp, target)?;
            fs::remove_file(&tmp)?;
        } else {
            fs::rename(&tmp, target)?;
        }
        Ok(())
    })();
    if result.is_err() {
        let _ = fs::remove_file(&tmp);
    }
    close_temp(&tmp);
    if let Err(e) = result {
        if no_clobber && e.kind() == std::io::ErrorKind::AlreadyExists {
            return Err(Error::Invalid(format!(
                "{shown} already exists: choose another name or pass --replace"
            )));
        }
        return Err(Error::io(shown, e));
    }
    Ok(())
}

/// Write bytes atomically.
pub fn write_bytes(target: &Path, bytes: &[u8]) -> Result<()> {
    write_with(target, false, |w| w.write_all(bytes))
}

/// A file being written under a temporary name beside its target, for
/// outputs that are filled bit by bit (streamed) rather than in one call.
///
/// Nothing appears at the target until [`AtomicFile::commit`]; dropping an
/// uncommitted file removes the temporary. A run that writes several files
/// can fill them all and commit them only once every one is complete.
pub struct AtomicFile {
    target: PathBuf,
    tmp: PathBuf,
    writer: Option<BufWriter<File>>,
    /// Writing straight to a device or pipe: `tmp` is the target itself.
    direct: bool,
}

impl AtomicFile {
    /// Create the temporary file for `target`.
    pub fn create(target: &Path) -> Result<Self> {
        let real = match placement(target) {
            Placement::Direct => {
                let file = fs::OpenOptions::new()
                    .write(true)
                    .open(target)
                    .map_err(|e| Error::io(target.display().to_string(), e))?;
                return Ok(AtomicFile {
                    target: target.to_path_buf(),
                    tmp: target.to_path_buf(),
                    writer: Some(BufWriter::with_capacity(1 << 16, file)),
                    direct: true,
                });
            }
            Placement::Replace(path) => path,
        };
        let tmp = temp_path(&real);
        open_temp(&tmp);
        let file = match File::create(&tmp) {
            Ok(f) => f,
            Err(e) => {
                close_temp(&tmp);
                return Err(Error::io(target.display().to_string(), e));
            }
        };
        Ok(AtomicFile {
            target: real,
            tmp,
            writer: Some(BufWriter::with_capacity(1 << 16, file)),
            direct: false,
        })
    }

    /// The target path.
    pub fn target(&self) -> &Path {
        &self.target
    }

    /// Flush, sync and rename the file into place.
    pub fn commit(mut self) -> Result<()> {
        let shown = self.target.display().to_string();
        let result = (|| -> std::io::Result<()> {
            let w = self
                .writer
                .take()
                .ok_or_else(|| std::io::Error::other("file already committed"))?;
            let file = w.into_inner().map_err(|e| e.into_error())?;
            if self.direct {
                return Ok(());
            }
            file.sync_all()?;
            fs::rename(&self.tmp, &self.target)
        })();
        if result.is_ok() {
            close_temp(&self.tmp);
        }
        result.map_err(|e| Error::io(shown, e))
    }
}

impl Write for AtomicFile {
    fn write(&mut self, buf: &[u8]) -> std::io::Result<usize> {
        match &mut self.writer {
            Some(w) => w.write(buf),
            None => Err(std::io::Error::other("file already committed")),
        }
    }

    fn write_all(&mut self, buf: &[u8]) -> std::io::Result<()> {
        match &mut self.writer {
            Some(w) => w.write_all(buf),
            None => Err(std::io::Error::other("file already committed")),
        }
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
        if self.direct {
            return;
        }
        if self.writer.take().is_some() || self.tmp.exists() {
            let _ = fs::remove_file(&self.tmp);
        }
        close_temp(&self.tmp);
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
