"""unblend from Python: concentrations of mixture components from UV-vis spectra.

Each spectrum is fitted as A(λ) = l·Σ εᵢ(λ)·cᵢ + baseline(λ) with cᵢ ≥ 0
(non-negative least squares on the reference curves of a library folder),
by the same engine and with the same numbers as the ``unblend fit`` command.

    import unblend
    table = unblend.fit(spectra, wavelengths_nm, library="library")

``spectra`` is a 2-D numpy array (one row per spectrum, absorbance in AU), a
wide pandas DataFrame or a pyarrow Table (see :func:`fit`). The result has
the columns of ``unblend fit --format csv`` (:data:`COLUMNS`), one row per
sample and component; a sample that could not be fitted is one row with
its ``error``. Text columns are dictionary-encoded (pandas categoricals).
"""

from __future__ import annotations

import os
import sys
import warnings
from typing import Optional, Sequence, Tuple

import numpy as np
import pyarrow as pa

from . import _unblend
from ._unblend import CSV_HEADER, Library, UnblendError

__all__ = [
    "COLUMNS",
    "Library",
    "UnblendError",
    "UnblendWarning",
    "fit",
    "fit_arrow",
    "main",
    "spectra_matrix",
]
__version__ = _unblend.VERSION

#: Column names of the results, as in ``unblend fit --format csv``.
COLUMNS: Tuple[str, ...] = tuple(CSV_HEADER.split(","))

#: Metadata key of a table whose spectra are one list column: the
#: wavelengths of the list's items, nm, as a JSON array.
WAVELENGTHS_KEY = b"unblend.wavelengths_nm"

_COUNT_COLUMNS = ("n_points", "n_masked")
_TEXT_COLUMNS = ("solver", "flags", "error", "screen_candidate", "answer")


class UnblendWarning(UserWarning):
    """A run-level warning from the engine (e.g. collinear references)."""


def fit(spectra, wavelengths_nm=None, library=None, **options):
    """Fit spectra; returns a pandas DataFrame with the columns :data:`COLUMNS`.

    Arguments and options are those of :func:`fit_arrow`.
    """
    return fit_arrow(spectra, wavelengths_nm, library, **options).to_pandas()


def fit_arrow(
    spectra,
    wavelengths_nm: Optional[Sequence[float]] = None,
    library: Optional[str] = None,
    components: Optional[Sequence[str]] = None,
    baseline: str = "offset",
    pathlength_cm: float = 1.0,
    range_nm: Optional[Tuple[float, float]] = None,
    checks: bool = True,
    noise_au: Optional[float] = None,
    alarm_rate: Optional[float] = None,
    max_absorbance_au: Optional[float] = _unblend.DEFAULT_MAX_ABSORBANCE_AU,
    screen_with: Optional[str] = None,
    samples: Optional[Sequence[str]] = None,
    weights: str = "estimated",
) -> pa.Table:
    """Fit spectra; returns a pyarrow Table with the columns :data:`COLUMNS`.

    spectra: a 2-D array (rows are spectra, absorbance in AU), a wide pandas
        DataFrame (sample names in a first text column or the index,
        wavelengths in nm as column names) or a pyarrow Table (a text sample
        column and one numeric column per wavelength, or a list column with
        the wavelengths in the schema metadata ``unblend.wavelengths_nm``).
    wavelengths_nm: the wavelength of each column, nm (needed for an array;
        read from the column names otherwise). Any order; not repeated.
    library: the library folder [default: $UNBLEND_LIBRARY or ./library].
    components: names to fit [default: every component in the library].
    baseline: "none", "offset" (AU) or "linear" (offset AU, slope AU/nm).
    pathlength_cm: optical pathlength, cm.
    range_nm: (low, high) wavelength window, nm.
    checks: run the residual tests (``False`` is ``--no-diagnostics``).
    noise_au: noise of the readings, AU [default: estimated per spectrum].
    alarm_rate: false-alarm rate of the unexplained-absorbance flag.
    max_absorbance_au: points above this are masked; ``None`` keeps all.
    screen_with: library folder of candidates tried on flagged samples.
    samples: sample names [default: from the input, or row numbers from 0].
    weights: "estimated" (refit with weights when the noise grows with
        absorbance, as ``unblend fit`` does by default) or "none".

    Engine errors (library, options, grid) raise :class:`UnblendError`; a
    spectrum that cannot be fitted is a row with its ``error``.
    """
    matrix, wl, names = spectra_matrix(spectra, wavelengths_nm, samples)
    request = {
        "library": os.fspath(library or os.environ.get("UNBLEND_LIBRARY", "library")),
        "components": list(components or []),
        "baseline": baseline,
        "pathlength_cm": float(pathlength_cm),
        "range_nm": None if range_nm is None else tuple(map(float, range_nm)),
        "checks": bool(checks),
        "noise_au": None if noise_au is None else float(noise_au),
        "alarm_rate": _unblend.DEFAULT_ALARM_RATE if alarm_rate is None else float(alarm_rate),
        "max_absorbance_au": None if max_absorbance_au is None else float(max_absorbance_au),
        "screen_with": None if screen_with is None else os.fspath(screen_with),
        "weights": str(weights),
    }
    out = _unblend.fit_columns(matrix, wl, request)
    for w in out["_warnings"]:
        warnings.warn(w, UnblendWarning, stacklevel=2)
    return _table(out, names)


def spectra_matrix(spectra, wavelengths_nm=None, samples=None):
    """The input as (2-D float64 array, ascending wavelengths nm, names).

    A C-contiguous float64 array with ascending wavelengths is passed on
    as it is (the engine reads it in place).
    """
    names = None
    if isinstance(spectra, pa.Table):
        names, wl, matrix = _from_arrow(spectra)
    elif hasattr(spectra, "iloc") and hasattr(spectra, "columns"):
        names, wl, matrix = _from_pandas(spectra)
    else:
        matrix = np.asarray(spectra, dtype=np.float64)
        if matrix.ndim == 1:
            matrix = matrix.reshape(1, -1)
        if matrix.ndim != 2:
            raise UnblendError(
                f"spectra: expected a 2-D array (one row per spectrum), got {matrix.ndim} dimensions"
            )
        wl = None
    if wavelengths_nm is not None:
        wl = np.asarray(wavelengths_nm, dtype=np.float64)
    if wl is None:
        raise UnblendError("wavelengths_nm: needed for an array input (one value per column, nm)")
    if wl.ndim != 1:
        raise UnblendError("wavelengths_nm: expected a 1-D sequence of wavelengths in nm")
    if samples is not None:
        names = [str(s) for s in samples]
    if names is None:
        names = [str(i) for i in range(matrix.shape[0])]
    if len(names) != matrix.shape[0]:
        raise UnblendError(
            f"samples: {len(names)} names for {matrix.shape[0]} spectra: expected one name per row"
        )
    if wl.size > 1 and not np.all(np.diff(wl) > 0):
        order = np.argsort(wl, kind="stable")
        wl, matrix = wl[order], matrix[:, order]
    return matrix, [float(x) for x in wl], names


def _wavelength(name) -> float:
    try:
        return float(str(name).strip())
    except ValueError:
        raise UnblendError(
            f"column '{name}': expected a wavelength in nm as the column name"
        ) from None


def _is_numeric(dtype) -> bool:
    import pandas as pd

    return pd.api.types.is_numeric_dtype(dtype) and not pd.api.types.is_bool_dtype(dtype)


def _from_pandas(df):
    first = df.columns[0] if len(df.columns) else None
    if first is not None and not _is_numeric(df[first].dtype):
        names = [str(s) for s in df[first]]
        df = df.iloc[:, 1:]
    else:
        names = [str(s) for s in df.index]
    wl = np.array([_wavelength(c) for c in df.columns], dtype=np.float64)
    return names, wl, df.to_numpy(dtype=np.float64)


def _from_arrow(table: pa.Table):
    names = None
    if table.num_columns and pa.types.is_string(table.schema.field(0).type) or (
        table.num_columns and pa.types.is_large_string(table.schema.field(0).type)
    ):
        names = [str(s) for s in table.column(0).to_pylist()]
        table = table.drop_columns([table.column_names[0]])
    meta = table.schema.metadata or {}
    if table.num_columns == 1 and pa.types.is_list(table.schema.field(0).type) or (
        table.num_columns == 1 and pa.types.is_fixed_size_list(table.schema.field(0).type)
    ):
        return names, *_from_list_column(table, meta)
    wl = np.array([_wavelength(c) for c in table.column_names], dtype=np.float64)
    matrix = np.empty((table.num_rows, table.num_columns), dtype=np.float64)
    for j, col in enumerate(table.columns):
        matrix[:, j] = col.to_numpy(zero_copy_only=False).astype(np.float64)
    return names, wl, matrix


def _from_list_column(table: pa.Table, meta):
    import json

    if WAVELENGTHS_KEY not in meta:
        raise UnblendError(
            f"list column '{table.column_names[0]}': expected the wavelengths (nm) in the "
            f"schema metadata key '{WAVELENGTHS_KEY.decode()}'"
        )
    wl = np.array(json.loads(meta[WAVELENGTHS_KEY]), dtype=np.float64)
    col = table.column(0).combine_chunks()
    lengths = col.value_lengths().to_numpy(zero_copy_only=False)
    bad = np.nonzero(lengths != wl.size)[0]
    if bad.size:
        raise UnblendError(
            f"row {bad[0]}: {lengths[bad[0]]} values in '{table.column_names[0]}' but "
            f"{wl.size} wavelengths: expected one value per wavelength"
        )
    values = col.flatten().to_numpy(zero_copy_only=False).astype(np.float64)
    return wl, values.reshape(table.num_rows, wl.size)


def _table(out, names) -> pa.Table:
    """The engine's columns as a pyarrow Table in :data:`COLUMNS` order."""

    def coded(index, values):
        idx = pa.array(index, mask=index < 0)
        return pa.DictionaryArray.from_arrays(idx, pa.array(values, pa.string()))

    arrays = {
        "sample": coded(out["sample"].astype(np.int32), names),
        "component": coded(out["component"], out["_components"]),
    }
    for name in COLUMNS[2:]:
        col = out[name]
        if name in _TEXT_COLUMNS:
            arrays[name] = coded(col, out["_texts"][name])
        elif name in _COUNT_COLUMNS:
            arrays[name] = pa.array(col, mask=col < 0)
        else:
            arrays[name] = pa.array(col, from_pandas=True)
    return pa.table(arrays)


def main(argv: Optional[Sequence[str]] = None) -> int:
    """Run the ``unblend`` command line (without the program name)."""
    args = sys.argv[1:] if argv is None else list(argv)
    return _unblend.main(["unblend", *map(str, args)])


def _console() -> None:
    """The ``unblend`` console command installed with the package."""
    sys.exit(_unblend.main(["unblend", *sys.argv[1:]], console=True))
