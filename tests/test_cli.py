"""The command line: help, version, exit codes, one-line errors, outputs and their contract."""

import hashlib
import json
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from kkcheck import __version__
from kkcheck.cli import main
from kkcheck.materials import tauc_lorentz
from kkcheck.units import HC_EV_NM, eps_to_nk

ROOT = Path(__file__).resolve().parent.parent
DEMO = ROOT / "reference_data" / "demo"


def _write_clean_table(path: Path, seed: int = 0) -> Path:
    """A clean Tauc-Lorentz film (Jellison & Modine 1996 form, invented parameters) as n,k."""
    rng = np.random.default_rng(seed)
    lam = np.arange(300.0, 1000.0 + 1e-9, 4.0)
    n, k = eps_to_nk(2.0 + tauc_lorentz(HC_EV_NM / lam, 80.0, 4.0, 2.0, 2.2))
    n = n + rng.normal(0, 1e-3, lam.size)
    k = np.abs(k + rng.normal(0, 1e-3, lam.size))
    lines = ["wavelength_nm,n,k"] + [f"{a:.1f},{b:.5f},{c:.5f}" for a, b, c in zip(lam, n, k)]
    path.write_text("\n".join(lines) + "\n")
    return path


def test_help_and_version(capsys):
    with pytest.raises(SystemExit) as e:
        main(["--version"])
    assert e.value.code == 0
    assert __version__ in capsys.readouterr().out
    with pytest.raises(SystemExit):
        main(["check", "--help"])
    out = capsys.readouterr().out
    assert "--out" in out and "--axis" in out and "summary.json" in out


def test_console_script_entry_point_runs():
    # the installed console script and `python -m kkcheck.cli` agree
    r = subprocess.run(
        [sys.executable, "-m", "kkcheck.cli", "--version"], capture_output=True, text=True
    )
    assert r.returncode == 0 and r.stdout.strip() == f"kkcheck {__version__}"


@pytest.mark.parametrize(
    "content, expected",
    [
        (b"", "empty"),
        (b"# only a comment\n", "no data"),
        (b"wavelength_nm\n500\n600\n700\n", "column"),
        (b"colour,n,k\n500,1.5,0\n600,1.5,0\n700,1.5,0\n", "header"),
        (b"wavelength_nm,n,k\n500,1.5,0\n600,abc,0\n700,1.5,0\n", "abc"),
        (b"wavelength_nm,n,k\n500,1.5,0\n-600,1.5,0\n700,1.5,0\n", "positive"),
        (b"\x00\x01\x02\x03binary\xff\xfe", "binary"),
    ],
)
def test_bad_input_is_one_line_exit_2(tmp_path, capsys, content, expected):
    bad = tmp_path / "bad.csv"
    bad.write_bytes(content)
    code = main(["check", str(bad), "--out", str(tmp_path / "out")])
    err = capsys.readouterr().err
    assert code == 2
    assert err.count("\n") == 1, err  # exactly one line
    assert err.startswith("kkcheck: ") and "bad.csv" in err
    assert expected.lower() in err.lower()
    assert "Traceback" not in err
    assert bad.read_bytes() == content  # input untouched
    assert not (tmp_path / "out" / "summary.json").exists()


def test_bad_line_number_is_named(tmp_path, capsys):
    bad = tmp_path / "t.csv"
    bad.write_text("# note\nwavelength_nm,n,k\n500,1.5,0\n600,1.5,0\n700,x1,0\n")
    assert main(["check", str(bad), "--out", str(tmp_path / "o")]) == 2
    assert "t.csv:5" in capsys.readouterr().err


def test_missing_file(tmp_path, capsys):
    assert main(["check", str(tmp_path / "nope.csv"), "--out", str(tmp_path / "o")]) == 2
    assert "nope.csv" in capsys.readouterr().err


def test_debug_shows_traceback(tmp_path):
    bad = tmp_path / "bad.csv"
    bad.write_bytes(b"")
    from kkcheck.errors import InputError

    with pytest.raises(InputError):
        main(["check", str(bad), "--out", str(tmp_path / "o"), "--debug"])


def test_check_writes_contract_summary(tmp_path, capsys):
    src = _write_clean_table(tmp_path / "film.csv")
    before = src.read_bytes()
    out = tmp_path / "res"
    assert main(["check", str(src), "--out", str(out)]) == 0
    s = json.loads((out / "summary.json").read_text())
    # the machine-readable contract of DESIGN.md
    assert s["schema"] == "kkcheck.summary/1" and s["version"] == __version__
    (inp,) = s["inputs"]
    assert inp["sha256"] == hashlib.sha256(before).hexdigest()
    assert inp["points"] == 176 and inp["axis"] == "wavelength_nm" and inp["quantity"] == "nk"
    assert inp["range_ev"][0] == pytest.approx(HC_EV_NM / 1000.0)
    assert inp["range_ev"][1] == pytest.approx(HC_EV_NM / 300.0)
    assert s["convention"] == {**s["convention"], "detected": "exp(-iwt)", "converted": False}
    assert set(s["merge"]) >= {"sources", "gaps_ev"}
    assert s["merge"]["sources"][0]["scale"] == pytest.approx(1.0)
    assert isinstance(s["outliers"], list)
    assert set(s["kk"]) >= {"method", "anchors_ev", "rms", "max", "noise", "verdict", "regions"}
    assert s["kk"]["verdict"] == "consistent"
    assert "sum_rules" in s
    assert src.read_bytes() == before
    assert sorted(p.name for p in tmp_path.iterdir()) == ["film.csv", "res"]
    assert "consistent" in capsys.readouterr().out.lower()


def test_check_quiet_prints_nothing(tmp_path, capsys):
    src = _write_clean_table(tmp_path / "film.csv")
    assert main(["check", str(src), "--out", str(tmp_path / "o"), "--quiet"]) == 0
    assert capsys.readouterr().out == ""


def test_fit_writes_model(tmp_path):
    src = _write_clean_table(tmp_path / "film.csv", seed=1)
    out = tmp_path / "fit"
    assert main(["fit", str(src), "--out", str(out), "--quiet"]) == 0
    m = json.loads((out / "model.json").read_text())
    assert m["schema"] == "kkcheck.model/1" and m["frequency_unit"] == "eV"
    assert m["stable"] is True and m["passivity"]["certified"] is True
    assert m["metrics"]["rms_rel"] < 0.01
    assert (out / "repaired.csv").exists()


def test_refuses_to_write_over_input(tmp_path, capsys):
    src = _write_clean_table(tmp_path / "summary.json")
    before = src.read_bytes()
    code = main(["check", str(src), "--out", str(tmp_path), "--axis", "wavelength_nm"])
    assert code == 2
    assert "input" in capsys.readouterr().err
    assert src.read_bytes() == before


def test_demo_data_as_a_user_runs_it(tmp_path):
    # the three demo sources: planted scale 1.04 (NIR), a step, spikes, a KK fault near 480 nm,
    # the IR table in the exp(+iwt) convention (reference_data/README.md)
    out = tmp_path / "demo"
    files = [
        str(DEMO / n) for n in ("uvvis_ellipsometry.csv", "nir_ellipsometry.tsv", "handbook_ir.txt")
    ]
    assert main(["check", *files, "--out", str(out), "--quiet"]) == 0
    s = json.loads((out / "summary.json").read_text())
    assert s["convention"]["converted"] is True
    conv = {Path(i["path"]).name: i["converted"] for i in s["convention"]["per_input"]}
    assert conv == {
        "uvvis_ellipsometry.csv": False,
        "nir_ellipsometry.tsv": False,
        "handbook_ir.txt": True,
    }
    nir = next(x for x in s["merge"]["sources"] if x["name"] == "nir_ellipsometry")
    assert nir["scale"] == pytest.approx(1.04, abs=0.02)
    assert any(lo < 0.56 < hi or lo < 0.4 < hi for lo, hi in s["merge"]["gaps_ev"])
    assert s["kk"]["verdict"] == "inconsistent"
    # the planted n distortion is centred at 480 nm = 2.583 eV
    assert any(r["from_ev"] <= 2.7 and r["to_ev"] >= 2.45 for r in s["kk"]["regions"]), s["kk"][
        "regions"
    ]
    kinds = {o["kind"] for o in s["outliers"]}
    assert "spike" in kinds and "step" in kinds


def test_too_few_points_for_the_kk_test_names_the_file(tmp_path, capsys):
    few = tmp_path / "few.csv"
    few.write_text("energy (eV),n,k\n1.0,1.5,0.01\n1.1,1.5,0.01\n1.2,1.5,0.01\n")
    assert main(["check", str(few), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "few.csv" in err and "at least 8" in err
