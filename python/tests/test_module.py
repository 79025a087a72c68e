"""The module: inputs (numpy, pandas, Arrow), options, errors, and the command.

Outside references: numpy.linalg.lstsq (ordinary least squares; with every
concentration positive, NNLS has no active constraint and is the same
problem) and the `unblend fit --format csv` output read back with pandas.
"""

import json
import math
import shutil
import subprocess
import sys
import pathlib

import numpy as np
import pandas as pd
import pyarrow as pa
import pytest

import unblend
from conftest import mixtures

# Same engine, same machine, same inputs: bitwise equal numbers.
NUMBERS = [c for c in unblend.COLUMNS if c not in ("sample", "component", "solver", "flags", "error", "screen_candidate", "answer")]
# numpy's lstsq (SVD) and the engine's normal equations differ by rounding:
# the designs here have condition numbers near 10, so 1e-9 relative is ample.
LSTSQ_RELATIVE = 1e-9


def plain(df):
    """Categoricals as plain text (object), for comparing with a CSV read."""
    out = df.copy()
    for c in out.columns:
        if isinstance(out[c].dtype, pd.CategoricalDtype):
            out[c] = out[c].astype(object).where(out[c].notna(), None)
    return out


def assert_same_table(a, b):
    a, b = plain(a), plain(b)
    assert list(a.columns) == list(b.columns)
    assert len(a) == len(b) > 0
    for c in a.columns:
        if c in NUMBERS:
            x = a[c].to_numpy(dtype=float)
            y = b[c].to_numpy(dtype=float)
            assert np.array_equal(x, y, equal_nan=True), c
        else:
            x = [None if v is None or (isinstance(v, float) and math.isnan(v)) else str(v) for v in a[c]]
            y = [None if v is None or (isinstance(v, float) and math.isnan(v)) else str(v) for v in b[c]]
            assert x == y, c


def read_csv_exact(path, **kw):
    """pandas' CSV reader with correctly rounded numbers (the default from
    pandas 3; before it, `float_precision="round_trip"`)."""
    if int(pd.__version__.split(".")[0]) < 3:
        kw["float_precision"] = "round_trip"
    return pd.read_csv(path, **kw)


def command(*args):
    """The installed `unblend` console command, beside this interpreter."""
    exe = pathlib.Path(sys.executable).with_name("unblend")
    return subprocess.run([str(exe), *args], capture_output=True, text=True)


def test_fit_matches_the_command_csv_to_the_last_digit(tmp_path, demo_csv, library_dir):
    out = tmp_path / "r.csv"
    run = command("fit", demo_csv, "--library", library_dir, "--format", "csv", "--out", str(out))
    assert run.returncode == 0, run.stderr
    from_command = read_csv_exact(out, keep_default_na=False, na_values=[""])
    spectra = read_csv_exact(demo_csv)
    from_module = unblend.fit(spectra, library=library_dir)
    assert_same_table(from_module, from_command)
    # The demo has lots with flags and masked points: the comparison covers them.
    assert from_command["flags"].notna().any()
    assert (from_command["n_masked"] > 0).any()


def test_numpy_pandas_and_arrow_inputs_give_the_same_table(library_dir):
    spectra, wl, _ = mixtures(50)
    names = [f"s{i}" for i in range(50)]
    from_numpy = unblend.fit(spectra, wl, library=library_dir, samples=names)
    frame = pd.DataFrame(spectra, columns=[f"{w:g}" for w in wl])
    frame.insert(0, "sample", names)
    from_pandas = unblend.fit(frame, library=library_dir)
    wide = pa.table({"sample": names, **{f"{w:g}": spectra[:, j] for j, w in enumerate(wl)}})
    from_wide = unblend.fit(wide, library=library_dir)
    listed = pa.table({"sample": names, "absorbance_au": list(spectra)})
    listed = listed.replace_schema_metadata({unblend.WAVELENGTHS_KEY: json.dumps(wl.tolist()).encode()})
    from_list = unblend.fit(listed, library=library_dir)
    for other in (from_pandas, from_wide, from_list):
        assert_same_table(from_numpy, other)
    # Non-contiguous and descending-wavelength inputs are copied, same numbers.
    fortran = np.asfortranarray(spectra)
    assert_same_table(from_numpy, unblend.fit(fortran, wl, library=library_dir, samples=names))
    reverse = unblend.fit(spectra[:, ::-1], wl[::-1], library=library_dir, samples=names)
    assert_same_table(from_numpy, reverse)


def test_concentrations_match_ordinary_least_squares_from_numpy(library_dir):
    spectra, wl, truth = mixtures(20)
    lib = unblend.Library(library_dir)
    table = unblend.fit(spectra, wl, library=library_dir, checks=False)
    design = np.column_stack([np.interp(wl, *lib.epsilon(n)) for n in lib.names] + [np.ones_like(wl)])
    expected, *_ = np.linalg.lstsq(design, spectra.T, rcond=None)
    got = table.pivot(index="sample", columns="component", values="concentration_mol_per_l")
    got = got.loc[[str(i) for i in range(20)], lib.names].to_numpy()
    assert np.allclose(got, expected[:-1].T, rtol=LSTSQ_RELATIVE, atol=0)
    # And the fit recovers what was mixed, within what 2 mAU of noise allows
    # (a loose bound: 5 % of the smallest concentration, 1 µmol/L).
    assert np.max(np.abs(got - truth)) < 0.05e-6 * 20


def test_options_act_as_on_the_command(library_dir):
    spectra, wl, _ = mixtures(10)
    base = unblend.fit(spectra, wl, library=library_dir)
    assert base["noise_au"].notna().all()
    twice = unblend.fit(spectra, wl, library=library_dir, pathlength_cm=2.0)
    # c = (l·c)/l: doubling the pathlength halves every concentration.
    assert np.allclose(twice["concentration_mol_per_l"], base["concentration_mol_per_l"] / 2, rtol=1e-12)
    assert (twice["pathlength_cm"] == 2.0).all()
    plain_fit = unblend.fit(spectra, wl, library=library_dir, checks=False)
    assert plain_fit["noise_au"].isna().all()
    linear = unblend.fit(spectra, wl, library=library_dir, baseline="linear")
    assert linear["baseline_slope_au_per_nm"].notna().all()
    two = unblend.fit(spectra, wl, library=library_dir, components=["fjord-blue", "ember-red"])
    assert set(two["component"].astype(str)) == {"fjord-blue", "ember-red"}
    window = unblend.fit(spectra, wl, library=library_dir, range_nm=(450, 600))
    assert (window["range_low_nm"] == 450).all() and (window["range_high_nm"] == 600).all()
    arrow = unblend.fit_arrow(spectra, wl, library=library_dir)
    assert isinstance(arrow, pa.Table) and tuple(arrow.column_names) == unblend.COLUMNS


def test_engine_errors_are_python_exceptions_with_the_engine_message(tmp_path, library_dir):
    spectra, wl, _ = mixtures(3)
    with pytest.raises(unblend.UnblendError, match="library folder"):
        unblend.fit(spectra, wl, library=str(tmp_path / "nowhere"))
    with pytest.raises(unblend.UnblendError, match="no-such-dye"):
        unblend.fit(spectra, wl, library=library_dir, components=["no-such-dye"])
    with pytest.raises(unblend.UnblendError, match="one wavelength per column"):
        unblend.fit(spectra, wl[:-1], library=library_dir)
    with pytest.raises(unblend.UnblendError, match="baseline 'quadratic'"):
        unblend.fit(spectra, wl, library=library_dir, baseline="quadratic")
    with pytest.raises(unblend.UnblendError, match="pathlength"):
        unblend.fit(spectra, wl, library=library_dir, pathlength_cm=0)
    doubled = wl.copy()
    doubled[5] = doubled[4]
    with pytest.raises(unblend.UnblendError, match="wavelengths"):
        unblend.fit(spectra, doubled, library=library_dir)
    with pytest.raises(unblend.UnblendError, match="needed for an array"):
        unblend.fit(spectra, library=library_dir)


def test_a_bad_spectrum_is_an_error_row_and_the_others_are_fitted(library_dir):
    spectra, wl, _ = mixtures(4)
    spectra[2, 7] = np.nan
    table = unblend.fit(spectra, wl, library=library_dir)
    failed = table[table["error"].notna()]
    assert list(failed["sample"].astype(str)) == ["2"]
    assert "407 nm" in failed["error"].iloc[0] and "expected a finite number" in failed["error"].iloc[0]
    assert failed["component"].isna().all()
    assert set(table[table["error"].isna()]["sample"].astype(str)) == {"0", "1", "3"}


def test_library_lists_and_inspects_components(library_dir):
    lib = unblend.Library(library_dir)
    assert lib.names == ["ember-red", "fjord-blue", "saffron-yellow"]
    assert len(lib) == 3 and "fjord-blue" in lib and lib.broken == []
    info = lib.info("fjord-blue")
    assert info["range_low_nm"] < info["range_high_nm"]
    wl, eps = lib.epsilon("fjord-blue")
    assert wl.shape == eps.shape == (info["n_points"],)
    assert np.all(np.diff(wl) > 0) and np.all(eps >= 0)
    with pytest.raises(unblend.UnblendError, match="no component 'violet'"):
        lib.info("violet")


def test_command_runs_through_the_module(capfd):
    assert unblend.main(["--version"]) == 0
    assert unblend.__version__ in capfd.readouterr().out
    assert unblend.main(["fit", "--no-such-flag"]) == 2
    run = command("library", "list", "--library", str(pathlib.Path(__file__).parents[2] / "library"))
    assert run.returncode == 0 and "fjord-blue" in run.stdout


def test_the_readme_example_runs(monkeypatch):
    """The README's "From Python" example, as written, from the repository root."""
    root = pathlib.Path(__file__).resolve().parents[2]
    text = (root / "README.md").read_text()
    section = text.split("## From Python", 1)[1].split("\n## ", 1)[0]
    code = section.split("```python\n", 1)[1].split("```", 1)[0]
    monkeypatch.chdir(root)
    scope = {}
    exec(compile(code, "README.md (From Python)", "exec"), scope)
    assert set(scope["results"].columns) == set(unblend.COLUMNS)
    assert scope["table"].num_rows == 2 * 19


def test_json_lines_from_the_command_read_with_pandas(tmp_path, demo_csv, library_dir):
    """`--format jsonl` read by pandas.read_json(lines=True), an outside JSON Lines reader."""
    out = tmp_path / "r.jsonl"
    run = command("fit", demo_csv, "--library", library_dir, "--format", "jsonl", "--out", str(out))
    assert run.returncode == 0, run.stderr
    lines = pd.read_json(out, lines=True)
    table = unblend.fit(read_csv_exact(demo_csv), library=library_dir)
    assert list(lines["sample"]) == list(dict.fromkeys(table["sample"].astype(str)))
    # pandas' JSON reader rounds some numbers in the last bit; Python's json
    # module reads them exactly (float() is correctly rounded).
    first = json.loads(out.read_text().splitlines()[0])["components"]
    mine = table[table["sample"] == lines["sample"].iloc[0]]
    assert [c["name"] for c in first] == list(mine["component"].astype(str))
    # JSON numbers are written in shortest round-trip form: the same doubles.
    assert [c["concentration_mol_per_l"] for c in first] == list(mine["concentration_mol_per_l"])
