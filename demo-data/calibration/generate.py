#!/usr/bin/env python3
"""Generate the INVENTED calibration series of the unblend demo.

Everything written here is invented: the ink workshop's "Saffron Yellow" dye,
its spectrum (the same smooth Gaussian bands as demo-data/generate.py uses),
the standards, their concentrations and the noise. Nothing is measured data.

Run from the project root:

    python3 demo-data/calibration/generate.py

Only the Python 3 standard library is used; random.Random(20261202) makes the
output byte-for-byte identical on every run.

Files written (relative to demo-data/calibration/):

    saffron-standards.csv       wide layout, 350-750 nm, 1 nm step, 1 cm cell
    saffron-concentrations.csv  sample,concentration_umol_per_l,role

Model for every spectrum (pathlength l = 1 cm, c in mol/L):

    A_true(lambda) = l * eps(lambda) * c + offset
    T_stray        = (10**-A_true + s) / (1 + s)     s = 0.01 (stray light)
    T_meas         = T_stray + N(0, 0.0004)          photometric noise
    A_meas         = -log10(T_meas) + N(0, 0.0015)   additive absorbance noise

The stray light bends the top standard (65 umol/L, about 1.8 AU true at the
band maximum) about 12 % below its true value, so `unblend calibrate`
leaves it out and names it.
"""

import hashlib
import math
import os
import random

SEED = 20261202
HERE = os.path.dirname(os.path.abspath(__file__))
BANDS = [(425.0, 28000.0, 40.0), (355.0, 6500.0, 22.0), (300.0, 8000.0, 20.0)]
STRAY = 0.01
SIGMA_T = 0.0004
SIGMA_A = 0.0015
WAVELENGTHS = list(range(350, 751))

# (sample, concentration in umol/L, role)
SERIES = [
    ("blank-1", 0, "blank"),
    ("blank-2", 0, "blank"),
    ("std-05a", 5, "standard"),
    ("std-05b", 5, "standard"),
    ("std-10a", 10, "standard"),
    ("std-10b", 10, "standard"),
    ("std-20a", 20, "standard"),
    ("std-20b", 20, "standard"),
    ("std-30a", 30, "standard"),
    ("std-30b", 30, "standard"),
    ("std-45a", 45, "standard"),
    ("std-45b", 45, "standard"),
    ("std-65a", 65, "standard"),
    ("std-65b", 65, "standard"),
]


def epsilon(w):
    return sum(h * math.exp(-0.5 * ((w - m) / s) ** 2) for m, h, s in BANDS)


def main():
    rng = random.Random(SEED)
    rows = []
    for sample, c_um, _ in SERIES:
        offset = rng.uniform(-0.0005, 0.0005)
        values = []
        for w in WAVELENGTHS:
            a_true = epsilon(w) * c_um * 1e-6 + offset
            t = (10 ** -a_true + STRAY) / (1 + STRAY)
            t = max(t + rng.gauss(0, SIGMA_T), 1e-6)
            values.append(-math.log10(t) + rng.gauss(0, SIGMA_A))
        rows.append((sample, values))
    spectra = os.path.join(HERE, "saffron-standards.csv")
    with open(spectra, "w", newline="\n") as f:
        f.write("sample," + ",".join(str(w) for w in WAVELENGTHS) + "\n")
        for sample, values in rows:
            f.write(sample + "," + ",".join(f"{v:.5f}" for v in values) + "\n")
    conc = os.path.join(HERE, "saffron-concentrations.csv")
    with open(conc, "w", newline="\n") as f:
        f.write("sample,concentration_umol_per_l,role\n")
        for sample, c_um, role in SERIES:
            f.write(f"{sample},{c_um},{role}\n")
    for path in (spectra, conc):
        with open(path, "rb") as f:
            digest = hashlib.sha256(f.read()).hexdigest()[:16]
        print(f"{os.path.relpath(path, HERE)}  sha256 {digest}")


if __name__ == "__main__":
    main()
