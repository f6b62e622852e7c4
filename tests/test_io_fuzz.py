"""Property-based test: the reader returns a valid Dataset or raises InputError, nothing else.

Inputs are random bytes and valid tables broken by random mutations (cells deleted, text
inserted, truncation, NUL bytes, delimiters swapped, lines duplicated or reordered, signs
flipped). Common practice for parsers (fuzzing), no outside source.
"""

from __future__ import annotations

import warnings

import numpy as np
import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from kkcheck.errors import InputError
from kkcheck.io import read_table
from kkcheck.spectrum import Dataset

SETTINGS = settings(
    max_examples=200,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)

HEADERS = [
    ("wavelength_nm", "n", "k"),
    ("Wavelength (um)", "n", "k"),
    ("energy (eV)", "eps1", "eps2"),
    ("Wavenumber (cm-1)", "e1", "e2"),
    ("freq_THz", "N", "K"),
    ("photon energy (eV)", "Eps1", "Eps2"),
]
DELIMS = [",", "\t", ";", " ", ", "]
JUNK = ["abc", "nan", "inf", "-1", "0", "1,5", "#", '"', "1e999", "\x00", "µ", "", "  ", "--"]


def _check(path, **kwargs):
    """Call read_table; assert the outcome is a clean Dataset or an InputError."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # averaged duplicates warn; allowed
        try:
            ds = read_table(path, **kwargs)
        except InputError as err:
            assert "\n" not in str(err)
            assert str(path) in str(err)
            return None
    assert isinstance(ds, Dataset)
    e = ds.energy_ev
    assert e.size >= 3
    assert np.all(np.isfinite(e)) and e[0] > 0 and np.all(np.diff(e) > 0)
    assert np.all(np.isfinite(ds.eps))
    assert ds.provenance.rows.shape == e.shape and np.all(ds.provenance.rows >= 1)
    for s in (ds.sigma_eps1, ds.sigma_eps2):
        assert s is None or (s.shape == e.shape and not np.any(s < 0))
    return ds


@SETTINGS
@given(data=st.binary(max_size=600))
def test_random_bytes(tmp_path_factory, data):
    p = tmp_path_factory.mktemp("fz") / "random.csv"
    p.write_bytes(data)
    _check(p)
    _check(p, axis="wavelength_nm", quantity="nk")


@st.composite
def broken_tables(draw):
    header = draw(st.sampled_from(HEADERS))
    delim = draw(st.sampled_from(DELIMS))
    n = draw(st.integers(1, 12))
    axis = draw(
        st.lists(
            st.floats(0.01, 5000, allow_nan=False, allow_infinity=False), min_size=n, max_size=n
        )
    )
    v1 = draw(st.lists(st.floats(-50, 50, allow_nan=False), min_size=n, max_size=n))
    v2 = draw(st.lists(st.floats(-50, 50, allow_nan=False), min_size=n, max_size=n))
    with_header = draw(st.booleans())
    lines = [delim.join(header)] if with_header else []
    lines += [delim.join(repr(x) for x in row) for row in zip(axis, v1, v2, strict=True)]
    if draw(st.booleans()):
        lines.insert(0, "# a comment")
    n_mut = draw(st.integers(0, 4))
    for _ in range(n_mut):
        kind = draw(
            st.sampled_from(
                ["delete_cell", "insert_text", "swap_delim", "duplicate", "swap_lines", "blank"]
            )
        )
        if not lines:
            break
        i = draw(st.integers(0, len(lines) - 1))
        cells = lines[i].split(delim)
        if kind == "delete_cell" and cells:
            del cells[draw(st.integers(0, len(cells) - 1))]
            lines[i] = delim.join(cells)
        elif kind == "insert_text":
            j = draw(st.integers(0, len(cells)))
            cells.insert(j, draw(st.sampled_from(JUNK)))
            lines[i] = delim.join(cells)
        elif kind == "swap_delim":
            lines[i] = lines[i].replace(delim, draw(st.sampled_from(DELIMS)))
        elif kind == "duplicate":
            lines.insert(i, lines[i])
        elif kind == "swap_lines":
            j = draw(st.integers(0, len(lines) - 1))
            lines[i], lines[j] = lines[j], lines[i]
        else:
            lines.insert(i, "")
    text = draw(st.sampled_from(["\n", "\r\n", "\r"])).join(lines)
    encoding = draw(st.sampled_from(["utf-8"] * 4 + ["utf-16", "cp1252"]))
    raw = text.encode(encoding, errors="replace")
    if draw(st.integers(0, 3)) == 0:
        raw = raw[: draw(st.integers(0, len(raw)))]
    if draw(st.integers(0, 9)) == 0 and raw:
        k = draw(st.integers(0, len(raw)))
        raw = raw[:k] + b"\x00" + raw[k:]
    return raw, with_header


@SETTINGS
@given(case=broken_tables(), axis=st.sampled_from([None, "wavelength_nm", "energy_ev"]))
def test_broken_tables(tmp_path_factory, case, axis):
    raw, with_header = case
    p = tmp_path_factory.mktemp("fz") / "broken.txt"
    p.write_bytes(raw)
    if with_header and axis is None:
        _check(p)
    else:
        _check(p, axis=axis, quantity="nk" if axis else None)


@SETTINGS
@given(
    energies=st.lists(st.floats(0.05, 50, allow_nan=False), min_size=3, max_size=30, unique=True),
    k_sign=st.sampled_from([1.0, -1.0]),
)
def test_valid_tables_always_read(tmp_path_factory, energies, k_sign):
    # unmutated tables with >= 3 distinct energies must read, in any row order
    rows = "\n".join(f"{e!r},1.5,{k_sign * (0.1 + i)!r}" for i, e in enumerate(energies))
    p = tmp_path_factory.mktemp("fz") / "valid.csv"
    p.write_text(f"energy (eV),n,k\n{rows}\n")
    ds = _check(p)
    assert ds is not None and len(ds) == len(set(energies))
    assert ds.converted == (k_sign < 0)
    assert np.all(ds.eps.imag > 0)


# ------------------------------------------------------------------------------------------
# decimal commas and unit-implausible axes: zero silent misreads (issue 15 item 4)
# ------------------------------------------------------------------------------------------
HC_EV_NM = 1239.841984  # CODATA 2018 (Tiesinga et al., Rev. Mod. Phys. 93, 025010, 2021)
_TRUE_UNITS = {  # unit -> (header, range of values, to eV)
    "wavelength_nm": ("wavelength_nm", (200.0, 2000.0), lambda x: HC_EV_NM / x),
    "wavelength_um": ("wavelength (um)", (0.2, 5.0), lambda x: HC_EV_NM / (1e3 * x)),
    "energy_ev": ("energy (eV)", (0.5, 10.0), lambda x: x),
}


@st.composite
def marked_tables(draw):
    """A true n,k table written with a decimal mark, a delimiter and maybe a wrong unit."""
    unit = draw(st.sampled_from(sorted(_TRUE_UNITS)))
    header, (lo, hi), _ = _TRUE_UNITS[unit]
    # the unit slip: micrometre values under a nm header
    label = "wavelength_nm" if unit == "wavelength_um" and draw(st.booleans()) else unit
    if label != unit:
        header = "wavelength (nm)"
    n_pts = draw(st.integers(3, 10))
    dec = draw(st.integers(0, 3))
    xs = sorted(
        set(
            round(v, dec) for v in draw(st.lists(st.floats(lo, hi), min_size=n_pts, max_size=n_pts))
        )
    )
    n = [
        round(v, draw(st.integers(0, 3)))
        for v in draw(st.lists(st.floats(1.0, 3.0), min_size=len(xs), max_size=len(xs)))
    ]
    k = [
        round(v, draw(st.integers(0, 3)))
        for v in draw(st.lists(st.floats(0.0, 1.0), min_size=len(xs), max_size=len(xs)))
    ]
    mark = draw(st.sampled_from([".", ","]))
    delim = draw(st.sampled_from([",", ";", "\t", " "]))
    with_header = draw(st.booleans())

    def fmt(v):
        text = repr(float(v)) if draw(st.booleans()) else f"{v:.6f}"
        return text.replace(".", mark)

    lines = [delim.join(fmt(v) for v in row) for row in zip(xs, n, k)]
    if with_header:
        lines.insert(0, delim.join([header, "n", "k"]))
    return "\n".join(lines) + "\n", unit, label, with_header, np.array(xs), np.array(n), np.array(k)


def _no_silent_misread(tmp_path_factory, case):
    text, unit, label, with_header, xs, n, k = case
    p = tmp_path_factory.getbasetemp() / "marked.txt"  # one file, rewritten: fast
    p.write_text(text, encoding="utf-8")
    kwargs = {} if with_header else {"axis": label, "quantity": "nk"}
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            ds = read_table(p, **kwargs)
        except InputError as err:
            assert "\n" not in str(err) and str(p) in str(err)
            return
    if len(set(xs.tolist())) < 3:
        return  # too few distinct points should have been refused; covered elsewhere
    true_e = _TRUE_UNITS[unit][2](xs)
    order = np.argsort(true_e)
    read_e = _TRUE_UNITS["wavelength_nm"][2](xs) if label != unit else true_e
    if label != unit:
        # read on the stated (wrong) unit: it must say so, in a note and a warning
        assert any(s.startswith("plausibility:") for s in ds.provenance.notes), text
        assert any("plausibility" in str(w.message) for w in caught)
        np.testing.assert_allclose(ds.energy_ev, np.sort(read_e), rtol=1e-12)
        return
    np.testing.assert_allclose(ds.energy_ev, true_e[order], rtol=1e-12, err_msg=text)
    np.testing.assert_allclose(
        ds.eps, ((n + 1j * k) ** 2)[order], rtol=1e-12, atol=1e-15, err_msg=text
    )


@SETTINGS
@given(case=marked_tables())
def test_decimal_marks_and_units_never_misread(tmp_path_factory, case):
    _no_silent_misread(tmp_path_factory, case)


@pytest.mark.slow
@settings(
    max_examples=10_000,
    deadline=None,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)
@given(case=marked_tables())
def test_decimal_marks_and_units_never_misread_10000(tmp_path_factory, case):
    _no_silent_misread(tmp_path_factory, case)
