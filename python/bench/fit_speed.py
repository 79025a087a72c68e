"""Speed of `unblend.fit_arrow` in memory (a benchmark, not a test).

Invented data, as `tests/bench/make_spectra.rs` makes it: 6 Gaussian-band
components on 350–750 nm at 1 nm (401 points), mixtures with about 20 %
of concentrations zero, noise about 2 mAU. Prints spectra per second with
and without the residual checks, best of REPEATS runs.

    python python/bench/fit_speed.py [N_SPECTRA] [REPEATS]
"""

import pathlib
import sys
import tempfile
import time

import numpy as np

import unblend

WAVELENGTHS_NM = np.arange(350.0, 751.0)


def write_library(folder: pathlib.Path, k: int = 6) -> np.ndarray:
    eps = []
    for j in range(k):
        centre = 380.0 + 340.0 * (j + 0.5) / k
        e = 40_000.0 * np.exp(-0.5 * ((WAVELENGTHS_NM - centre) / 30.0) ** 2) + 500.0
        points = ",\n".join(f"  [{w!r}, {v!r}]" for w, v in zip(WAVELENGTHS_NM.tolist(), e.tolist()))
        (folder / f"band{j}.toml").write_text(
            'format = "unblend-component"\nformat_version = 1\n'
            f'name = "band{j}"\ncreated = "2026-12-04"\nepsilon_unit = "L/(mol*cm)"\n'
            '[source]\nkind = "imported"\n'
            f"[absorptivity]\npoints = [\n{points}\n]\n"
        )
        eps.append(e)
    return np.array(eps)


def main() -> None:
    n = int(sys.argv[1]) if len(sys.argv) > 1 else 1_000_000
    repeats = int(sys.argv[2]) if len(sys.argv) > 2 else 3
    rng = np.random.default_rng(1)
    with tempfile.TemporaryDirectory() as tmp:
        folder = pathlib.Path(tmp)
        eps = write_library(folder)
        conc = rng.uniform(0, 2e-5, size=(n, len(eps))) * (rng.random((n, len(eps))) > 0.2)
        spectra = conc @ eps + rng.normal(0, 0.002, size=(n, WAVELENGTHS_NM.size))
        names = [f"s{i}" for i in range(n)]
        for checks in (False, True):
            best, best_cpu = float("inf"), float("inf")
            for _ in range(repeats):
                t, c = time.perf_counter(), time.process_time()
                table = unblend.fit_arrow(spectra, WAVELENGTHS_NM, library=str(folder), checks=checks, samples=names)
                best = min(best, time.perf_counter() - t)
                best_cpu = min(best_cpu, time.process_time() - c)
            # CPU seconds (all threads) say what the run costs when the machine
            # is shared; wall seconds are the figure on an idle machine.
            print(
                f"checks={checks}: {n} spectra x {WAVELENGTHS_NM.size} nm x {len(eps)} components "
                f"in {best:.3f} s wall = {n / best:,.0f} spectra/s; {best_cpu:.3f} CPU s = "
                f"{1e6 * best_cpu / n:.2f} CPU µs per spectrum ({table.num_rows} rows)"
            )


if __name__ == "__main__":
    main()
