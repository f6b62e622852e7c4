"""Batch runs: a folder of datasets vetted in parallel, one index, bad files reported not fatal.

The datasets are generated from closed-form dielectric functions, which are causal and so
KK-consistent by construction: Tauc-Lorentz (Jellison & Modine 1996), a Lorentz oscillator
(closed form), fused silica (Malitson 1965 Sellmeier formula) and gold (Rakić et al. 1998
Lorentz-Drude). A planted fault replaces k(E) by k(E - 0.05 eV) across the absorption band while
n stays put, so n and k are no longer a KK pair and the data must be called inconsistent.
"""

import csv
import io
import json
import sys
import threading
from pathlib import Path

import numpy as np
import pytest

from kkcheck import batch, pipeline
from kkcheck.batch import INDEX_COLUMNS, find_items, run_batch
from kkcheck.cli import main
from kkcheck.errors import InputError
from kkcheck.materials import lorentz, rakic_ld, sellmeier_silica, tauc_lorentz
from kkcheck.units import HC_EV_NM, eps_to_nk

#: (material, quantity written, planted fault) cycled through by index.
CASES = (
    ("tauc_lorentz", "nk", False),
    ("tauc_lorentz", "eps", False),
    ("tauc_lorentz", "nk", True),
    ("lorentz", "eps", False),
    ("lorentz", "nk", False),
    ("lorentz", "eps", True),
    ("silica", "nk", False),
    ("gold", "eps", False),
    ("gold", "nk", False),
    ("tauc_lorentz", "eps", True),
    ("lorentz", "nk", True),
)

SHIFT_EV = 0.05  # planted fault: k shifted by 50 meV in energy


def _material(kind: str, rng):
    """Closed-form eps(E) [E in eV] and the window [eV] it is sampled on."""
    if kind == "tauc_lorentz":  # Jellison & Modine 1996, invented film parameters
        A, E0, C, Eg = (rng.uniform(60, 100), rng.uniform(3.5, 4.5), rng.uniform(1.5, 2.5),
                        rng.uniform(1.8, 2.4))  # fmt: skip
        return (lambda e: 2.0 + tauc_lorentz(e, A, E0, C, Eg)), (1.0, 6.0)
    if kind == "lorentz":  # one damped oscillator, closed form
        s, w0, g = rng.uniform(1, 3), rng.uniform(2.5, 3.5), rng.uniform(0.8, 1.2)
        return (lambda e: 1.5 + lorentz(e, s, w0, g)), (1.0, 5.5)
    if kind == "silica":  # Malitson 1965, inside its 0.21-3.71 um validity
        return sellmeier_silica, (0.5, 5.0)
    if kind == "gold":  # Rakić et al. 1998 Lorentz-Drude parameters
        return rakic_ld, (0.8, 5.0)
    raise ValueError(kind)


def write_case(path: Path, kind: str, quantity: str, fault: bool, seed: int) -> Path:
    """Write one small noisy dataset (40-80 points) as n,k vs wavelength or eps vs energy."""
    rng = np.random.default_rng(seed)
    f, (lo, hi) = _material(kind, rng)
    npts = int(rng.integers(40, 81))
    e = np.linspace(lo, hi, npts)
    n, k = eps_to_nk(f(e))
    if fault:
        k = eps_to_nk(f(e - SHIFT_EV))[1]
    if quantity == "nk":
        lam = HC_EV_NM / e
        n = n + rng.normal(0, 1e-3, npts)
        k = np.abs(k + rng.normal(0, 1e-3, npts))
        rows = [f"{lam[i]:.4f},{n[i]:.6f},{k[i]:.6f}" for i in range(npts)[::-1]]
        path.write_text("wavelength_nm,n,k\n" + "\n".join(rows) + "\n")
    else:
        eps = (n + 1j * k) ** 2
        s = 1e-3 * float(np.mean(np.abs(eps)))
        e1 = eps.real + rng.normal(0, s, npts)
        e2 = np.abs(eps.imag + rng.normal(0, s, npts))
        rows = [f"{a:.6f},{b:.6f},{c:.6f}" for a, b, c in zip(e, e1, e2)]
        path.write_text("energy_ev,eps1,eps2\n" + "\n".join(rows) + "\n")
    return path


def make_folder(folder: Path, count: int, start_seed: int = 0) -> dict[str, tuple]:
    """``count`` datasets cycling through CASES; returns {name: case}."""
    folder.mkdir(parents=True, exist_ok=True)
    made = {}
    for i in range(count):
        kind, quantity, fault = CASES[i % len(CASES)]
        name = f"d{i:03d}_{kind}_{quantity}{'_fault' if fault else ''}"
        write_case(folder / f"{name}.csv", kind, quantity, fault, start_seed + i)
        made[name] = (kind, quantity, fault)
    return made


def read_index(out: Path) -> tuple[list[str], list[dict]]:
    with open(out / "index.csv", newline="", encoding="utf-8") as fh:
        reader = csv.DictReader(fh)
        return list(reader.fieldnames), list(reader)


KEY_COLUMNS = ("name", "status", "verdict", "chi2_dof", "regions", "outliers", "points",
               "range_lo_ev", "range_hi_ev", "error")  # fmt: skip


# ------------------------------------------------------------------------------ bad files


def test_corrupt_file_is_an_error_row_and_the_rest_is_vetted(tmp_path, capsys):
    src = tmp_path / "in"
    made = make_folder(src, 6)
    (src / "bad.csv").write_text("wavelength_nm,n,k\n500,1.5,0.1\n600,abc,0.1\n700,1.5,0.1\n")
    (src / "blob.dat").write_bytes(b"\x00\x01\x02\x03binary\xff\xfe" * 10)
    try:
        hostile = src / "a&b<i>.csv"
        write_case(hostile, "tauc_lorentz", "nk", False, 99)
        made["a&b<i>"] = ("tauc_lorentz", "nk", False)
    except OSError:  # a filesystem that refuses the name: the escaping check is skipped
        hostile = None
    (src / "notes.md").write_text("not a table, not picked up\n")
    out = tmp_path / "out"

    code = main(["batch", str(src), "--out", str(out), "--jobs", "2"])
    stdout = capsys.readouterr().out
    assert code == 0  # the run completed; bad files are in the index, not the exit code

    header, rows = read_index(out)
    assert tuple(header) == INDEX_COLUMNS
    by_name = {r["name"]: r for r in rows}
    assert sorted(by_name) == sorted([*made, "bad", "blob"])  # one row per item, no extras
    assert len(rows) == len(by_name)

    bad = by_name["bad"]
    assert bad["status"] == "error" and bad["verdict"] == ""
    # the reader's one-line error: file, line 3 (1-based, header is line 1), the bad cell
    assert "bad.csv:3:" in bad["error"] and "abc" in bad["error"]
    blob = by_name["blob"]
    assert blob["status"] == "error"
    assert "blob.dat" in blob["error"] and "binary" in blob["error"].lower()
    assert "bad.csv:3" in stdout  # the terminal summary names it too

    for name, (_, _, fault) in made.items():
        r = by_name[name]
        assert r["status"] == "ok", r
        # closed-form materials are KK-consistent; the 50 meV k shift is not
        assert r["verdict"] == ("inconsistent" if fault else "consistent"), r
        summary = json.loads((out / name / "summary.json").read_text(encoding="utf-8"))
        assert summary["kk"]["verdict"] == r["verdict"]
        assert int(r["points"]) == summary["inputs"][0]["points"]

    page = (out / "index.html").read_text(encoding="utf-8")
    assert page.startswith("<!DOCTYPE html>")
    assert page.count("<tr class=") == len(rows)
    assert "bad.csv:3:" in page
    if hostile is not None:
        assert "a&amp;b&lt;i&gt;" in page  # html.escape of the user's file name
        assert "<i>" not in page and "a&b" not in page
        assert 'href="a%26b%3Ci%3E/summary.json"' in page  # link is URL-quoted


def test_internal_failure_of_one_item_does_not_stop_the_batch(tmp_path, monkeypatch):
    src = tmp_path / "in"
    make_folder(src, 3)
    real_check = pipeline.check

    def flaky(inputs, *a, **kw):
        if "d001" in str(inputs[0]):
            raise RuntimeError("simulated\nfailure")
        return real_check(inputs, *a, **kw)

    monkeypatch.setattr(pipeline, "check", flaky)
    res = run_batch(src, tmp_path / "out", jobs=1)  # in this process, so the patch applies
    status = {r["name"][:4]: (r["status"], r["error"]) for r in res.rows}
    assert status["d000"][0] == "ok" and status["d002"][0] == "ok"
    assert status["d001"][0] == "error"
    assert "d001" in status["d001"][1] and "RuntimeError: simulated failure" in status["d001"][1]
    assert res.n_errors == 1


def test_a_task_failing_outside_the_item_check_becomes_an_error_row(tmp_path):
    # a task that cannot even reach its worker (here: an argument that cannot be pickled)
    # fails its future, like a worker that dies; the other items must still come back
    src = tmp_path / "in"
    make_folder(src, 2)
    good = [(str(p), str(tmp_path / p.stem), p.stem, False) for p in sorted(src.iterdir())]
    broken = (good[0][0], str(tmp_path / "broken"), "broken", threading.Lock())
    rows: list = []
    batch._run_local([good[0], broken, good[1]], 2, batch._Bar(3, False), rows)
    by_name = {r["name"]: r for r in rows}
    assert sorted(by_name) == sorted([good[0][2], "broken", good[1][2]])
    assert by_name["broken"]["status"] == "error"
    assert (
        "worker failed" in by_name["broken"]["error"] and good[0][0] in by_name["broken"]["error"]
    )
    assert by_name[good[0][2]]["status"] == by_name[good[1][2]]["status"] == "ok"


def test_bad_batch_arguments_exit_2_with_one_line(tmp_path, capsys):
    empty = tmp_path / "empty"
    empty.mkdir()
    assert main(["batch", str(empty), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "no tables" in err and "empty" in err
    make_folder(tmp_path / "in", 1)
    assert main(["batch", str(tmp_path / "in"), "--out", str(tmp_path / "o"), "-j", "-1"]) == 2
    assert "--jobs" in capsys.readouterr().err
    args = ["batch", str(tmp_path / "in"), "--out", str(tmp_path / "o"), "--scheduler", "x:1"]
    assert main(args) == 2
    assert "--engine dask" in capsys.readouterr().err
    with pytest.raises(InputError, match="folder"):
        find_items(tmp_path / "missing")


def test_names_are_unique_and_output_folder_may_be_the_input_folder(tmp_path):
    src = tmp_path / "in"
    src.mkdir()
    write_case(src / "x.csv", "silica", "nk", False, 1)
    write_case(src / "x.txt", "gold", "eps", False, 2)
    write_case(src / "X.dat", "lorentz", "eps", False, 3)
    first = run_batch(src, src, jobs=1)
    names = [r["name"] for r in first.rows]
    assert len({n.lower() for n in names}) == 3  # distinct even on case-insensitive disks
    assert all((src / n / "summary.json").is_file() for n in names)
    # a second run into the same folder does not vet the first run's index as a dataset
    second = run_batch(src, src, jobs=1)
    assert [r["name"] for r in second.rows] == names
    assert second.n_errors == 0


def test_fit_option_fills_model_columns(tmp_path, capsys):
    src = tmp_path / "in"
    src.mkdir()
    write_case(src / "lor.csv", "lorentz", "eps", False, 11)
    write_case(src / "film.csv", "tauc_lorentz", "nk", False, 12)
    out = tmp_path / "out"
    assert main(["batch", str(src), "--out", str(out), "--jobs", "1", "--fit", "-q"]) == 0
    assert capsys.readouterr().out == ""  # --quiet
    _, rows = read_index(out)
    assert [r["name"] for r in rows] == ["film", "lor"]
    for r in rows:
        assert r["status"] == "ok" and r["verdict"] == "consistent", r
        assert int(r["pairs"]) >= 1
        # the data are passive closed forms with 1e-3 noise: a passive model within a few
        # noise levels (common practice, no source)
        assert r["passive"] == "True"
        assert float(r["rms_rel"]) < 5e-3
        model = json.loads((out / r["name"] / "model.json").read_text(encoding="utf-8"))
        assert model["passivity"]["certified"] is True
    page = (out / "index.html").read_text(encoding="utf-8")
    assert 'href="lor/summary.json"' in page


# ------------------------------------------------------------------------------ 200 datasets


@pytest.mark.slow
def test_two_hundred_datasets_index_matches_direct_checks(tmp_path):
    src = tmp_path / "in"
    made = make_folder(src, 200)
    out = tmp_path / "out"
    res = run_batch(src, out, jobs=2)
    assert res.engine == "local" and res.n_errors == 0

    header, rows = read_index(out)
    assert tuple(header) == INDEX_COLUMNS
    assert len(rows) == 200
    assert [r["name"] for r in rows] == sorted(p.stem for p in src.glob("*.csv"))
    assert [r["name"] for r in rows] == [r["name"] for r in res.rows]
    for r in rows:
        fault = made[r["name"]][2]
        # causal closed forms are consistent; every planted 50 meV shift is caught
        assert r["verdict"] == ("inconsistent" if fault else "consistent"), r
        assert Path(r["path"]).parent == src
    assert sum(made[r["name"]][2] for r in rows) == sum(
        r["verdict"] == "inconsistent" for r in rows
    )

    # the first len(CASES) cover every material, quantity and fault: check them directly
    for r in rows[: len(CASES)]:
        direct = pipeline.check([r["path"]])
        assert r["verdict"] == direct.kk.verdict
        assert r["regions"] == str(len(direct.kk.regions))
        assert r["points"] == str(len(direct.clean.spectrum))
        assert float(r["chi2_dof"]) == pytest.approx(direct.kk.chi2_dof, rel=1e-3)  # 4 digits


# ------------------------------------------------------------------------------ config items


def test_toml_config_is_one_item_merging_two_tables(tmp_path):
    src = tmp_path / "in"
    parts = src / "parts"  # subfolder: the tables are used only through the config
    parts.mkdir(parents=True)
    rng = np.random.default_rng(7)
    f = lambda e: 2.0 + tauc_lorentz(e, 80.0, 4.0, 2.0, 2.2)  # noqa: E731  Jellison & Modine
    lam = np.linspace(400.0, 900.0, 50)  # 1.38-3.10 eV as n,k
    n, k = eps_to_nk(f(HC_EV_NM / lam))
    n, k = n + rng.normal(0, 1e-3, lam.size), np.abs(k + rng.normal(0, 1e-3, lam.size))
    (parts / "vis.csv").write_text(
        "wavelength_nm,n,k\n" + "".join(f"{a:.3f},{b:.6f},{c:.6f}\n" for a, b, c in zip(lam, n, k))
    )
    e = np.linspace(2.8, 6.0, 45)  # overlaps the first table at 2.8-3.1 eV, as eps
    eps = f(e)
    e1, e2 = eps.real + rng.normal(0, 2e-3, e.size), np.abs(eps.imag + rng.normal(0, 2e-3, e.size))
    (parts / "uv.csv").write_text(
        "energy_ev,eps1,eps2\n"
        + "".join(f"{a:.5f},{b:.6f},{c:.6f}\n" for a, b, c in zip(e, e1, e2))
    )
    (src / "film.toml").write_text(
        'title = "two-table film"\nout = "ignored_by_batch"\n'
        'inputs = ["parts/vis.csv", "parts/uv.csv"]\n[fit]\nenabled = true\n'
    )
    write_case(src / "single.csv", "silica", "nk", False, 5)
    out = tmp_path / "out"
    res = run_batch(src, out, jobs=1)
    assert [r["name"] for r in res.rows] == ["film", "single"]
    film = res.rows[0]
    assert film["status"] == "ok", film
    assert film["verdict"] == "consistent"  # both tables from one causal closed form
    # the merged window is the union of both tables
    assert float(film["range_lo_ev"]) == pytest.approx(HC_EV_NM / 900.0, rel=1e-5)
    assert float(film["range_hi_ev"]) == pytest.approx(6.0, rel=1e-5)
    assert int(film["points"]) >= 50
    summary = json.loads((out / "film" / "summary.json").read_text(encoding="utf-8"))
    assert len(summary["inputs"]) == 2 and len(summary["merge"]["sources"]) == 2
    assert not (out / "film" / "model.json").exists()  # without --fit a config is only checked
    assert not (src / "ignored_by_batch").exists() and not (out / "ignored_by_batch").exists()

    # a config naming a missing table is an error row naming that table
    (src / "broken.toml").write_text('inputs = ["parts/nowhere.csv"]\n')
    res = run_batch(src, tmp_path / "out2", jobs=1)
    broken = {r["name"]: r for r in res.rows}["broken"]
    assert broken["status"] == "error" and "nowhere.csv" in broken["error"]


# ------------------------------------------------------------------------------ progress


class _Tty(io.StringIO):
    def isatty(self) -> bool:
        return True


def test_progress_bar_silent_unless_stderr_is_a_terminal(tmp_path, capsys, monkeypatch):
    src = tmp_path / "in"
    make_folder(src, 3)
    run_batch(src, tmp_path / "out", jobs=1, progress=True)
    captured = capsys.readouterr()
    assert captured.err == "" and captured.out == ""  # pytest's stderr is not a terminal

    fake = _Tty()
    monkeypatch.setattr(sys, "stderr", fake)
    run_batch(src, tmp_path / "out", jobs=1, progress=True)
    assert "3/3" in fake.getvalue()  # the same call on a terminal draws the bar
    fake2 = _Tty()
    monkeypatch.setattr(sys, "stderr", fake2)
    run_batch(src, tmp_path / "out", jobs=1, progress=False)
    assert fake2.getvalue() == ""


# ------------------------------------------------------------------------------ dask


@pytest.fixture(scope="module")
def dask_client():
    distributed = pytest.importorskip(
        "dask.distributed", reason="dask.distributed not installed (pip install 'kkcheck[dask]')"
    )
    import logging

    cluster = client = None
    try:
        try:
            cluster = distributed.LocalCluster(
                n_workers=2,
                threads_per_worker=1,
                processes=True,
                dashboard_address=None,
                silence_logs=logging.ERROR,
            )
        except Exception:  # no process workers here: threads run the same function
            cluster = distributed.LocalCluster(
                n_workers=2,
                threads_per_worker=1,
                processes=False,
                dashboard_address=None,
                silence_logs=logging.ERROR,
            )
        client = distributed.Client(cluster)
        yield client
    finally:
        if client is not None:
            client.close()
        if cluster is not None:
            cluster.close()


def test_dask_engine_gives_the_local_verdicts(tmp_path, dask_client):
    src = tmp_path / "in"
    made = make_folder(src, 22, start_seed=1000)
    (src / "bad.csv").write_text("wavelength_nm,n,k\n500,1.5,0.1\n600,1.5,0.1\n700,x,0.1\n")
    local = run_batch(src, tmp_path / "local", jobs=1)
    remote = run_batch(src, tmp_path / "dask", engine="dask", client=dask_client)
    assert remote.engine == "dask"
    assert len(remote.rows) == len(made) + 1
    for a, b in zip(local.rows, remote.rows):
        assert {c: a[c] for c in KEY_COLUMNS} == {c: b[c] for c in KEY_COLUMNS}
    verdicts = {r["name"]: r["verdict"] for r in remote.rows if r["status"] == "ok"}
    assert {v for v in verdicts.values()} == {"consistent", "inconsistent"}
    for name, (_, _, fault) in made.items():
        assert verdicts[name] == ("inconsistent" if fault else "consistent")
    bad = {r["name"]: r for r in remote.rows}["bad"]
    assert bad["status"] == "error" and "bad.csv:4:" in bad["error"]
    _, rows = read_index(tmp_path / "dask")
    assert [r["verdict"] for r in rows] == [r["verdict"] for r in local.rows]
    assert dask_client.status == "running"  # a client passed in is not closed by the batch

    # the command line with a scheduler address: its own client, same verdicts
    addr = dask_client.scheduler.address
    args = ["batch", str(src), "--out", str(tmp_path / "cli"), "--engine", "dask"]
    assert main([*args, "--scheduler", addr, "-q"]) == 0
    _, cli_rows = read_index(tmp_path / "cli")
    assert [(r["name"], r["verdict"]) for r in cli_rows] == [
        (r["name"], r["verdict"]) for r in local.rows
    ]
    assert dask_client.status == "running"


def test_dask_engine_without_scheduler_or_package_is_an_input_error(tmp_path, monkeypatch):
    make_folder(tmp_path / "in", 1)
    with pytest.raises(InputError, match="--scheduler"):
        run_batch(tmp_path / "in", tmp_path / "out", engine="dask")
    with pytest.raises(InputError, match="unknown engine"):
        run_batch(tmp_path / "in", tmp_path / "out", engine="cloud")
    monkeypatch.setitem(sys.modules, "dask.distributed", None)  # import fails
    with pytest.raises(InputError, match=r"kkcheck\[dask\]"):
        run_batch(tmp_path / "in", tmp_path / "out", engine="dask", scheduler="tcp://x:1")


def test_index_csv_does_not_carry_live_formulas(tmp_path):
    # a file name starting with "=" must not become a spreadsheet formula in index.csv
    # (OWASP CSV injection guidance, common practice)
    from kkcheck.batch import _spreadsheet_safe

    assert _spreadsheet_safe("=HYPERLINK(1)") == "'=HYPERLINK(1)"
    assert _spreadsheet_safe("@x") == "'@x" and _spreadsheet_safe("-1") == "'-1"
    assert _spreadsheet_safe("film") == "film" and _spreadsheet_safe(3) == 3
    folder = tmp_path / "in"
    folder.mkdir()
    (folder / "=cmd.csv").write_bytes(b"\x00\x01binary")
    res = run_batch(folder, tmp_path / "out", jobs=1)
    text = (tmp_path / "out" / "index.csv").read_text()
    assert "'=cmd" in text and ",=cmd" not in text
    assert res.rows[0]["name"] == "=cmd"  # the in-memory row keeps the real name
