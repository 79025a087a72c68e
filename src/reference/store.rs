//! The library folder: one `<name>.toml` component file per component.
//!
//! Reading lists the folder and parses each file; a broken file is reported
//! by name and does not hide the others. Writing is atomic (see
//! [`crate::atomic`]), so a failed or concurrent `library add` never leaves a
//! half-written or mixed file.

use super::component::{self, Component};
use crate::atomic;
use crate::error::{Error, Result};
use std::path::{Path, PathBuf};

/// The components found in a library folder.
#[derive(Debug)]
pub struct Library {
    /// The folder.
    pub dir: PathBuf,
    /// Components that were read, sorted by name.
    pub components: Vec<Component>,
    /// Files that could not be read, with their errors.
    pub broken: Vec<Error>,
    /// Entries named like component files that are not regular files (a
    /// pipe, device or folder, or a link to one): never opened, since a
    /// pipe could hang the run and a device never end. One message each.
    pub skipped: Vec<String>,
}

/// An ordered selection of components: the columns of the model.
#[derive(Debug, Clone)]
pub struct ReferenceSet {
    /// The components, in the order their concentrations are reported.
    pub components: Vec<Component>,
}

impl ReferenceSet {
    /// Component names in order.
    pub fn names(&self) -> Vec<&str> {
        self.components.iter().map(|c| c.name.as_str()).collect()
    }

    /// The wavelength range covered by every component, nm.
    pub fn common_range_nm(&self) -> Option<(f64, f64)> {
        let lo = self
            .components
            .iter()
            .map(|c| c.range_nm().0)
            .fold(f64::NEG_INFINITY, f64::max);
        let hi = self
            .components
            .iter()
            .map(|c| c.range_nm().1)
            .fold(f64::INFINITY, f64::min);
        (lo < hi).then_some((lo, hi))
    }
}

impl Library {
    /// Read every component file in `dir`.
    pub fn open(dir: &Path) -> Result<Self> {
        let shown = dir.display().to_string();
        let entries = std::fs::read_dir(dir).map_err(|e| {
            Error::io(
                format!("library folder {shown}"),
                std::io::Error::new(
                    e.kind(),
                    format!("{e} (set it with --library DIR or UNBLEND_LIBRARY)"),
                ),
            )
        })?;
        let mut paths: Vec<PathBuf> = entries
            .filter_map(|e| e.ok())
            .map(|e| e.path())
            .filter(|p| p.extension().is_some_and(|x| x == "toml"))
            .filter(|p| {
                p.file_name()
                    .is_some_and(|n| !n.to_string_lossy().starts_with('.'))
            })
            .collect();
        paths.sort();
        let mut components = Vec::new();
        let mut broken = Vec::new();
        let mut skipped = Vec::new();
        for path in paths {
            // `metadata` follows links: a link to a regular file is read.
            if !std::fs::metadata(&path).is_ok_and(|m| m.is_file()) {
                skipped.push(format!(
                    "{}: not a regular file (a pipe, device or folder): skipped",
                    path.display()
                ));
                continue;
            }
            match read_component(&path) {
                Ok(c) => components.push(c),
                Err(e) => broken.push(e),
            }
        }
        components.sort_by(|a, b| a.name.cmp(&b.name));
        Ok(Library {
            dir: dir.to_path_buf(),
            components,
            broken,
            skipped,
        })
    }

    /// Find a component by name.
    pub fn get(&self, name: &str) -> Option<&Component> {
        self.components.iter().find(|c| c.name == name)
    }

    /// Select components by name, in the given order; all of them (sorted by
    /// name) when `names` is empty. A broken file in the library is an error
    /// when every component is wanted.
    pub fn select(&self, names: &[String]) -> Result<ReferenceSet> {
        if names.is_empty() {
            if let Some(e) = self.broken.first() {
                return Err(Error::Invalid(format!(
                    "{e} (fix or remove it, or choose components with --components)"
                )));
            }
            if self.components.is_empty() {
                return Err(Error::Invalid(format!(
                    "the library folder {} holds no component files (*.toml): add one with `unblend library add`",
                    self.dir.display()
                )));
            }
            return Ok(ReferenceSet {
                components: self.components.clone(),
            });
        }
        let mut chosen: Vec<Component> = Vec::new();
        for name in names {
            if chosen.iter().any(|c| &c.name == name) {
                return Err(Error::Invalid(format!("component '{name}' is named twice")));
            }
            match self.get(name) {
                Some(c) => chosen.push(c.clone()),
                None => {
                    let path = self.dir.join(format!("{name}.toml"));
                    if let Some(e) = self
                        .broken
                        .iter()
                        .find(|e| e.to_string().contains(&path.display().to_string()))
                    {
                        return Err(Error::Invalid(e.to_string()));
                    }
                    let available = self
                        .components
                        .iter()
                        .map(|c| c.name.as_str())
                        .collect::<Vec<_>>()
                        .join(", ");
                    return Err(Error::UnknownComponent {
                        name: name.clone(),
                        available: if available.is_empty() {
                            "none".into()
                        } else {
                            available
                        },
                    });
                }
            }
        }
        Ok(ReferenceSet { components: chosen })
    }

    /// Path of the file for a component name.
    pub fn path_for(dir: &Path, name: &str) -> PathBuf {
        dir.join(format!("{name}.toml"))
    }

    /// Write a component into `dir` atomically. Without `replace`, an
    /// existing component of that name is an error and stays as it was.
    pub fn add(dir: &Path, c: &Component, replace: bool) -> Result<PathBuf> {
        component::validate_name(&c.name)?;
        std::fs::create_dir_all(dir).map_err(|e| Error::io(dir.display().to_string(), e))?;
        let path = Self::path_for(dir, &c.name);
        let text = c.to_toml();
        atomic::write_with(&path, !replace, |w| w.write_all(text.as_bytes()))?;
        Ok(path)
    }
}

fn read_component(path: &Path) -> Result<Component> {
    let shown = path.display().to_string();
    let bytes = crate::limits::read_regular(path, crate::limits::MAX_COMPONENT_BYTES)?;
    let text = String::from_utf8(bytes).map_err(|e| Error::ComponentFile {
        path: shown.clone(),
        message: format!("not UTF-8 text ({e})"),
    })?;
    let c = Component::from_toml(&text, &shown)?;
    let stem = path
        .file_stem()
        .map(|s| s.to_string_lossy().into_owned())
        .unwrap_or_default();
    if stem != c.name {
        return Err(Error::ComponentFile {
            path: shown,
            message: format!(
                "its name is '{}' but the file is named '{stem}.toml': they must match",
                c.name
            ),
        });
    }
    Ok(c)
}
