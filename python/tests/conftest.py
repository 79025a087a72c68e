"""Shared fixtures: the repository's demo data and library, and seeded mixtures."""

import pathlib

import numpy as np
import pytest

import unblend

ROOT = pathlib.Path(__file__).resolve().parents[2]
LIBRARY = ROOT / "library"
DEMO = ROOT / "demo-data" / "lot-check.csv"


@pytest.fixture(scope="session")
def library_dir():
    return str(LIBRARY)


@pytest.fixture(scope="session")
def demo_csv():
    return str(DEMO)


def mixtures(n, seed=20261204, noise_au=0.002, wavelengths_nm=None):
    """Invented mixtures of the library's components: (spectra, wavelengths, concentrations).

    A(λ) = 1 cm · Σ εᵢ(λ)·cᵢ + offset + seeded Gaussian noise; ε interpolated
    linearly onto the grid (as the engine does). Concentrations are
    1–20 µmol/L, every component present, so the NNLS answer has no
    active constraint and equals ordinary least squares.
    """
    lib = unblend.Library(str(LIBRARY))
    wl = np.arange(400.0, 651.0) if wavelengths_nm is None else np.asarray(wavelengths_nm)
    eps = np.column_stack([np.interp(wl, *lib.epsilon(name)) for name in lib.names])
    rng = np.random.default_rng(seed)
    conc = rng.uniform(1e-6, 20e-6, size=(n, len(lib.names)))
    offset = rng.uniform(-0.01, 0.01, size=(n, 1))
    spectra = conc @ eps.T + offset + rng.normal(0.0, noise_au, size=(n, wl.size))
    return np.ascontiguousarray(spectra), wl, conc
