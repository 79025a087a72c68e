#!/usr/bin/env python3
"""Export the CIE tables unblend ships, at 1 nm over 360-830 nm.

Source: CIE 15:2018 "Colorimetry", 4th edition, and the tables it refers to
(CIE 018:2019 / ISO/CIE 11664-1 colour-matching functions; CIE S 014-2 and
ISO/CIE 11664-2 illuminants), as shipped in the general-purpose
colour-science package (version printed in each file's comment line).

- cmf-1931-2.csv, cmf-1964-10.csv: the CIE 1931 2 degree and CIE 1964
  10 degree standard observers, x-bar, y-bar, z-bar, 360-830 nm at 1 nm, as
  tabulated (no interpolation).
- illuminants.csv: relative spectral power of D65, D50 and A, 360-830 nm at
  1 nm. A is computed from its defining Planck formula (CIE 15:2018 eq. 2.1)
  at every nanometre. D65 and D50 are computed from the CIE daylight basis
  functions S0, S1, S2 (tabulated at 5 nm, 300-830 nm) with the chromaticity
  of D65 / D50, then interpolated linearly to 1 nm, as CIE 15:2018 (section
  on the D series) recommends for the daylight illuminants.

Run from the repository root with a Python that has colour-science:

    python3 -m venv .venv && .venv/bin/pip install colour-science
    .venv/bin/python src/colour/data/export_tables.py
"""

import os
import warnings

warnings.filterwarnings("ignore")

import colour  # noqa: E402
from colour import SpectralShape  # noqa: E402
from colour.colorimetry import (  # noqa: E402
    sd_CIE_illuminant_D_series,
    sd_CIE_standard_illuminant_A,
)
from colour.temperature import CCT_to_xy_CIE_D  # noqa: E402

HERE = os.path.dirname(os.path.abspath(__file__))
SHAPE = SpectralShape(360, 830, 1)
HEADER = (
    "# CIE 15:2018 tables, 360-830 nm at 1 nm, exported from colour-science "
    f"{colour.__version__} by src/colour/data/export_tables.py\n"
)


def fmt(v):
    return "%.12g" % float(v)


def write(name, columns, rows):
    path = os.path.join(HERE, name)
    with open(path, "w", encoding="utf-8", newline="\n") as f:
        f.write(HEADER)
        f.write(",".join(columns) + "\n")
        for row in rows:
            f.write(",".join([str(int(row[0]))] + [fmt(v) for v in row[1:]]) + "\n")
    print("wrote", path)


def cmfs(key, name):
    c = colour.MSDS_CMFS[key].copy()
    assert c.shape == SHAPE, c.shape
    rows = [(w, *c[w]) for w in c.wavelengths]
    write(name, ["wavelength_nm", "x_bar", "y_bar", "z_bar"], rows)


def daylight(cct_k):
    # CIE 15:2018: the nominal CCT times 1.4388/1.4380 (the revised c2).
    xy = CCT_to_xy_CIE_D(cct_k * 1.4388 / 1.4380)
    sd = sd_CIE_illuminant_D_series(xy)
    return sd.copy().interpolate(SHAPE, interpolator=colour.LinearInterpolator)


def illuminants():
    d65 = daylight(6500)
    d50 = daylight(5000)
    a = sd_CIE_standard_illuminant_A(SHAPE)
    rows = [(w, d65[w], d50[w], a[w]) for w in SHAPE.wavelengths]
    write("illuminants.csv", ["wavelength_nm", "D65", "D50", "A"], rows)


if __name__ == "__main__":
    cmfs("CIE 1931 2 Degree Standard Observer", "cmf-1931-2.csv")
    cmfs("CIE 1964 10 Degree Standard Observer", "cmf-1964-10.csv")
    illuminants()
