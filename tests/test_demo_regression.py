"""The demo reproduces the committed outputs in ``reports/demo/``.

This is the guard for restructuring: moving code between modules must not change what kkcheck
computes.  ``kkcheck demo`` is run into a temporary folder and summary.json, model.json and every
table are compared with the committed copies, numbers to 1e-9 relative, text exactly, with only
the timestamps (and the output-folder path) ignored.  Source of the expected values: the
committed demo outputs themselves (a regression reference, common practice, no outside source).
When a deliberate behaviour change alters them, regenerate ``reports/demo`` with ``kkcheck demo``
and say why in the commit message.
"""

from __future__ import annotations

import csv
import json
import math
from pathlib import Path

import pytest

from kkcheck import pipeline

REPO = Path(__file__).resolve().parents[1]
COMMITTED = REPO / "reports" / "demo"
TABLES = ("cleaned.csv", "repaired.csv", "repaired_wavelength_nm.csv", "repair_changes.csv")
IGNORED_KEYS = {"created_utc", "out_dir", "output_dir", "elapsed_s", "timings_s"}
REL = 1e-9


def _close(a, b, path):
    if isinstance(a, bool) or isinstance(b, bool):
        assert a == b, path
    elif isinstance(a, (int, float)) and isinstance(b, (int, float)):
        if isinstance(a, float) and math.isnan(a):
            assert isinstance(b, float) and math.isnan(b), path
        else:
            assert a == pytest.approx(b, rel=REL, abs=1e-300), path
    elif isinstance(a, dict) and isinstance(b, dict):
        keys = (set(a) | set(b)) - IGNORED_KEYS
        assert set(a) - IGNORED_KEYS == set(b) - IGNORED_KEYS, f"{path}: keys differ"
        for k in sorted(keys):
            _close(a[k], b[k], f"{path}.{k}")
    elif isinstance(a, list) and isinstance(b, list):
        assert len(a) == len(b), f"{path}: length {len(a)} != {len(b)}"
        for i, (x, y) in enumerate(zip(a, b)):
            _close(x, y, f"{path}[{i}]")
    else:
        assert a == b, path


def _cell(text):
    try:
        return float(text)
    except ValueError:
        return text


def _table(path: Path):
    with open(path, newline="", encoding="utf-8") as fh:
        return [
            [_cell(c) for c in row]
            for row in csv.reader(fh)
            if row and not row[0].startswith("# written")
        ]


@pytest.fixture(scope="module")
def demo_out(tmp_path_factory):
    out = tmp_path_factory.mktemp("demo")
    pipeline.demo(out_dir=out, progress=False)
    return out


@pytest.mark.slow
@pytest.mark.parametrize("name", ["summary.json", "model.json"])
def test_demo_json_matches_committed(demo_out, name):
    new = json.loads((demo_out / name).read_text(encoding="utf-8"))
    old = json.loads((COMMITTED / name).read_text(encoding="utf-8"))
    _close(new, old, name)


@pytest.mark.slow
@pytest.mark.parametrize("name", TABLES)
def test_demo_tables_match_committed(demo_out, name):
    _close(_table(demo_out / name), _table(COMMITTED / name), name)
