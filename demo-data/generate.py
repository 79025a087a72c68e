#!/usr/bin/env python3
"""Generate the INVENTED demo data set for unblend.

Everything this script writes is invented for the demo: the ink workshop,
the dye names ("Fjord Blue", "Saffron Yellow", "Ember Red", "Umber Brown",
"Slate Violet"), their spectra (sums of smooth Gaussian bands), molar masses,
lot numbers, recipes and concentrations. Nothing here is measured data and
nothing refers to a real company, product or substance.

Run from the project root:

    python3 demo-data/generate.py

Only the Python 3 standard library is used. The random generator is seeded
with random.Random(20261201), so the output is byte-for-byte identical on every
run. At the end the script prints a SHA-256 digest of every file it wrote.

Files written (all paths relative to demo-data/):

    references/fjord-blue.csv       epsilon(lambda), 300-800 nm, 1 nm step
    references/saffron-yellow.csv
    references/ember-red.csv
    references/components.csv       invented molar masses
    candidates/umber-brown.csv      the "unknown brownish impurity"
    candidates/slate-violet.csv     an unrelated candidate to be rejected
    lot-check.csv                   wide layout, main demo input
    lot-check-long.csv              first 6 rows of lot-check.csv, long layout
    lot-check-truth.csv             true concentrations and offsets per row

Model for every spectrum (pathlength l = 1 cm, c in mol/L):

    A_true(lambda) = l * sum_i eps_i(lambda) * c_i + offset
    T_true         = 10 ** (-A_true)
    T_stray        = (T_true + s) / (1 + s)       only lot-2615, s = 0.0005
    T_meas         = T_stray + N(0, 0.0004)       photometric noise
    A_meas         = -log10(T_meas) + N(0, 0.0015) baseline / electronic noise

The mixtures are built from the epsilon values exactly as written to the
reference CSVs (rounded to 0.1), so a fit with those references can recover
the truth up to the noise.
"""

import csv
import hashlib
import math
import os
import random

SEED = 20261201

HERE = os.path.dirname(os.path.abspath(__file__))

REF_MIN, REF_MAX = 300, 800        # reference spectra range, nm
SMP_MIN, SMP_MAX = 350, 750        # sample spectra range, nm

PATHLENGTH_CM = 1.0
SIGMA_T = 0.0004                   # transmittance noise (absolute)
SIGMA_A = 0.0015                   # additive absorbance noise
STRAY = 0.0005                     # stray-light fraction for lot-2615

UM = 1e-6                          # micromol/L -> mol/L

# Invented spectra: list of (centre_nm, peak_epsilon, sigma_nm) Gaussian bands.
COMPONENTS = {
    "fjord-blue": {
        "dir": "references",
        "molar_mass": 792.9,
        "note": "invented blue dye; main band ~625 nm; shoulder ~580 nm",
        "bands": [(627.0, 59500.0, 26.0), (578.0, 17500.0, 24.0),
                  (335.0, 7500.0, 28.0), (292.0, 9000.0, 18.0)],
    },
    "saffron-yellow": {
        "dir": "references",
        "molar_mass": 452.4,
        "note": "invented yellow dye; broad band ~425 nm",
        "bands": [(425.0, 28000.0, 40.0), (355.0, 6500.0, 22.0),
                  (300.0, 8000.0, 20.0)],
    },
    "ember-red": {
        "dir": "references",
        "molar_mass": 608.6,
        "note": "invented red dye; band ~515 nm; shoulder ~490 nm",
        "bands": [(520.0, 39200.0, 22.0), (488.0, 16000.0, 20.0),
                  (330.0, 6000.0, 30.0)],
    },
    "umber-brown": {
        "dir": "candidates",
        "molar_mass": 350.0,
        "note": "invented brownish impurity; very broad band ~440 nm plus UV rise",
        "bands": [(440.0, 8950.0, 90.0), (270.0, 14000.0, 45.0)],
    },
    "slate-violet": {
        "dir": "candidates",
        "molar_mass": 701.2,
        "note": "invented violet dye; band ~560 nm; unrelated candidate",
        "bands": [(560.0, 35000.0, 30.0), (320.0, 5000.0, 25.0)],
    },
}

# Rows of lot-check.csv, in order: (sample, {component: umol/L}, offset_range, note)
# offset_range is the half-width of the uniform baseline offset (AU).
SAMPLES = [
    ("blank-1", {}, 0.0005, "solvent blank"),
    ("blank-2", {}, 0.0005, "solvent blank"),
    ("std-blue-10uM", {"fjord-blue": 10.0}, 0.003, "single-dye standard"),
    ("std-yellow-20uM", {"saffron-yellow": 20.0}, 0.003, "single-dye standard"),
    ("std-red-10uM", {"ember-red": 10.0}, 0.003, "single-dye standard"),
]
LOTS = [
    ("2611", {"fjord-blue": 8.0, "saffron-yellow": 6.0},
     3, "lot 2611 harbour teal"),
    ("2612", {"ember-red": 9.0, "saffron-yellow": 12.0, "fjord-blue": 1.0},
     3, "lot 2612 autumn rust"),
    ("2613", {"fjord-blue": 5.0, "ember-red": 7.0, "saffron-yellow": 3.0},
     3, "lot 2613 heather"),
    ("2614", {"fjord-blue": 5.0, "ember-red": 7.0, "saffron-yellow": 3.0,
              "umber-brown": 4.0},
     3, "lot 2614 heather recipe; contaminated with umber-brown (unknown brownish impurity)"),
    ("2615", {"fjord-blue": 40.0, "saffron-yellow": 25.0},
     2, "lot 2615 strong shade; blue band above A=2; stray light s=0.0005"),
]
STRAY_LOTS = {"2615"}
for lot, recipe, n_rep, note in LOTS:
    for k in range(n_rep):
        SAMPLES.append((f"lot-{lot}-{'abc'[k]}", recipe, 0.003, note))

TRUTH_COLUMNS = ["fjord-blue", "saffron-yellow", "ember-red", "umber-brown"]


def epsilon(bands, wl):
    return sum(a * math.exp(-0.5 * ((wl - c) / s) ** 2) for c, a, s in bands)


def build_references():
    """Return {name: {wavelength_nm: epsilon rounded to 0.1}}."""
    refs = {}
    for name, spec in COMPONENTS.items():
        refs[name] = {wl: round(epsilon(spec["bands"], wl), 1)
                      for wl in range(REF_MIN, REF_MAX + 1)}
    return refs


def write_csv(path, header, rows):
    os.makedirs(os.path.dirname(path), exist_ok=True)
    with open(path, "w", newline="", encoding="utf-8") as fh:
        w = csv.writer(fh, lineterminator="\n")
        w.writerow(header)
        w.writerows(rows)
    return path


def main():
    rng = random.Random(SEED)
    refs = build_references()
    written = []

    for name, spec in COMPONENTS.items():
        path = os.path.join(HERE, spec["dir"], f"{name}.csv")
        rows = [(wl, f"{refs[name][wl]:.1f}") for wl in range(REF_MIN, REF_MAX + 1)]
        written.append(write_csv(path, ["wavelength_nm", "epsilon"], rows))

    written.append(write_csv(
        os.path.join(HERE, "references", "components.csv"),
        ["name", "molar_mass_g_per_mol", "note"],
        [(n, f"{s['molar_mass']:.1f}", s["note"] + " (INVENTED)")
         for n, s in COMPONENTS.items()]))

    wavelengths = list(range(SMP_MIN, SMP_MAX + 1))
    wide_rows, truth_rows, maxima = [], [], []
    for sample, recipe, off_range, note in SAMPLES:
        offset = round(rng.uniform(-off_range, off_range), 5)
        stray = any(sample.startswith(f"lot-{lot}-") for lot in STRAY_LOTS)
        values = []
        for wl in wavelengths:
            a_true = PATHLENGTH_CM * sum(
                refs[c][wl] * conc * UM for c, conc in recipe.items()) + offset
            t = 10.0 ** (-a_true)
            if stray:
                t = (t + STRAY) / (1.0 + STRAY)
            t_meas = max(t + rng.gauss(0.0, SIGMA_T), 1e-6)
            a_meas = -math.log10(t_meas) + rng.gauss(0.0, SIGMA_A)
            values.append(f"{a_meas:.5f}")
        wide_rows.append([sample] + values)
        peak_i = max(range(len(values)), key=lambda i: float(values[i]))
        maxima.append((sample, float(values[peak_i]), wavelengths[peak_i]))
        truth_rows.append([sample]
                          + [f"{recipe.get(c, 0.0):g}" for c in TRUTH_COLUMNS]
                          + [f"{offset:.5f}", note + " (INVENTED)"])

    written.append(write_csv(os.path.join(HERE, "lot-check.csv"),
                             ["sample"] + [str(w) for w in wavelengths], wide_rows))

    long_rows = [(row[0], wl, v) for row in wide_rows[:6]
                 for wl, v in zip(wavelengths, row[1:])]
    written.append(write_csv(os.path.join(HERE, "lot-check-long.csv"),
                             ["sample", "wavelength_nm", "absorbance"], long_rows))

    written.append(write_csv(
        os.path.join(HERE, "lot-check-truth.csv"),
        ["sample", "fjord_blue_umol_per_l", "saffron_yellow_umol_per_l",
         "ember_red_umol_per_l", "umber_brown_umol_per_l",
         "baseline_offset_au", "note"],
        truth_rows))

    print("INVENTED demo data written:")
    for path in written:
        with open(path, "rb") as fh:
            digest = hashlib.sha256(fh.read()).hexdigest()
        print(f"  {digest[:16]}  {os.path.relpath(path, os.path.dirname(HERE))}")
    print("max absorbance per sample (AU @ nm):")
    for sample, amax, wl in maxima:
        print(f"  {sample:18s} {amax:8.5f} @ {wl}")


if __name__ == "__main__":
    main()
