"""Workbooks (.xlsx, issue 16 item 1) and the wiring of column selection (job file, --columns).

Expected values are the numbers written into each workbook or table (closed form: the file is
the truth); hc = 1239.841984 eV nm (CODATA 2018, Tiesinga et al., Rev. Mod. Phys. 93, 025010,
2021). Messages are the project's own wording (common practice, no source).
"""

from __future__ import annotations

import importlib.util

import numpy as np
import pytest

from kkcheck.errors import InputError
from kkcheck.io import read_table
from kkcheck.io import workbook as wb

HC = 1239.841984  # eV nm
needs_openpyxl = pytest.mark.skipif(
    importlib.util.find_spec("openpyxl") is None, reason="openpyxl not installed (kkcheck[xlsx])"
)


def _book(tmp_path, sheets):
    import pandas as pd

    p = tmp_path / "b.xlsx"
    with pd.ExcelWriter(p, engine="openpyxl") as w:
        for name, rows in sheets.items():
            pd.DataFrame(rows).to_excel(w, sheet_name=name, index=False, header=False)
    return p


_ROWS = [
    ["Sample: thermal oxide", None, None, None],
    ["Wavelength (nm)", "Psi (deg)", "n", "k"],
    [400.0, 10.5, 1.47, 0.0],
    [500.0, 11.0, 1.462, 1.5e-7],
    [600.0, 12.25, 1.458, 0.1],
]


@needs_openpyxl
def test_xlsx_named_sheet_reads_like_text(tmp_path):
    p = _book(tmp_path, {"notes": [["nothing here"]], "data": _ROWS})
    ds = read_table(p, sheet="data")
    np.testing.assert_array_equal(ds.energy_ev, HC / np.array([600.0, 500.0, 400.0]))
    n = np.array([1.458, 1.462, 1.47])
    k = np.array([0.1, 1.5e-7, 0.0])
    np.testing.assert_array_equal(ds.eps, (n + 1j * k) ** 2)  # the stored binary values
    notes = ds.provenance.notes
    assert "metadata (line 1): Sample: thermal oxide" in notes
    assert any("not used: 2 ('Psi (deg)')" in s for s in notes)
    assert ds.value_quantum is None and any("printed digits: not known" in s for s in notes)
    assert list(ds.provenance.rows) == [5, 4, 3]  # sheet rows


@needs_openpyxl
def test_xlsx_first_sheet_columns_and_errors(tmp_path):
    p = _book(tmp_path, {"data": _ROWS, "other": [["x"]]})
    ds = read_table(p, columns={"axis": 1, "n": 3, "k": 4})
    assert len(ds) == 3
    with pytest.raises(InputError, match=r"no sheet named 'zz'; the workbook has 'data', 'other'"):
        read_table(p, sheet="zz")
    bad = _book(tmp_path, {"s": [["wavelength_nm", "n", "k"], [400.0, 1.5, "abc"], [500, 1, 0]]})
    with pytest.raises(InputError, match=r"b\.xlsx:2: column 3 \(k\): expected a number"):
        read_table(bad)


def test_xlsx_without_openpyxl_says_how_to_get_it(tmp_path, monkeypatch):
    p = tmp_path / "b.xlsx"
    p.write_bytes(b"PK\x03\x04" + b"\x00" * 60)
    real = importlib.util.find_spec
    monkeypatch.setattr(
        wb.importlib.util, "find_spec", lambda n, *a: None if n == "openpyxl" else real(n, *a)
    )
    with pytest.raises(
        InputError, match=r"needs the openpyxl package: pip install 'kkcheck\[xlsx\]'"
    ):
        read_table(p)


def _table(tmp_path):
    p = tmp_path / "e.csv"
    rows = "\n".join(f"{400 + 50 * i},{10 + i},{1.5 - 0.01 * i},{0.01 * i}" for i in range(8))
    p.write_text("Wavelength (nm),Psi (deg),n,k\n" + rows + "\n")
    return p


def test_job_file_columns_entry(tmp_path):
    from kkcheck.job import input_specs, job_options
    from kkcheck.pipeline import read_inputs

    p = _table(tmp_path)
    entry = {"path": str(p), "columns": {"axis": "Wavelength (nm)", "n": 3, "k": 4}}
    (spec,) = input_specs([entry], job_options())
    assert spec.columns == {"axis": "Wavelength (nm)", "n": 3, "k": 4}
    (ds,) = read_inputs([spec])
    assert any("chosen by the columns option" in s for s in ds.provenance.notes)
    np.testing.assert_allclose(np.sqrt(ds.eps).real[-1], 1.5, rtol=1e-15)
    with pytest.raises(InputError, match=r"columns of input entry .* must be a table"):
        input_specs([{"path": str(p), "columns": "1,2,3"}], job_options())


def test_toml_columns_entry_parsed(tmp_path):
    from kkcheck.job import input_specs, load_config

    p = _table(tmp_path)
    cfg = tmp_path / "job.toml"
    cfg.write_text(
        f'inputs = [{{path = "{p}", columns = {{axis = "Wavelength (nm)", n = 3, k = 4}}}}]\n'
    )
    inputs, _, options = load_config(cfg)
    specs = input_specs(inputs, options)
    assert specs[0].columns == {"axis": "Wavelength (nm)", "n": 3, "k": 4}


def test_cli_columns_option_parsed():
    from kkcheck.cli import build_parser, parse_columns

    assert parse_columns("axis=1,n=2,k=3") == {"axis": 1, "n": 2, "k": 3}
    assert parse_columns("axis=Wavelength (nm),n=n,k=4") == {
        "axis": "Wavelength (nm)",
        "n": "n",
        "k": 4,
    }
    args = build_parser().parse_args(
        ["check", "x.csv", "-o", "o", "--columns", "axis=1,n=3", "--quantity", "n"]
    )
    assert args.columns == {"axis": 1, "n": 3} and args.quantity == "n"
    with pytest.raises(SystemExit):
        build_parser().parse_args(["check", "x.csv", "-o", "o", "--columns", "axis"])
