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
DEMO = ROOT / "kkcheck" / "demo_data"


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
    from kkcheck.errors import OUTPUT_ERROR_EXIT

    assert code == OUTPUT_ERROR_EXIT  # a refused target (kkcheck.cli docstring)
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


# ------------------------------------------------------------------ issue 16: the user's habits


def _write_omega_table(path: Path) -> Path:
    """A Lorentz oscillator (closed form, invented parameters) on an omega (rad/s) axis."""
    from kkcheck.units import HBAR_EV_S

    e = np.linspace(0.5, 5.0, 240)
    eps = 2.5 + 3.0 / (4.0 - e**2 - 0.3j * e)
    lines = ["omega (rad/s),eps1,eps2"]
    lines += [f"{w:.9e},{z.real:.6f},{z.imag:.6f}" for w, z in zip(e / HBAR_EV_S, eps)]
    path.write_text("\n".join(lines) + "\n")
    return path


def _data_lines(path: Path) -> list[str]:
    return [x for x in path.read_text().splitlines() if not x.startswith("#")]


def test_fit_on_an_angular_frequency_axis_writes_a_table_that_reads_back(tmp_path):
    # issue 16: "would not read back", exit 3, half-written folder
    from kkcheck.io import read_table

    src = _write_omega_table(tmp_path / "w.csv")
    out = tmp_path / "o"
    assert main(["fit", str(src), "--out", str(out), "--quiet"]) == 0
    table = out / "repaired_angular_frequency_rad_s.csv"
    header = _data_lines(table)[0].split(",")
    assert len(header) == len(set(header))  # the axis once
    back = read_table(table)
    assert back.axis == "angular_frequency_rad_s"
    ref = read_table(out / "repaired.csv")
    np.testing.assert_allclose(back.energy_ev, ref.energy_ev, rtol=1e-11)


def test_repaired_wavelength_table_has_its_axis_once_and_rounded(tmp_path):
    # issue 16: wavelength_nm twice, 251.99999999999997; the axis carries 15 significant digits
    src = _write_clean_table(tmp_path / "film.csv", seed=2)
    out = tmp_path / "o"
    assert main(["fit", str(src), "--out", str(out), "--quiet", "--pairs", "2"]) == 0
    lines = _data_lines(out / "repaired_wavelength_nm.csv")
    header = lines[0].split(",")
    assert header.count("wavelength_nm") == 1 and header[0] == "wavelength_nm"
    lam = [x.split(",")[0] for x in lines[1:]]
    # the input's grid is 300, 304, ... nm exactly (printed with one decimal)
    given = {f"{v:.1f}" for v in np.arange(300.0, 1000.0 + 1e-9, 4.0)}
    assert set(lam) >= given
    assert all(len(v.replace(".", "").lstrip("0")) <= 16 for v in lam)  # not 17: no round-off


def test_no_command_exits_2_with_usage_on_stderr(capsys):
    assert main([]) == 2
    cap = capsys.readouterr()
    assert cap.out == "" and "usage: kkcheck" in cap.err


def test_every_option_has_help():
    import argparse

    from kkcheck.cli import build_parser

    parser = build_parser()
    subs = next(a for a in parser._actions if isinstance(a, argparse._SubParsersAction))
    missing = [
        f"{name} {'/'.join(a.option_strings) or a.dest}"
        for name, sp in subs.choices.items()
        for a in sp._actions
        if not a.help and not isinstance(a, argparse._HelpAction)
    ]
    assert missing == []


def test_json_on_stdout_matches_summary_json(tmp_path, capsys):
    src = _write_clean_table(tmp_path / "film.csv", seed=3)
    out = tmp_path / "o"
    assert main(["check", str(src), "--out", str(out), "--json"]) == 0
    printed = json.loads(capsys.readouterr().out)
    assert printed == json.loads((out / "summary.json").read_text())


def test_fail_on_inconsistent_exit_code(tmp_path):
    # the demo's UV-visible table carries a planted KK fault near 480 nm (reference_data/README.md)
    bad = DEMO / "uvvis_ellipsometry.csv"
    good = _write_clean_table(tmp_path / "film.csv", seed=4)
    args = ["--quiet", "--fail-on-inconsistent"]
    assert main(["check", str(bad), "--out", str(tmp_path / "a"), *args]) == 1
    assert main(["check", str(bad), "--out", str(tmp_path / "b"), "--quiet"]) == 0
    assert main(["check", str(good), "--out", str(tmp_path / "c"), *args]) == 0


@pytest.mark.parametrize(
    ("text", "lo_nm", "hi_nm"),
    [("400:800nm", 400.0, 800.0), ("1.55:3.1eV", HC_EV_NM / 3.1, HC_EV_NM / 1.55)],
)
def test_range_selects_the_window_in_any_unit(tmp_path, text, lo_nm, hi_nm):
    src = _write_clean_table(tmp_path / "film.csv", seed=5)
    out = tmp_path / "o"
    assert main(["check", str(src), "--out", str(out), "--quiet", "--range", text]) == 0
    s = json.loads((out / "summary.json").read_text())
    lo_ev, hi_ev = s["inputs"][0]["range_ev"]
    # the table's grid is every 4 nm from 300 nm: the kept points are the grid points inside
    lam = np.arange(300.0, 1000.0 + 1e-9, 4.0)
    inside = lam[(lam >= lo_nm * (1 - 1e-12)) & (lam <= hi_nm * (1 + 1e-12))]
    assert s["inputs"][0]["points"] == inside.size
    assert lo_ev == pytest.approx(HC_EV_NM / inside.max()) and hi_ev == pytest.approx(
        HC_EV_NM / inside.min()
    )
    assert any("range" in n for n in s["inputs"][0]["notes"])


@pytest.mark.parametrize("text", ["400-800nm", "400:800 furlongs", "800:800nm", "a:b"])
def test_bad_range_is_one_line_exit_2(tmp_path, capsys, text):
    src = _write_clean_table(tmp_path / "film.csv")
    assert main(["check", str(src), "--out", str(tmp_path / "o"), "--range", text]) == 2
    err = capsys.readouterr().err
    assert err.startswith("kkcheck: ") and err.count("\n") == 1 and "range" in err


def test_axis_out_names_the_extra_table(tmp_path):
    src = _write_clean_table(tmp_path / "film.csv", seed=6)
    out = tmp_path / "o"
    code = main(
        ["fit", str(src), "--out", str(out), "-q", "--pairs", "2", "--axis-out", "frequency_thz"]
    )
    assert code == 0
    assert (out / "repaired_frequency_thz.csv").exists()
    assert not (out / "repaired_wavelength_nm.csv").exists()


def test_stdin_as_input(tmp_path, monkeypatch):
    import io

    src = _write_clean_table(tmp_path / "film.csv", seed=7)
    fake = io.TextIOWrapper(io.BytesIO(src.read_bytes()))
    monkeypatch.setattr(sys, "stdin", fake)
    out = tmp_path / "o"
    assert main(["check", "-", "--out", str(out), "--quiet"]) == 0
    s = json.loads((out / "summary.json").read_text())
    assert s["inputs"][0]["path"] == "<stdin>" and s["inputs"][0]["points"] == 176
    assert s["inputs"][0]["sha256"] == hashlib.sha256(src.read_bytes()).hexdigest()


def test_warnings_go_to_stderr_not_stdout(tmp_path, capsys, monkeypatch):
    # the command line's plumbing: a stage warning recorded in the result goes to stderr
    import dataclasses

    from kkcheck import pipeline

    real = pipeline.check

    def warned(*a, **k):
        return dataclasses.replace(real(*a, **k), warnings=("UserWarning: planted for the test",))

    monkeypatch.setattr(pipeline, "check", warned)
    src = _write_clean_table(tmp_path / "film.csv", seed=8)
    assert main(["check", str(src), "--out", str(tmp_path / "o")]) == 0
    cap = capsys.readouterr()
    assert "planted" not in cap.out and "KK test" in cap.out
    assert "kkcheck: warning: UserWarning: planted for the test" in cap.err


def test_demo_writes_below_the_working_directory(tmp_path, monkeypatch):
    monkeypatch.chdir(tmp_path)
    committed = ROOT / "reports" / "demo" / "summary.json"
    before = committed.stat().st_mtime_ns if committed.exists() else None
    assert main(["demo", "--quiet"]) == 0
    assert (tmp_path / "kkcheck-demo" / "report.html").exists()
    after = committed.stat().st_mtime_ns if committed.exists() else None
    assert before == after
