//! Spectra inputs shared by `fit`, `calibrate` and `discover`: one or more
//! files or folders (a folder means its files of known kinds), each read by
//! the reader its content calls for, put together in input order.

use super::Failure;
use super::common::{file_name, read_input, shown};
use crate::input::fields::OverflowMarkers;
use crate::input::spectra::{self, Quantity, ReadOptions, SpectraFile};
use std::path::{Path, PathBuf};

/// File name endings a folder's files are read for (the content decides the
/// reader; other files in a folder are passed over).
pub const KNOWN_EXTENSIONS: &[&str] = &[
    "csv", "tsv", "txt", "dat", "jdx", "dx", "jcamp", "xlsx", "xlsm", "ods", "xls",
];

/// The files an input list names: files as given, each folder's files of
/// known kinds in name order. `-` is standard input.
pub fn expand(inputs: &[PathBuf]) -> Result<Vec<PathBuf>, Failure> {
    let mut out = Vec::new();
    for path in inputs {
        if path.as_os_str() != "-" && path.is_dir() {
            let mut files: Vec<PathBuf> = std::fs::read_dir(path)
                .map_err(|e| Failure::new(format!("{}: {e}", path.display())))?
                .filter_map(|e| e.ok().map(|e| e.path()))
                .filter(|p| p.is_file() && is_known(p))
                .collect();
            if files.is_empty() {
                return Err(Failure::new(format!(
                    "{}: a folder with no spectra files (expected files ending in .{})",
                    path.display(),
                    KNOWN_EXTENSIONS.join(", .")
                )));
            }
            files.sort();
            out.extend(files);
        } else {
            out.push(path.clone());
        }
    }
    Ok(out)
}

fn is_known(path: &Path) -> bool {
    let hidden = path
        .file_name()
        .is_some_and(|n| n.to_string_lossy().starts_with('.'));
    let ext = path
        .extension()
        .map(|e| e.to_string_lossy().to_lowercase())
        .unwrap_or_default();
    !hidden && KNOWN_EXTENSIONS.contains(&ext.as_str())
}

/// The reading options for one file: the user's quantity (if given) and
/// the file stem as the name of a single spectrum.
pub fn options_for(
    path: &Path,
    quantity: Option<Quantity>,
    markers: &OverflowMarkers,
) -> ReadOptions {
    ReadOptions {
        quantity,
        overflow_as_saturated: false,
        overflow_markers: markers.clone(),
        fallback_name: path
            .file_stem()
            .filter(|_| path.as_os_str() != "-")
            .map(|s| s.to_string_lossy().into_owned()),
    }
}

/// Every input read whole, for provenance as well as fitting.
pub struct ReadInputs {
    /// The spectra of all files, in input order.
    pub file: SpectraFile,
    /// The files' names (no folders), in input order.
    pub names: Vec<String>,
    /// SHA-256 of the files' bytes, one after another in input order.
    pub sha256: Vec<u8>,
}

/// Read every input whole into one file of spectra, in input order. The
/// files' warnings come back prefixed with their path.
pub fn read_all(inputs: &[PathBuf], quantity: Option<Quantity>) -> Result<SpectraFile, Failure> {
    read_all_with_provenance(inputs, quantity).map(|r| r.file)
}

/// [`read_all`], with the files' names and checksum.
pub fn read_all_with_provenance(
    inputs: &[PathBuf],
    quantity: Option<Quantity>,
) -> Result<ReadInputs, Failure> {
    use sha2::Digest;
    let files = expand(inputs)?;
    let mut all: Option<SpectraFile> = None;
    let mut hasher = sha2::Sha256::new();
    let mut names = Vec::new();
    for path in &files {
        let shown = shown(path);
        let bytes = read_input(path)?;
        hasher.update(&bytes);
        names.push(file_name(path));
        let options = options_for(path, quantity, &OverflowMarkers::default());
        let mut file =
            spectra::read(&bytes, options).map_err(|e| Failure::new(format!("{shown}: {e}")))?;
        for w in &mut file.warnings {
            *w = format!("{shown}: {w}");
        }
        for s in &mut file.sections {
            s.name = Some(match &s.name {
                Some(n) => format!("{shown}, {n}"),
                None => shown.clone(),
            });
        }
        match all.as_mut() {
            Some(a) => a.append(file),
            None => all = Some(file),
        }
    }
    let file = all.ok_or_else(|| {
        Failure::new("no input given: expected one or more spectra files or folders")
    })?;
    Ok(ReadInputs {
        file,
        names,
        sha256: hasher.finalize().to_vec(),
    })
}

/// One line per part read: where, which layout, which quantity and why, and
/// how many metadata lines (for the run log and `--format json`).
pub fn describe(file: &SpectraFile) -> Vec<String> {
    file.sections
        .iter()
        .map(|s| {
            format!(
                "{}: {} layout, {} sample(s), {} ({}){}",
                s.name.as_deref().unwrap_or("input"),
                s.layout.name(),
                s.positions.len(),
                s.quantity.option_name(),
                s.quantity_from,
                if s.metadata.is_empty() {
                    String::new()
                } else {
                    format!(
                        ", metadata: {}",
                        s.metadata
                            .iter()
                            .map(|(k, v)| if k.is_empty() {
                                v.clone()
                            } else {
                                format!("{k}: {v}")
                            })
                            .collect::<Vec<_>>()
                            .join("; ")
                    )
                }
            )
        })
        .collect()
}
