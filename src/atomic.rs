//! Whole-or-nothing file writes, shared by the library store and the outputs.
//!
//! Content goes to a temporary file beside the target (same folder, so the
//! rename stays on one file system), is flushed to disk, and is renamed over
//! the target only when complete. A failed or interrupted run leaves either
//! the old file or the new one, never half of one.

use crate::error::{Error, Result};
use std::fs::{self, File};
use std::io::{BufWriter, Write};
use std::path::{Path, PathBuf};
use std::sync::atomic::{AtomicU64, Ordering};

static COUNTER: AtomicU64 = AtomicU64::new(0);

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
    let tmp = temp_path(target);
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
    if let Err(e) = result {
        let _ = fs::remove_file(&tmp);
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
}
