//! The Python binding: the engine as the extension module `unblend._unblend`
//! (built by maturin from the repository's `pyproject.toml`).
//!
//! In: a 2-D float64 array of absorbances (one row per spectrum, AU), the
//! wavelengths of its columns (nm, ascending) and the run's options. Out:
//! the tidy table's columns as numpy arrays (see [`columns`]); the Python
//! package (`python/unblend/__init__.py`) turns them into a pyarrow Table or
//! a pandas DataFrame. Each row is fitted by `fit::Model::fit_one`, the
//! function the command's streamed fit uses, with rayon across fixed chunks
//! of `fit::CHUNK` spectra: the numbers are those of `unblend fit`, to the
//! last digit, whatever the thread count. A C-contiguous array is read in
//! place (no copy) and the GIL is released while fitting.

mod columns;
mod library;

use columns::{COMPONENT_FLOATS, COUNTS, Columns, SAMPLE_FLOATS, TEXTS};
use numpy::{IntoPyArray, PyReadonlyArray2};
use pyo3::create_exception;
use pyo3::prelude::*;
use pyo3::types::PyDict;
use rayon::prelude::*;
use std::path::PathBuf;
use unblend::diagnostics::{self, ResidualOptions};
use unblend::fit::{CHUNK, FailedSample, FitOptions, Model, Outcome};
use unblend::preprocess::Baseline;
use unblend::reference::{Library, ReferenceSet};
use unblend::spectrum::Grid;

create_exception!(
    _unblend,
    UnblendError,
    pyo3::exceptions::PyValueError,
    "An error from the unblend engine; the message says what and where."
);

/// The options of a fit, as the Python side passes them (a dict whose keys
/// are these field names; defaults are filled in by the Python side).
#[derive(FromPyObject)]
#[pyo3(from_item_all)]
struct Request {
    library: PathBuf,
    components: Vec<String>,
    baseline: String,
    pathlength_cm: f64,
    range_nm: Option<(f64, f64)>,
    checks: bool,
    noise_au: Option<f64>,
    alarm_rate: f64,
    max_absorbance_au: Option<f64>,
    screen_with: Option<PathBuf>,
    weights: String,
}

fn engine_error(e: impl std::fmt::Display) -> PyErr {
    UnblendError::new_err(e.to_string())
}

impl Request {
    fn fit_options(&self) -> PyResult<FitOptions> {
        let baseline = match self.baseline.as_str() {
            "none" => Baseline::None,
            "offset" => Baseline::Offset,
            "linear" => Baseline::Linear,
            other => {
                return Err(engine_error(format!(
                    "baseline '{other}': expected 'none', 'offset' or 'linear'"
                )));
            }
        };
        if let Some((lo, hi)) = self.range_nm
            && !(lo.is_finite() && hi.is_finite() && lo > 0.0 && hi > lo)
        {
            return Err(engine_error(format!(
                "range_nm ({lo}, {hi}): expected 0 < low < high in nm"
            )));
        }
        Ok(FitOptions {
            baseline,
            window_nm: self.range_nm,
            pathlength_cm: self.pathlength_cm,
        })
    }

    /// The checks, as `unblend fit`'s flags make them.
    fn checks(&self) -> PyResult<diagnostics::Options> {
        let candidates = match &self.screen_with {
            None => None,
            Some(_) if !self.checks => {
                return Err(engine_error(
                    "screen_with tries candidates on samples the residual tests flag: it needs checks=True",
                ));
            }
            Some(dir) => Some(ReferenceSet {
                components: open_library(dir)?.components,
            }),
        };
        let weights = match self.weights.as_str() {
            "none" => diagnostics::Weights::None,
            "estimated" => diagnostics::Weights::Estimated,
            other => {
                return Err(engine_error(format!(
                    "weights '{other}': expected 'none' or 'estimated'"
                )));
            }
        };
        let checks = diagnostics::Options {
            weights,
            residual: self.checks.then_some(ResidualOptions {
                noise_au: self.noise_au,
                alarm_rate: self.alarm_rate,
            }),
            max_absorbance_au: self.max_absorbance_au,
            candidates,
        };
        checks.validate().map_err(engine_error)?;
        Ok(checks)
    }
}

fn open_library(dir: &std::path::Path) -> PyResult<Library> {
    Library::open(dir).map_err(|e| engine_error(format!("{}: {e}", dir.display())))
}

/// A model for one grid, with its component names and the run's warnings.
struct Prepared {
    model: Model,
    components: Vec<String>,
    warnings: Vec<String>,
}

/// Build the model for a grid and a request.
fn build_model(wavelengths_nm: Vec<f64>, request: &Request) -> PyResult<Prepared> {
    let options = request.fit_options()?;
    if !(options.pathlength_cm.is_finite() && options.pathlength_cm > 0.0) {
        return Err(engine_error(format!(
            "pathlength {} cm: expected a positive number of cm",
            options.pathlength_cm
        )));
    }
    let checks = request.checks()?;
    let refs = open_library(&request.library)?
        .select(&request.components)
        .map_err(engine_error)?;
    let grid = Grid::new(wavelengths_nm).map_err(|e| engine_error(format!("wavelengths: {e}")))?;
    let model = Model::with_checks(&grid, &refs, &options, &checks).map_err(engine_error)?;
    let warnings = model
        .method_warning()
        .into_iter()
        .chain(model.separability_warnings())
        .chain(model.check_warnings().iter().cloned())
        .collect();
    Ok(Prepared {
        model,
        components: refs.names().iter().map(|s| s.to_string()).collect(),
        warnings,
    })
}

/// Why a row cannot be fitted before it reaches the solver: a value that is
/// not a finite number (the CSV reader refuses such a row too).
fn bad_value(row: &[f64], wavelengths_nm: &[f64]) -> Option<String> {
    let i = row.iter().position(|v| !v.is_finite())?;
    Some(format!(
        "absorbance at {} nm is {}: expected a finite number of AU",
        wavelengths_nm[i], row[i]
    ))
}

/// Fit every row of `data` (rows of `wavelengths_nm.len()` values) and
/// build the table, in parallel over fixed chunks, rows in input order.
fn fit_table(model: &Model, data: &[f64], wavelengths_nm: &[f64], pathlength_cm: f64) -> Columns {
    let n = wavelengths_nm.len();
    let rows = data.len() / n;
    let starts: Vec<usize> = (0..rows).step_by(CHUNK).collect();
    let pieces: Vec<Columns> = starts
        .par_iter()
        .map(|&first| {
            let mut ws = model.prepared.workspace();
            let outcomes: Vec<Outcome> = (first..rows.min(first + CHUNK))
                .map(|i| {
                    let row = &data[i * n..(i + 1) * n];
                    match bad_value(row, wavelengths_nm) {
                        // Names are attached by the Python side, by row.
                        None => model.fit_one("", row, pathlength_cm, &mut ws),
                        Some(error) => Outcome::Failed(FailedSample {
                            sample: String::new(),
                            error,
                        }),
                    }
                })
                .collect();
            Columns::from_outcomes(&outcomes, first)
        })
        .collect();
    Columns::concat(pieces)
}

/// Fit spectra; returns a dict of columns, their text values, the
/// component names and the run's warnings.
#[pyfunction]
fn fit_columns<'py>(
    py: Python<'py>,
    spectra: PyReadonlyArray2<'py, f64>,
    wavelengths_nm: Vec<f64>,
    request: Request,
) -> PyResult<Bound<'py, PyDict>> {
    let (rows, n) = spectra.as_array().dim();
    if n != wavelengths_nm.len() {
        return Err(engine_error(format!(
            "spectra have {n} columns but {} wavelengths were given: expected one wavelength per column",
            wavelengths_nm.len()
        )));
    }
    if rows.saturating_mul(64) > i32::MAX as usize {
        return Err(engine_error(format!(
            "{rows} spectra in one call: expected at most {} (split the input)",
            i32::MAX / 64
        )));
    }
    let prepared = build_model(wavelengths_nm.clone(), &request)?;
    // Row-major (C-contiguous) data is read in place; any other layout
    // (numpy's `as_slice` also accepts Fortran order) is copied row by row.
    let view = spectra.as_array();
    let copy;
    let data: &[f64] = match view.as_slice() {
        Some(s) => s,
        None => {
            copy = view.iter().copied().collect::<Vec<f64>>();
            &copy
        }
    };
    let l = request.pathlength_cm;
    let table = if rows == 0 || n == 0 {
        Columns::with_capacity(0)
    } else {
        py.detach(|| fit_table(&prepared.model, data, &wavelengths_nm, l))
    };
    to_dict(py, table, prepared.components, prepared.warnings)
}

fn to_dict<'py>(
    py: Python<'py>,
    table: Columns,
    components: Vec<String>,
    warnings: Vec<String>,
) -> PyResult<Bound<'py, PyDict>> {
    let d = PyDict::new(py);
    d.set_item("sample", table.sample.into_pyarray(py))?;
    d.set_item("component", table.component.into_pyarray(py))?;
    let float_names = COMPONENT_FLOATS.iter().chain(SAMPLE_FLOATS.iter());
    for (name, col) in float_names.zip(table.floats) {
        d.set_item(*name, col.into_pyarray(py))?;
    }
    for (name, col) in COUNTS.iter().zip(table.counts) {
        d.set_item(*name, col.into_pyarray(py))?;
    }
    let texts = PyDict::new(py);
    for (name, col) in TEXTS.iter().zip(table.texts) {
        d.set_item(*name, col.index.into_pyarray(py))?;
        texts.set_item(*name, col.values)?;
    }
    d.set_item("_texts", texts)?;
    d.set_item("_components", components)?;
    d.set_item("_warnings", warnings)?;
    Ok(d)
}

/// Run the `unblend` command line (`argv[0]` is the program name) and
/// return its exit code. `console`: this process is only the command, so
/// Ctrl-C may end it (removing temporary files), as the Rust binary does.
#[pyfunction]
#[pyo3(signature = (argv, console=false))]
fn main(py: Python<'_>, argv: Vec<String>, console: bool) -> u8 {
    if console {
        unblend::cli::interrupt_removes_temporaries();
    }
    py.detach(|| unblend::cli::main_from(argv))
}

#[pymodule]
fn _unblend(m: &Bound<'_, PyModule>) -> PyResult<()> {
    m.add("UnblendError", m.py().get_type::<UnblendError>())?;
    m.add("CSV_HEADER", unblend::output::CSV_HEADER)?;
    m.add("DEFAULT_ALARM_RATE", diagnostics::DEFAULT_ALARM_RATE)?;
    m.add(
        "DEFAULT_MAX_ABSORBANCE_AU",
        diagnostics::DEFAULT_MAX_ABSORBANCE_AU,
    )?;
    m.add("VERSION", env!("CARGO_PKG_VERSION"))?;
    m.add_function(wrap_pyfunction!(fit_columns, m)?)?;
    m.add_function(wrap_pyfunction!(main, m)?)?;
    m.add_class::<library::PyLibrary>()?;
    Ok(())
}
