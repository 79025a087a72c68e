#!/usr/bin/env python3
"""Generate the INVENTED fluorescence demo data for unblend.

Everything here is invented: the marker dyes ("Glint Teal", "Moss Amber",
"Dusk Rose"), their absorptivity and emission curves (smooth Gaussian bands),
the lots, concentrations, the instrument and the noise. Nothing is measured
data and nothing refers to a real company, product or substance.

Run from the project root:

    python3 demo-data/fluorescence/generate.py

Only the Python 3 standard library is used; random.Random(20261204) makes
every run byte-identical.

Files written (relative to demo-data/fluorescence/):

    references/<dye>.csv             epsilon, 300-650 nm, 1 nm (library add --spectrum)
    references/<dye>-em350.csv       emission per mol/L at 350 nm excitation,
                                     370-650 nm, 1 nm (library add --emission)
    trace-check.csv                  emission spectra of the samples, 350 nm
                                     excitation, 370-650 nm, 1 nm, counts
    trace-check-absorbance.csv       absorbance of the same samples, 1 cm, AU
    trace-check-truth.csv            the concentrations used, mol/L

Model: emission F(l) = sum_i S_i(l) c_i + Raman + dark offset, attenuated by
the inner filter of a 1 cm cuvette read at right angles through a 0.2 cm
centred window (Beer-Lambert along both beams, integrated over the window);
noise 3 counts. Absorbance A(l) = sum_i eps_i(l) c_i, noise 0.0005 AU.
"""

import math
import os
import random

HERE = os.path.dirname(os.path.abspath(__file__))
RNG = random.Random(20261204)
EXCITATION_NM = 350.0

# name: (absorption bands [(centre nm, sigma nm, eps L/(mol cm))],
#        emission (centre nm, sigma nm, counts per mol/L at 350 nm excitation))
DYES = {
    "glint-teal": ([(345.0, 18.0, 42000.0)], (440.0, 22.0, 6.0e10)),
    "moss-amber": ([(365.0, 22.0, 30000.0)], (480.0, 28.0, 3.5e10)),
    "dusk-rose": ([(385.0, 25.0, 26000.0), (320.0, 15.0, 8000.0)], (525.0, 30.0, 2.5e10)),
}
ORDER = ["glint-teal", "moss-amber", "dusk-rose"]

# sample: concentrations in mol/L (teal, amber, rose)
SAMPLES = [
    ("water-blank", (0.0, 0.0, 0.0)),
    ("lot-2611-a", (20e-9, 10e-9, 0.0)),
    ("lot-2611-b", (20e-9, 10e-9, 0.0)),
    ("lot-2612-a", (0.0, 15e-9, 25e-9)),
    ("lot-2612-b", (0.0, 15e-9, 25e-9)),
    ("lot-2613-a", (5e-9, 5e-9, 5e-9)),
    ("lot-2613-b", (5e-9, 5e-9, 5e-9)),
    ("concentrate-1", (2.0e-6, 1.5e-6, 1.0e-6)),
    ("concentrate-2", (5.0e-6, 4.0e-6, 3.0e-6)),
]

RAMAN_SHIFT_PER_CM = 3400.0
RAMAN_FWHM_PER_CM = 400.0
RAMAN_HEIGHT = 60.0
DARK_COUNTS = 12.0
NOISE_COUNTS = 3.0
NOISE_AU = 0.0005
WINDOW_CM = (0.4, 0.6)

ABS_GRID = [float(w) for w in range(300, 651)]
EM_GRID = [float(w) for w in range(370, 651)]


def gauss(x, c, s):
    return math.exp(-0.5 * ((x - c) / s) ** 2)


def epsilon(name, w):
    return sum(e * gauss(w, c, s) for c, s, e in DYES[name][0])


def emission(name, w):
    c, s, k = DYES[name][1]
    return k * gauss(w, c, s)


def absorbance(conc, w):
    return sum(epsilon(n, w) * c for n, c in zip(ORDER, conc))


def mean_transmission(a_per_cm):
    """Mean of 10^(-a x) over the window, by the midpoint rule."""
    lo, hi = WINDOW_CM
    n = 200
    h = (hi - lo) / n
    return sum(10 ** (-a_per_cm * (lo + (i + 0.5) * h)) for i in range(n)) / n


def raman(w):
    centre = 1e7 / EXCITATION_NM - RAMAN_SHIFT_PER_CM
    sigma = RAMAN_FWHM_PER_CM / math.sqrt(8 * math.log(2))
    return RAMAN_HEIGHT * gauss(1e7 / w, centre, sigma)


def fmt(v, digits):
    return f"{v:.{digits}f}"


def write(path, lines):
    with open(os.path.join(HERE, path), "w", encoding="utf-8", newline="\n") as f:
        f.write("\n".join(lines) + "\n")


def main():
    os.makedirs(os.path.join(HERE, "references"), exist_ok=True)
    for name in ORDER:
        write(f"references/{name}.csv",
              ["wavelength_nm,epsilon"] + [f"{int(w)},{fmt(epsilon(name, w), 2)}" for w in ABS_GRID])
        write(f"references/{name}-em350.csv",
              ["# INVENTED emission curve for the unblend demo", "# excitation_nm = 350",
               "wavelength_nm,intensity_per_mol_per_l"]
              + [f"{int(w)},{emission(name, w):.6e}" for w in EM_GRID])
    em_rows = ["sample," + ",".join(str(int(w)) for w in EM_GRID)]
    abs_rows = ["sample," + ",".join(str(int(w)) for w in ABS_GRID)]
    truth = ["sample," + ",".join(f"{n}_mol_per_l" for n in ORDER)]
    for sample, conc in SAMPLES:
        a_ex = absorbance(conc, EXCITATION_NM)
        t_ex = mean_transmission(a_ex)
        values = []
        for w in EM_GRID:
            f = sum(emission(n, w) * c for n, c in zip(ORDER, conc)) + raman(w)
            f *= t_ex * mean_transmission(absorbance(conc, w))
            values.append(fmt(f + DARK_COUNTS + RNG.gauss(0.0, NOISE_COUNTS), 2))
        em_rows.append(sample + "," + ",".join(values))
        abs_rows.append(sample + "," + ",".join(
            fmt(absorbance(conc, w) + RNG.gauss(0.0, NOISE_AU), 5) for w in ABS_GRID))
        truth.append(sample + "," + ",".join(f"{c:.3e}" for c in conc))
        print(f"{sample}: A_ex = {a_ex:.4f} AU at {EXCITATION_NM} nm")
    write("trace-check.csv", em_rows)
    write("trace-check-absorbance.csv", abs_rows)
    write("trace-check-truth.csv", truth)


if __name__ == "__main__":
    main()
