"""Baseline for the end-to-end benchmark: the same job done the obvious way in
Python, numpy.loadtxt plus a loop over scipy.optimize.nnls.

    python3 tests/bench/scipy_baseline.py DATA_DIR

DATA_DIR is what `cargo run --release --example make-spectra -- DATA_DIR N 6`
writes (spectra.csv and library/*.toml). Needs numpy and scipy (PyPI). The
free baseline offset is modelled as two non-negative columns (+1 and -1), the
standard way to get a free variable out of an NNLS solver. Prints spectra/s
for loading, solving and the whole run; writes nothing.
"""
import pathlib
import sys
import time
import tomllib

import numpy as np
from scipy.optimize import nnls


def main() -> None:
    data = pathlib.Path(sys.argv[1] if len(sys.argv) > 1 else "target/bench-data")
    t0 = time.perf_counter()
    header = (data / "spectra.csv").open().readline().strip().split(",")
    wl = np.array([float(w) for w in header[1:]])
    a = np.loadtxt(data / "spectra.csv", delimiter=",", skiprows=1, usecols=range(1, len(header)))
    t1 = time.perf_counter()
    cols = []
    for path in sorted((data / "library").glob("*.toml")):
        comp = tomllib.loads(path.read_text())
        pts = np.array(comp["absorptivity"]["points"])
        cols.append(np.interp(wl, pts[:, 0], pts[:, 1]))
    e = np.column_stack(cols + [np.ones_like(wl), -np.ones_like(wl)])
    out = np.empty((a.shape[0], e.shape[1]))
    for i in range(a.shape[0]):
        out[i], _ = nnls(e, a[i])
    t2 = time.perf_counter()
    n = a.shape[0]
    print(f"numpy.loadtxt: {n / (t1 - t0):,.0f} spectra/s")
    print(f"scipy.optimize.nnls loop: {n / (t2 - t1):,.0f} spectra/s")
    print(f"end to end: {n / (t2 - t0):,.0f} spectra/s ({n} spectra, {e.shape[1] - 2} components, {len(wl)} wavelengths)")


if __name__ == "__main__":
    main()
