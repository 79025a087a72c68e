//! Steps 1–2 of a calibration: match the spectra with the concentration
//! rows (both ways), then sort the rows into used, excluded on purpose and
//! unreadable.

use super::UnreadableStandard;
use crate::error::{Error, Result};
use crate::input::concentrations::{Role, Standard};
use crate::input::spectra::{RowFailure, SpectraFile};
use crate::reference::component::ExcludedStandard;
use std::collections::{HashMap, HashSet};

/// Where each sample of the spectra file is.
pub(super) struct Located<'a> {
    /// Read spectra: sample → (block, row).
    pub read: HashMap<&'a str, (usize, usize)>,
    /// Spectra that could not be read: sample → failure.
    pub failed: HashMap<&'a str, &'a RowFailure>,
}

/// The concentration rows sorted by what happens to them.
pub(super) struct Sorted<'a> {
    /// Rows with a readable spectrum: (row, block, row in block).
    pub used: Vec<(&'a Standard, usize, usize)>,
    /// Rows left out on purpose (role `exclude`).
    pub excluded: Vec<ExcludedStandard>,
    /// Rows whose spectrum could not be read.
    pub unreadable: Vec<UnreadableStandard>,
}

/// Match the spectra with the concentration rows, both ways: every spectrum
/// needs a row, every row a spectrum.
pub(super) fn locate<'a>(file: &'a SpectraFile, standards: &[Standard]) -> Result<Located<'a>> {
    let mut read: HashMap<&str, (usize, usize)> = HashMap::new();
    let mut in_input: Vec<(usize, &str)> = Vec::new();
    for (b, block) in file.blocks.iter().enumerate() {
        for (r, id) in block.ids.iter().enumerate() {
            if read.insert(id.as_str(), (b, r)).is_some() {
                return Err(Error::Invalid(format!(
                    "sample '{id}' appears twice in the spectra file: expected one spectrum per standard"
                )));
            }
            in_input.push((block.positions[r], id.as_str()));
        }
    }
    let failed: HashMap<&str, &RowFailure> = file
        .failures
        .iter()
        .map(|f| (f.sample.as_str(), f))
        .collect();
    for f in &file.failures {
        in_input.push((f.position, f.sample.as_str()));
    }
    in_input.sort();
    let listed: HashSet<&str> = standards.iter().map(|s| s.sample.as_str()).collect();
    let unlisted: Vec<String> = in_input
        .iter()
        .filter(|(_, id)| !listed.contains(id))
        .map(|(_, id)| id.to_string())
        .collect();
    if !unlisted.is_empty() {
        return Err(Error::UnlistedSamples {
            list: "concentration file",
            input: "spectra file",
            samples: unlisted,
            expected: "give every spectrum a row (role `exclude` leaves one out on purpose)",
        });
    }
    let absent: Vec<String> = standards
        .iter()
        .filter(|s| {
            !read.contains_key(s.sample.as_str()) && !failed.contains_key(s.sample.as_str())
        })
        .map(|s| format!("'{}' (line {})", s.sample, s.line))
        .collect();
    if !absent.is_empty() {
        return Err(Error::MissingSamples {
            list: "concentration file",
            input: "spectra file",
            samples: absent,
            expected: "check the sample names",
        });
    }
    Ok(Located { read, failed })
}

/// Sort the rows into used, excluded on purpose and unreadable; an
/// unreadable standard adds a warning.
pub(super) fn sort<'a>(
    standards: &'a [Standard],
    located: &Located,
    warnings: &mut Vec<String>,
) -> Result<Sorted<'a>> {
    let mut sorted = Sorted {
        used: Vec::new(),
        excluded: Vec::new(),
        unreadable: Vec::new(),
    };
    for s in standards {
        if s.role == Role::Exclude {
            sorted.excluded.push(ExcludedStandard {
                sample: s.sample.clone(),
                concentration_mol_per_l: s.concentration_mol_per_l,
                reason: "role `exclude` in the concentration file".into(),
            });
            continue;
        }
        if let Some(f) = located.failed.get(s.sample.as_str()) {
            warnings.push(format!(
                "standard '{}' could not be read and was left out: {}",
                s.sample, f.error
            ));
            sorted.unreadable.push(UnreadableStandard {
                sample: s.sample.clone(),
                error: f.error.to_string(),
            });
            continue;
        }
        if let Some(&(b, r)) = located.read.get(s.sample.as_str()) {
            sorted.used.push((s, b, r));
        }
    }
    if !standards.iter().any(|s| s.role == Role::Standard) {
        return Err(Error::Invalid(
            "every concentration in the concentration file is 0 (or a blank): expected standards of known concentration above 0 besides the blanks".into(),
        ));
    }
    Ok(sorted)
}
