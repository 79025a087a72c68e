//! `unblend.Library`: a library folder's components, for listing and
//! inspecting from Python (what `unblend library list/show` print).

use crate::{engine_error, open_library};
use numpy::{IntoPyArray, PyArray1};
use pyo3::prelude::*;
use pyo3::types::PyDict;
use unblend::reference::{Component, Library};

/// The components of a library folder (one `<name>.toml` file each).
#[pyclass(name = "Library", module = "unblend", frozen)]
pub struct PyLibrary {
    library: Library,
}

#[pymethods]
impl PyLibrary {
    /// Read every component file in `dir`; unreadable files are listed in
    /// `broken` and do not hide the others.
    #[new]
    fn new(dir: std::path::PathBuf) -> PyResult<Self> {
        Ok(PyLibrary {
            library: open_library(&dir)?,
        })
    }

    /// The folder, as given.
    #[getter]
    fn path(&self) -> String {
        self.library.dir.display().to_string()
    }

    /// Component names, sorted.
    #[getter]
    fn names(&self) -> Vec<String> {
        self.library
            .components
            .iter()
            .map(|c| c.name.clone())
            .collect()
    }

    /// Messages of the files that could not be read.
    #[getter]
    fn broken(&self) -> Vec<String> {
        self.library.broken.iter().map(|e| e.to_string()).collect()
    }

    fn __len__(&self) -> usize {
        self.library.components.len()
    }

    fn __contains__(&self, name: &str) -> bool {
        self.library.get(name).is_some()
    }

    fn __repr__(&self) -> String {
        format!("Library({:?}, components={:?})", self.path(), self.names())
    }

    /// One component's facts: name, molar mass (g/mol), range (nm), number
    /// of points, note, date, whether it carries a calibration.
    fn info<'py>(&self, py: Python<'py>, name: &str) -> PyResult<Bound<'py, PyDict>> {
        let c = self.component(name)?;
        let d = PyDict::new(py);
        d.set_item("name", &c.name)?;
        d.set_item("molar_mass_g_per_mol", c.molar_mass_g_per_mol)?;
        let (lo, hi) = c.range_nm();
        d.set_item("range_low_nm", lo)?;
        d.set_item("range_high_nm", hi)?;
        d.set_item("n_points", c.grid.len())?;
        d.set_item("note", c.note.as_deref())?;
        d.set_item("created", &c.created)?;
        d.set_item("calibrated", c.calibration().is_some())?;
        Ok(d)
    }

    /// A component's curve: (wavelengths in nm, ε in L/(mol·cm)).
    #[allow(clippy::type_complexity)]
    fn epsilon<'py>(
        &self,
        py: Python<'py>,
        name: &str,
    ) -> PyResult<(Bound<'py, PyArray1<f64>>, Bound<'py, PyArray1<f64>>)> {
        let c = self.component(name)?;
        Ok((
            c.grid.wavelengths_nm().to_vec().into_pyarray(py),
            c.epsilon_l_per_mol_cm.clone().into_pyarray(py),
        ))
    }
}

impl PyLibrary {
    fn component(&self, name: &str) -> PyResult<&Component> {
        self.library.get(name).ok_or_else(|| {
            engine_error(format!(
                "no component '{name}' in {}: it has {}",
                self.path(),
                self.names().join(", ")
            ))
        })
    }
}
