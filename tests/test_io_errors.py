"""Every reader error: one line, naming the file and the line, saying what was expected.

Expected messages are the project's own wording (common practice, no source); what is checked
against the outside is only where the fault is (file name, 1-based line number).
"""

from __future__ import annotations

import re

import pytest

from kkcheck.errors import InputError
from kkcheck.io import read_table

NOHDR = {"axis": "wavelength_nm", "quantity": "nk"}

# (case id, file bytes, read_table keywords, line number or None, message regex)
CASES = [
    ("empty", b"", {}, None, r"^empty file: expected a table"),
    (
        "only_comments",
        b"# only\n\n   # comments\n",
        {},
        None,
        r"^no data rows \(only comments or blank lines\)",
    ),
    ("header_only", b"energy_ev,n,k\n", {}, 1, r"^header row but no data rows"),
    (
        "single_column",
        b"energy_ev\n1\n2\n3\n",
        {},
        1,
        r"^only one column; expected an axis column and two value columns",
    ),
    (
        "single_column_no_header",
        b"1\n2\n3\n",
        NOHDR,
        1,
        r"^only one column; expected an axis column",
    ),
    ("two_columns", b"energy_ev,n\n1,2\n2,2\n3,2\n", {}, 1, r"^only two columns; expected"),
    (
        "unknown_header",
        b"# made by hand\nenergy_ev,x,k\n1,2,3\n",
        {},
        2,
        r"^unknown column name 'x' in the header; expected an axis column naming its unit "
        r"\(e\.g\. wavelength_nm.*value columns n,k or eps1,eps2",
    ),
    (
        "bad_unit",
        b"wavelength (A),n,k\n1,2,3\n",
        {},
        1,
        r"^axis column 'wavelength \(A\)': unit 'A' is not understood .* expected nm, um, eV, "
        r"cm-1 or THz",
    ),
    (
        "unit_does_not_fit",
        b"energy (nm),n,k\n1,2,3\n",
        {},
        1,
        r"^axis column 'energy \(nm\)': unit 'nm' is not understood or does not fit the axis",
    ),
    (
        "axis_without_unit",
        b"wavenumber,n,k\n1,2,3\n",
        {},
        1,
        r"^axis column 'wavenumber' does not name its unit; write e\.g\. 'wavenumber \(nm\)' "
        r"or give --axis",
    ),
    ("no_axis", b"n,k,e1\n1,2,3\n", {}, 1, r"^no axis column in the header"),
    ("value_twice", b"energy_ev,n,n,k\n1,2,3,3\n", {}, 1, r"^column n appears twice"),
    ("k_missing", b"energy_ev,n,dn,dk\n1,2,3,3\n", {}, 1, r"^column n has no partner k"),
    (
        "sigma_partner",
        b"energy_ev,n,k,dn\n1,2,3,1\n",
        {},
        1,
        r"^uncertainty column sigma_n has no partner sigma_k",
    ),
    (
        "no_header_no_options",
        b"\n\n1,2,3\n2,2,3\n3,2,3\n",
        {},
        3,
        r"^the first row is numeric, so the table has no header; give --axis \(energy_ev, "
        r"wavelength_nm, wavelength_um, wavenumber_cm-1, frequency_thz\) and --quantity "
        r"\(nk or eps\)",
    ),
    (
        "no_header_axis_only",
        b"1,2,3\n2,2,3\n3,2,3\n",
        {"axis": "energy_ev"},
        1,
        r"^the first row is numeric, so the table has no header; give --axis",
    ),
    (
        "no_header_four_columns",
        b"1,2,3,4\n2,2,3,4\n3,2,3,4\n",
        NOHDR,
        1,
        r"^a table without a header needs 3 columns \(axis, two values\) or 5 .*found 4",
    ),
    (
        "header_option_disagree",
        b"energy_ev,n,k\n1,2,3\n2,2,3\n3,2,3\n",
        {"axis": "wavelength_nm"},
        1,
        r"^the header says the axis is energy_ev but --axis wavelength_nm was given",
    ),
    (
        "quantity_disagree",
        b"energy_ev,n,k\n1,2,3\n2,2,3\n3,2,3\n",
        {"quantity": "eps"},
        1,
        r"^the header has n,k but --quantity eps was given",
    ),
    (
        "row_too_short",
        b"energy_ev,n,k\n1,2,3\n2,2\n3,2,3\n",
        {},
        3,
        r"^expected 3 ','-separated cells as in the header \(line 1\), found 2",
    ),
    (
        "row_too_long_whitespace",
        b"1 2 3\n2 2 3 4\n3 2 3\n",
        NOHDR,
        2,
        r"^expected 3 whitespace-separated cells as in the first row, found 4",
    ),
    (
        "text_in_number",
        b"energy_ev,n,k\n1,2,3\n2,abc,3\n3,2,3\n",
        {},
        3,
        r"^column 2 \(n\): expected a number, found 'abc'",
    ),
    (
        # a quoted decimal comma in a ','-separated table (a ';' table now reads, see
        # tests/test_io_formats.py)
        "decimal_comma",
        b'energy_ev,n,k\n1,"2,5",3\n2,"2,5",3\n3,"2,5",3\n',
        {},
        2,
        r"^column 2 \(n\): '2,5' uses a decimal comma; expected a number with a decimal point",
    ),
    ("empty_cell", b"energy_ev,n,k\n1,2,3\n2,,3\n", {}, 3, r"^column 2 \(n\) is empty"),
    (
        "nan_value",
        b"energy_ev,n,k\n1,2,3\n2,NaN,3\n3,2,3\n",
        {},
        3,
        r"^column 2 \(n\): 'NaN' is not a finite number",
    ),
    (
        "inf_value",
        b"energy_ev,n,k\n1,2,3\n2,2,-inf\n3,2,3\n",
        {},
        3,
        r"^column 3 \(k\): '-inf' is not a finite number",
    ),
    (
        "overflow_value",
        b"energy_ev,n,k\n1,2,3\n2,1e400,3\n",
        {},
        3,
        r"^column 2 \(n\): '1e400' is too large to be a finite number",
    ),
    (
        "nan_axis",
        b"energy_ev,n,k\n1,2,3\nnan,2,3\n3,2,3\n",
        {},
        3,
        r"^column 1 \(energy_ev\): 'nan' is not a finite number",
    ),
    (
        "zero_wavelength",
        b"wavelength_nm,n,k\n500,2,3\n0,2,3\n300,2,3\n",
        {},
        3,
        r"^non-positive wavelength 0 in column 1; expected values > 0",
    ),
    (
        "negative_energy",
        b"energy_ev,n,k\n1,2,3\n2,2,3\n-3,2,3\n",
        {},
        4,
        r"^non-positive photon energy -3 in column 1; expected values > 0",
    ),
    (
        "negative_sigma",
        b"energy_ev,n,k,dn,dk\n1,2,3,0.1,0.1\n2,2,3,0.1,-0.1\n3,2,3,0.1,0.1\n",
        {},
        3,
        r"^negative uncertainty -0\.1; expected a standard uncertainty >= 0",
    ),
    (
        # N = n + i k has n >= 0 in both time conventions (Born & Wolf, Principles of
        # Optics, ch. 14: the sign of k, not n, carries the convention); from memory
        "negative_n_column",
        b"energy_ev,n,k\n1,-2,0.3\n2,-2.1,0.3\n3,-2.2,0.3\n",
        {},
        2,
        r"^negative refractive index n = -2 \(3 of 3 rows\); expected n >= 0",
    ),
    (
        "nul_byte",
        b"energy_ev,n,k\n1,2,3\n2,2\x00,3\n3,2,3\n",
        {},
        3,
        r"^binary content \(NUL byte\): expected a text table",
    ),
    (
        "control_char",
        b"energy_ev,n,k\n1,2,3\n2,2,3\x01\n",
        {},
        3,
        r"^binary content \(control character '\\x01'\): expected a text table",
    ),
    (
        "undecodable",
        b"energy_ev,n,k\r\n1,2,3\r\n2,\x81\x8d,3\r\n",
        {},
        3,
        r"^binary content \(bytes that are neither UTF-8 nor Windows-1252\)",
    ),
    (
        "png_header",
        b"\x89PNG\r\n\x1a\n\x00\x00\x00\rIHDR",
        {},
        3,
        r"^binary content \(NUL byte\)",
    ),
    (
        "too_few_points",
        b"energy_ev,n,k\n1,2,3\n2,2,3\n",
        {},
        3,
        r"^only 2 distinct axis value\(s\); expected at least 3 points",
    ),
    (
        "too_few_after_duplicates",
        b"energy_ev,n,k\n1,2,3\n2,2,3\n2,2,3\n",
        {},
        4,
        r"^only 2 distinct axis value\(s\); expected at least 3 points",
    ),
    (
        "all_equal_axis",
        b"energy_ev,n,k\n2,2,3\n2,2,3\n2,2,3\n2,2,3\n",
        {},
        2,
        r"^all 4 axis values are equal \(2\); expected at least 3 distinct values",
    ),
    (
        "nk_eps_disagree",
        b"energy_ev,eps1,eps2,n,k\n1,-5,12,2,3\n2,-5,12,2,3.1\n3,-5,12,2,3\n",
        {},
        3,
        r"^columns n,k and eps1,eps2 disagree",
    ),
    (
        "axis_columns_disagree",
        b"wavelength_nm,energy_ev,n,k\n1239.841984,1,2,3\n1000,2,2,3\n",
        {},
        3,
        r"^axis columns 1 \(wavelength_nm\) and 2 \(energy_ev\) disagree",
    ),
    (
        "eps_overflow",
        b"energy_ev,n,k\n1,2,3\n2,1e200,3\n3,2,3\n",
        {},
        3,
        r"^values too large: eps1 or eps2 is not a finite number",
    ),
    (
        "subnormal_wavelength",
        b"wavelength_nm,n,k\n500,2,3\n1e-320,2,3\n300,2,3\n",
        {},
        3,
        r"^wavelength 9\.99989e-321 gives no finite positive photon energy",
    ),
]


@pytest.mark.parametrize("name,content,kwargs,line,pattern", CASES, ids=[c[0] for c in CASES])
def test_error_message(tmp_path, name, content, kwargs, line, pattern):
    p = tmp_path / f"{name}.csv"
    p.write_bytes(content)
    with pytest.raises(InputError) as info:
        read_table(p, **kwargs)
    err = info.value
    text = str(err)
    assert "\n" not in text
    assert err.path == str(p)
    assert err.line == line
    prefix = f"{p}:{line}: " if line is not None else f"{p}: "
    assert text.startswith(prefix), text
    assert f"{name}.csv" in text
    assert re.search(pattern, err.message), err.message


def test_missing_file(tmp_path):
    p = tmp_path / "nope.csv"
    with pytest.raises(InputError) as info:
        read_table(p)
    assert str(info.value) == f"{p}: file not found: expected an existing table file"


def test_directory(tmp_path):
    with pytest.raises(InputError) as info:
        read_table(tmp_path)
    assert str(info.value) == f"{tmp_path}: is a directory: expected a table file"


def test_long_token_is_shortened(tmp_path):
    p = tmp_path / "long.csv"
    p.write_text("energy_ev,n,k\n1,2,3\n2," + "x" * 500 + ",3\n")
    with pytest.raises(InputError, match=r"found 'x{37}\.\.\.'$") as info:
        read_table(p)
    assert info.value.line == 3 and len(str(info.value)) < 200


def test_options_are_input_errors(tmp_path):
    p = tmp_path / "ok.csv"
    p.write_text("1,2,3\n2,2,3\n3,2,3\n")
    with pytest.raises(InputError, match=r"^unknown axis 'furlong'; expected one of energy_ev"):
        read_table(p, axis="furlong", quantity="nk")


def test_first_fault_in_file_order_is_reported(tmp_path):
    # a fault in column 3 on line 3 comes before a fault in column 1 on line 5
    p = tmp_path / "order.csv"
    p.write_text("energy_ev,n,k\n1,2,3\n2,2,x\n3,2,3\ny,2,3\n")
    with pytest.raises(InputError, match=r"order\.csv:3: column 3 \(k\)"):
        read_table(p)


def test_fault_deep_in_a_large_table(tmp_path):
    rows = [f"{1 + i * 1e-3!r},1.5,0.01" for i in range(5000)]
    rows[4321] = "5.321,1.5,0.0l"  # letter l typed for digit 1
    p = tmp_path / "large.csv"
    p.write_text("energy_ev,n,k\n" + "\n".join(rows) + "\n")
    with pytest.raises(InputError) as info:
        read_table(p)
    assert info.value.line == 4323  # header is line 1, row index 4321 is line 4323
    assert info.value.message == "column 3 (k): expected a number, found '0.0l'"
