//! The identity guard: a run never writes an output over one of its inputs.
//!
//! Before anything is read, every output path is compared with every input
//! path by file identity (device and inode on Unix, the canonical path
//! elsewhere), so `in.csv`, `./in.csv`, `../dir/in.csv`, a symbolic link to
//! it and a hard link all count as the same file. Outputs are also compared
//! with each other, so one run does not write two outputs to one file.
//! Standard input and output (`-`) and paths that do not exist yet are never
//! an input's file.

use crate::error::{Error, Result};
use std::path::{Path, PathBuf};

/// A file a run reads or writes, with the role it plays ("input",
/// "--out", "plate map") for messages.
#[derive(Debug, Clone, Copy)]
pub struct Named<'a> {
    /// What the file is to the run, as the user knows it (an option name).
    pub role: &'a str,
    /// The path as given.
    pub path: &'a Path,
}

impl<'a> Named<'a> {
    /// A file with its role.
    pub fn new(role: &'a str, path: &'a Path) -> Self {
        Named { role, path }
    }
}

/// The files among optional ones that were given, with their roles.
pub fn given<'a>(files: &[(&'a str, Option<&'a Path>)]) -> Vec<Named<'a>> {
    files
        .iter()
        .filter_map(|&(role, path)| path.map(|path| Named { role, path }))
        .collect()
}

/// What makes two paths the same file.
#[derive(Debug, PartialEq, Eq)]
enum Identity {
    /// An existing file: device and inode (Unix), or its canonical path.
    Existing(u64, u64, PathBuf),
    /// A file to be created: its folder's canonical path and its name.
    New(PathBuf, std::ffi::OsString),
}

fn is_stream(path: &Path) -> bool {
    path.as_os_str() == "-"
}

#[cfg(unix)]
fn identity(path: &Path) -> Option<Identity> {
    use std::os::unix::fs::MetadataExt;
    match std::fs::metadata(path) {
        Ok(m) => Some(Identity::Existing(m.dev(), m.ino(), PathBuf::new())),
        Err(_) => new_identity(path),
    }
}

#[cfg(not(unix))]
fn identity(path: &Path) -> Option<Identity> {
    match std::fs::canonicalize(path) {
        Ok(p) => Some(Identity::Existing(0, 0, p)),
        Err(_) => new_identity(path),
    }
}

fn new_identity(path: &Path) -> Option<Identity> {
    let name = path.file_name()?.to_os_string();
    let folder = match path.parent() {
        Some(p) if !p.as_os_str().is_empty() => p,
        _ => Path::new("."),
    };
    let folder = std::fs::canonicalize(folder).ok()?;
    Some(Identity::New(folder, name))
}

/// Whether a file is a device or pipe (`/dev/null`, `/dev/stdout`): several
/// roles may share one, since nothing is replaced there.
fn is_device(path: &Path) -> bool {
    std::fs::metadata(path).is_ok_and(|m| !m.is_file() && !m.is_dir())
}

/// Refuse a run whose outputs include one of its inputs, or two outputs that
/// are one file, naming both roles. Call before reading any input.
pub fn refuse_overwriting(inputs: &[Named], outputs: &[Named]) -> Result<()> {
    let ids = |files: &[Named]| -> Vec<Option<Identity>> {
        files
            .iter()
            .map(|f| {
                (!is_stream(f.path) && !is_device(f.path))
                    .then(|| identity(f.path))
                    .flatten()
            })
            .collect()
    };
    let (in_ids, out_ids) = (ids(inputs), ids(outputs));
    for (o, out_id) in outputs.iter().zip(&out_ids) {
        let Some(out_id) = out_id else { continue };
        for (i, in_id) in inputs.iter().zip(&in_ids) {
            if in_id.as_ref() == Some(out_id) {
                return Err(same_file(o, i, "it would overwrite an input"));
            }
        }
    }
    for (k, (a, a_id)) in outputs.iter().zip(&out_ids).enumerate() {
        for (b, b_id) in outputs.iter().zip(&out_ids).skip(k + 1) {
            if a_id.is_some() && a_id == b_id {
                return Err(same_file(b, a, "one would overwrite the other"));
            }
        }
    }
    Ok(())
}

fn same_file(output: &Named, other: &Named, why: &'static str) -> Error {
    Error::SameFile {
        output: format!("{} {}", output.role, output.path.display()),
        other: format!("{} {}", other.role, other.path.display()),
        why,
    }
}

#[cfg(test)]
mod tests {
    use super::*;
    use std::fs;

    fn scratch(tag: &str) -> PathBuf {
        let dir = std::env::temp_dir().join(format!("unblend-guard-{tag}-{}", std::process::id()));
        let _ = fs::remove_dir_all(&dir);
        fs::create_dir_all(&dir).unwrap();
        dir
    }

    fn check(input: &Path, output: &Path) -> Result<()> {
        refuse_overwriting(
            &[Named::new("input", input)],
            &[Named::new("--out", output)],
        )
    }

    #[test]
    fn an_output_naming_the_input_is_refused_by_any_path() {
        let dir = scratch("paths");
        let input = dir.join("in.csv");
        fs::write(&input, b"x").unwrap();
        let dotted = dir.join(".").join("in.csv");
        let roundabout = dir.join("sub").join("..").join("in.csv");
        fs::create_dir(dir.join("sub")).unwrap();
        let hard = dir.join("hard.csv");
        fs::hard_link(&input, &hard).unwrap();
        let mut same = vec![input.clone(), dotted, roundabout, hard];
        #[cfg(unix)]
        {
            let link = dir.join("link.csv");
            std::os::unix::fs::symlink(&input, &link).unwrap();
            same.push(link);
        }
        for out in &same {
            let e = check(&input, out).unwrap_err().to_string();
            assert!(e.contains("--out") && e.contains("input"), "{e}");
            assert!(e.contains("in.csv"), "{e}");
        }
        fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn distinct_files_streams_and_devices_pass() {
        let dir = scratch("distinct");
        let input = dir.join("in.csv");
        fs::write(&input, b"x").unwrap();
        check(&input, &dir.join("out.csv")).unwrap();
        check(Path::new("-"), Path::new("-")).unwrap();
        #[cfg(unix)]
        check(Path::new("/dev/null"), Path::new("/dev/null")).unwrap();
        fs::remove_dir_all(&dir).unwrap();
    }

    #[test]
    fn two_outputs_into_one_new_file_are_refused() {
        let dir = scratch("outs");
        let a = dir.join("r.html");
        let b = dir.join(".").join("r.html");
        let e = refuse_overwriting(&[], &[Named::new("--out", &a), Named::new("--report", &b)])
            .unwrap_err()
            .to_string();
        assert!(e.contains("--report") && e.contains("--out"), "{e}");
        fs::remove_dir_all(&dir).unwrap();
    }
}
