//! The cache of fitted designs a batch run shares across plates, one per
//! wavelength grid.

use crate::fit::{FitOptions, Model};
use crate::reference::ReferenceSet;
use crate::spectrum::Grid;
use std::sync::{Arc, Mutex};

/// Fitted designs shared by every plate of a run, one per wavelength grid,
/// with the residual checks of `fit` ([`crate::diagnostics`]).
pub struct Models<'a> {
    refs: &'a ReferenceSet,
    options: FitOptions,
    checks: crate::diagnostics::Options,
    cache: Mutex<Vec<(Vec<u64>, ModelEntry)>>,
    warnings: Mutex<Vec<String>>,
}

pub(super) type ModelEntry = Arc<std::result::Result<Model, String>>;

impl<'a> Models<'a> {
    /// An empty cache for a reference set, fit options and checks.
    pub fn new(
        refs: &'a ReferenceSet,
        options: FitOptions,
        checks: crate::diagnostics::Options,
    ) -> Self {
        Models {
            refs,
            options,
            checks,
            cache: Mutex::new(Vec::new()),
            warnings: Mutex::new(Vec::new()),
        }
    }

    /// Build a model for a grid (not cached); its warnings (fallback
    /// solver, similar references, candidates left out) are kept once for
    /// the run.
    pub fn build(&self, grid: &Grid) -> std::result::Result<Model, String> {
        let m = Model::with_checks(grid, self.refs, &self.options, &self.checks)
            .map_err(|e| e.to_string())?;
        let mut new: Vec<String> = m.method_warning().into_iter().collect();
        new.extend(m.separability_warnings());
        new.extend(m.check_warnings().iter().cloned());
        if let Ok(mut w) = self.warnings.lock() {
            for x in new {
                if !w.contains(&x) {
                    w.push(x);
                }
            }
        }
        Ok(m)
    }

    /// Warnings about the models built so far (each once).
    pub fn warnings(&self) -> Vec<String> {
        self.warnings.lock().map(|w| w.clone()).unwrap_or_default()
    }

    /// The model for a grid (built on first use).
    pub fn get(&self, grid: &Grid) -> ModelEntry {
        let key: Vec<u64> = grid.wavelengths_nm().iter().map(|w| w.to_bits()).collect();
        if let Ok(cache) = self.cache.lock()
            && let Some((_, m)) = cache.iter().find(|(k, _)| *k == key)
        {
            return m.clone();
        }
        let built = Arc::new(self.build(grid));
        if let Ok(mut cache) = self.cache.lock() {
            if let Some((_, m)) = cache.iter().find(|(k, _)| *k == key) {
                return m.clone();
            }
            // Keep the cache small: plates of one run share few grids.
            if cache.len() >= 16 {
                cache.remove(0);
            }
            cache.push((key, built.clone()));
        }
        built
    }
}
