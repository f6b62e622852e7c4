"""Never lose or corrupt a user's data (issue 15): every route reproduced, then shown closed.

Each test builds the situation a user can create by hand (an input named like an output, a
symlink in figures/, a full disk, two runs at once, a killed run, a batch interrupted) and
checks that the input is untouched, the command stops with one line and its own exit code
before writing anything, and no partial file is ever left under a final name. Expected
values are the safety promises of README.md and the POSIX semantics of rename/O_EXCL (common
practice, no outside source); the CSV-injection characters are OWASP's list (from memory).
"""

from __future__ import annotations

import errno
import os
import signal
import stat
import subprocess
import sys
import textwrap
import time
from pathlib import Path

import numpy as np
import pytest

from kkcheck.cli import main
from kkcheck.errors import OUTPUT_ERROR_EXIT, InputError, OutputError
from kkcheck.io import write as iow
from kkcheck.materials import lorentz
from kkcheck.outputs import MANIFEST_NAME, plan_outputs

REPO = Path(__file__).resolve().parents[1]


def _table(path: Path, n: int = 60, shift_ev: float = 0.0) -> Path:
    """A KK-consistent Lorentz oscillator as eps1, eps2 against energy (closed form)."""
    e = np.linspace(1.0, 5.0, n)
    eps = 2.0 + lorentz(e - shift_ev, 3.0, 3.0, 0.8)
    rows = "".join(f"{a:.8f},{b.real:.8f},{b.imag:.8f}\n" for a, b in zip(e, eps))
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("energy_ev,eps1,eps2\n" + rows)
    return path


def _snapshot(folder: Path) -> dict:
    """Every entry below ``folder`` (hidden ones too) with its bytes (links as their target)."""
    out = {}
    for p in sorted(folder.rglob("*")):
        rel = p.relative_to(folder).as_posix()
        if p.is_symlink():
            out[rel] = ("link", os.readlink(p))
        elif p.is_file():
            out[rel] = p.read_bytes()
        else:
            out[rel] = "dir"
    return out


def _env() -> dict:
    env = dict(os.environ, PYTHONPATH=str(REPO), OPENBLAS_NUM_THREADS="1")
    return env


# ------------------------------------------------------------------- inputs of output names


@pytest.mark.parametrize("name", ["summary.json", "cleaned.csv"])
def test_input_named_like_an_output_is_untouched_and_nothing_written(tmp_path, capsys, name):
    # before: cleaned.csv was refused only after summary.json had been written over
    out = tmp_path / "w"
    src = _table(out / name)
    before = _snapshot(out)
    code = main(["check", str(src), "--out", str(out), "-q"])
    err = capsys.readouterr().err.strip()
    assert code == OUTPUT_ERROR_EXIT
    assert len(err.splitlines()) == 1 and "is the input file" in err and name in err
    assert _snapshot(out) == before  # not one file added, the input byte for byte


@pytest.mark.parametrize(
    "name",
    ["report.html", "summary.md", "figures/kk_residuals.png", "figures/fit.pdf", "model.json"],
)
def test_plan_refuses_every_output_name_that_is_an_input(tmp_path, name):
    out = tmp_path / "w"
    src = _table(out / name)
    with pytest.raises(OutputError, match="is the input file"):
        plan_outputs(out, [name, "summary.json"], [str(src)])
    hard = out / "hard.csv"
    os.link(src, hard)  # a hard link to the target is the same file
    with pytest.raises(OutputError, match="is the input file"):
        plan_outputs(out, [name], [str(hard)])


def test_symlinks_in_the_output_folder_are_refused(tmp_path):
    out = tmp_path / "w"
    (out / "figures").mkdir(parents=True)
    src = _table(tmp_path / "data" / "film.csv")
    link = out / "figures" / "kk_residuals.png"
    link.symlink_to(src)  # before: savefig followed this link and wrote over the input
    with pytest.raises(OutputError, match="is the input file"):
        plan_outputs(out, ["figures/kk_residuals.png"], [str(src)])
    link.unlink()
    link.symlink_to(tmp_path / "elsewhere.png")
    with pytest.raises(OutputError, match="leads out of the output folder"):
        plan_outputs(out, ["figures/kk_residuals.png"], [], overwrite=True)
    link.unlink()
    (out / "figures").rmdir()
    (out / "figures").symlink_to(tmp_path / "data", target_is_directory=True)
    with pytest.raises(OutputError, match="leads out of the output folder"):
        plan_outputs(out, ["figures/fit.png"], [], overwrite=True)


def test_a_file_kkcheck_did_not_write_needs_overwrite(tmp_path, capsys):
    src = _table(tmp_path / "film.csv")
    out = tmp_path / "w"
    assert main(["check", str(src), "--out", str(out), "-q"]) == 0
    assert main(["check", str(src), "--out", str(out), "-q"]) == 0  # its own files: fine
    (out / "cleaned.csv").write_text("my own notes\n")
    before = _snapshot(out)
    assert main(["check", str(src), "--out", str(out), "-q"]) == OUTPUT_ERROR_EXIT
    assert "changed since kkcheck wrote it" in capsys.readouterr().err
    assert _snapshot(out) == before
    assert main(["check", str(src), "--out", str(out), "-q", "--overwrite"]) == 0
    assert (out / "cleaned.csv").read_text().startswith("# kkcheck")


@pytest.mark.slow
def test_fit_with_report_refuses_an_input_named_report_html(tmp_path, capsys):
    # the reproducer: cp small.csv w/report.html; kkcheck fit w/report.html --out w
    out = tmp_path / "w"
    src = _table(out / "report.html")
    before = _snapshot(out)
    code = main(["fit", str(src), "--out", str(out), "--report", "-q", "--pairs", "1"])
    assert code == OUTPUT_ERROR_EXIT
    assert "is the input file" in capsys.readouterr().err
    assert _snapshot(out) == before


def test_batch_does_not_overwrite_a_users_own_index_csv(tmp_path, capsys):
    # before: "kkcheck batch . --out ." skipped a user's index.csv as a previous index
    folder = tmp_path / "d"
    _table(folder / "a.csv")
    mine = folder / "index.csv"
    mine.write_text("my,own\n1,2\n")
    before = _snapshot(folder)
    code = main(["batch", str(folder), "--out", str(folder), "-q", "-j", "1"])
    assert code == OUTPUT_ERROR_EXIT and "index.csv" in capsys.readouterr().err
    assert _snapshot(folder) == before  # no item ran: no a/ folder either


# ------------------------------------------------------------------------- the atomic writer


def test_new_files_honour_the_umask(tmp_path):
    old = os.umask(0o027)
    try:
        p = iow.atomic_write_bytes(tmp_path / "x.json", b"{}")
    finally:
        os.umask(old)
    assert p.stat().st_mode & 0o777 == 0o640  # 0666 & ~027, as open() would make it


@pytest.mark.parametrize("call", ["write", "fsync"])
def test_disk_full_is_one_line_and_keeps_the_old_file(tmp_path, monkeypatch, call):
    # a full tmpfs needs root mounts: ENOSPC is raised where the kernel would raise it
    target = tmp_path / "summary.json"
    target.write_text("old\n")

    def full(*args, **kwargs):
        raise OSError(errno.ENOSPC, "No space left on device")

    monkeypatch.setattr(iow.os, call, full)
    with pytest.raises(OutputError) as info:
        iow.atomic_write_bytes(target, b"new" * 1000)
    monkeypatch.undo()
    assert str(info.value) == f"{target}: cannot write: disk full"
    assert target.read_text() == "old\n"
    assert [p.name for p in tmp_path.iterdir()] == ["summary.json"]  # no temporary left


def test_disk_full_during_a_run_leaves_the_previous_results(tmp_path, monkeypatch, capsys):
    src = _table(tmp_path / "film.csv")
    out = tmp_path / "w"
    assert main(["check", str(src), "--out", str(out), "-q"]) == 0
    before = _snapshot(out)
    _table(src, shift_ev=0.05)  # a changed input: the new results would differ
    calls = {"n": 0}
    real_fsync = os.fsync

    def fsync(fd):
        calls["n"] += stat.S_ISREG(os.fstat(fd).st_mode)
        if calls["n"] == 2:  # the second file of the run (folders are fsynced too)
            raise OSError(errno.ENOSPC, "No space left on device")
        return real_fsync(fd)

    monkeypatch.setattr(iow.os, "fsync", fsync)
    code = main(["check", str(src), "--out", str(out), "-q"])
    err = capsys.readouterr().err.strip()
    assert code == OUTPUT_ERROR_EXIT and err.endswith("cannot write: disk full")
    assert len(err.splitlines()) == 1 and "internal error" not in err
    assert _snapshot(out) == before  # the previous results, no staging folder left


def test_path_too_long_is_one_line(tmp_path, capsys):
    src = _table(tmp_path / "film.csv")
    code = main(["check", str(src), "--out", str(tmp_path / ("x" * 300)), "-q"])
    err = capsys.readouterr().err.strip()
    assert code == OUTPUT_ERROR_EXIT and err.endswith("path too long")


@pytest.mark.skipif(
    os.geteuid() == 0, reason="running as root: chmod cannot make a folder read-only"
)
def test_read_only_folder_is_one_line(tmp_path, capsys):
    src = _table(tmp_path / "film.csv")
    out = tmp_path / "ro"
    out.mkdir()
    out.chmod(0o555)
    try:
        code = main(["check", str(src), "--out", str(out), "-q"])
    finally:
        out.chmod(0o755)
    err = capsys.readouterr().err.strip()
    assert code == OUTPUT_ERROR_EXIT and "no permission" in err
    assert list(out.iterdir()) == []


# ---------------------------------------------------------------------------------- the lock


def test_two_runs_into_one_folder_one_refuses(tmp_path):
    src = _table(tmp_path / "film.csv", n=400)
    out = tmp_path / "w"
    cmd = [sys.executable, "-m", "kkcheck.cli", "fit", str(src), "--out", str(out), "-q"]
    first = subprocess.Popen(cmd, env=_env(), stderr=subprocess.PIPE, text=True)
    t0 = time.monotonic()
    while not (out / ".kkcheck.lock").exists():
        assert first.poll() is None and time.monotonic() - t0 < 60, "first run never locked"
        time.sleep(0.02)
    second = subprocess.run(cmd, env=_env(), stderr=subprocess.PIPE, text=True)
    assert second.returncode == OUTPUT_ERROR_EXIT
    assert "another kkcheck run is writing to this folder" in second.stderr
    assert f"pid {first.pid}" in second.stderr
    _, first_err = first.communicate(timeout=120)
    assert first.returncode == 0, first_err
    assert not (out / ".kkcheck.lock").exists()


def test_a_stale_lock_of_a_dead_run_is_taken_over(tmp_path, capsys):
    dead = subprocess.Popen([sys.executable, "-c", "pass"])
    dead.wait()
    src = _table(tmp_path / "film.csv")
    out = tmp_path / "w"
    out.mkdir()
    host = os.uname().nodename
    (out / ".kkcheck.lock").write_text(f'{{"pid": {dead.pid}, "host": "{host}"}}')
    assert main(["check", str(src), "--out", str(out), "-q"]) == 0
    assert "no longer runs" in capsys.readouterr().err
    assert not (out / ".kkcheck.lock").exists()


# ------------------------------------------------------------------------------ SIGKILL


_TRIALS = textwrap.dedent(
    """
    import os, signal, sys, time
    from pathlib import Path
    import numpy as np
    from matplotlib.figure import Figure
    from kkcheck.outputs import staged_outputs
    from kkcheck.io.write import atomic_write_bytes
    from kkcheck.report.figures.style import save

    def write_forever(out):
        i = 0
        while True:
            i += 1
            with staged_outputs(out, command="writer") as st:
                tag = bytes([i % 251])
                atomic_write_bytes(st / "a.bin", tag * 3_000_000)
                atomic_write_bytes(st / "b.bin", tag * 1_000)
                fig = Figure(figsize=(3, 2))
                fig.add_subplot().plot(range(200 + i))
                save(fig, st / "figures" / "f")

    def complete(out):
        a, b = out / "a.bin", out / "b.bin"
        if a.exists() or b.exists():
            da, db = a.read_bytes(), b.read_bytes()
            if len(da) != 3_000_000 or da != da[:1] * len(da):
                return "partial a.bin"
            if len(db) != 1_000 or db[:1] != da[:1]:
                return "a.bin and b.bin of different runs"
        for p in out.glob("figures/*"):
            data = p.read_bytes()
            if p.suffix == ".png" and not data.endswith(b"IEND\\xaeB`\\x82"):
                return f"partial {p.name}"
            if p.suffix == ".pdf" and not data.rstrip().endswith(b"%%EOF"):
                return f"partial {p.name}"
        return "ok"

    out = Path(sys.argv[1])
    rng = np.random.default_rng(int(sys.argv[2]))
    for trial in range(int(sys.argv[3])):
        pid = os.fork()
        if pid == 0:
            try:
                write_forever(out)
            finally:
                os._exit(0)
        time.sleep(float(rng.uniform(0.0, 0.5)))
        os.kill(pid, signal.SIGKILL)
        os.waitpid(pid, 0)
        as_left = complete(out)  # renames are atomic: complete files or none
        with staged_outputs(out, command="next run"):  # the next run undoes a half commit
            pass
        after = complete(out)
        leftovers = sorted(p.name for p in out.glob(".kkcheck-*"))
        print(trial, as_left, after, leftovers, flush=True)
    """
)


@pytest.mark.slow
def test_sigkill_at_random_moments_never_leaves_a_partial_file(tmp_path):
    script = tmp_path / "trials.py"
    script.write_text(_TRIALS)
    out = tmp_path / "w"
    res = subprocess.run(
        [sys.executable, str(script), str(out), "15", "20"],
        env=_env(),
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert res.returncode == 0, res.stderr
    lines = res.stdout.splitlines()
    assert len(lines) == 20
    for line in lines:
        trial, as_left, after, leftovers = line.split(" ", 3)
        assert (as_left, after) == ("ok", "ok"), line
        assert leftovers == "['.kkcheck-outputs.json']" or leftovers == "[]", line
    assert any(leftovers != "[]" for line in lines for leftovers in [line.split(" ", 3)[3]])


# ------------------------------------------------------------------------ CSV and job files


@pytest.mark.parametrize("text", ["=1+1", "=cmd|' -C calc'!A0", "+1", "-1", "@SUM(A1)", "\t=1"])
def test_text_cells_never_start_a_formula(text):
    cell = iow.spreadsheet_safe(text)
    assert cell.startswith("'") and cell[1:] == text  # OWASP: = + - @ tab CR
    assert iow.spreadsheet_safe("\r=1") == "'\r=1" and iow.spreadsheet_safe("uv") == "uv"


def test_source_name_cells_in_tables_are_guarded(tmp_path):
    import pandas as pd

    frame = pd.DataFrame(
        {
            "energy_ev": [1.0, 2.0],
            "eps1": [2.0, 2.1],
            "eps2": [0.1, 0.2],
            "source": ["=1+1", "\t@x"],
        }
    )
    text = iow.write_table_csv(tmp_path / "t.csv", frame).read_text()
    body = [ln for ln in text.splitlines() if not ln.startswith("#")][1:]
    cells = [ln.split(",")[3] for ln in body]
    assert cells == ["'=1+1", "_@x"]  # the tab became _, which no spreadsheet runs


def test_job_file_paths_stay_in_its_folder_unless_allowed(tmp_path):
    from kkcheck.job import load_config

    job = tmp_path / "job"
    _table(job / "a.csv")
    _table(tmp_path / "outside.csv")
    cfg = job / "run.toml"
    cfg.write_text('inputs = ["a.csv", "../outside.csv"]\n')
    with pytest.raises(InputError, match="outside the job file's folder"):
        load_config(cfg)
    with pytest.warns(UserWarning, match="outside the job file's folder"):
        inputs, _, _ = load_config(cfg, allow_outside=True)
    assert len(inputs) == 2
    (job / "link.csv").symlink_to(tmp_path / "outside.csv")  # a symlink out is outside too
    cfg.write_text('inputs = ["link.csv"]\n')
    with pytest.raises(InputError, match="outside"):
        load_config(cfg)
    cfg.write_text('inputs = ["a.csv"]\nout = "/tmp/anywhere"\n')
    with pytest.raises(InputError, match="output folder"):
        load_config(cfg)


def test_index_html_cells_are_escaped_and_bounded(tmp_path):
    from kkcheck.batch import run_batch
    from kkcheck.batchindex import MAX_CELL_CHARS

    folder = tmp_path / "d"
    folder.mkdir()
    (folder / "x.csv").write_text("<script>alert(1)</script>" + "A" * 5000 + ",n,k\n1,2,3\n")
    run_batch(folder, tmp_path / "out", jobs=1)
    page = (tmp_path / "out" / "index.html").read_text()
    assert "<script>" not in page and "AAAA" * (MAX_CELL_CHARS // 4) not in page


@pytest.mark.filterwarnings("default::UserWarning")  # shown as a user sees it, not raised
def test_warnings_reach_stderr_as_one_line(tmp_path, monkeypatch, capsys):
    import warnings

    from kkcheck import cli

    def warn(args):
        warnings.warn("axis looks like\nmicrometres", UserWarning, stacklevel=1)
        return 0

    monkeypatch.setattr(cli, "_run_command", warn)
    assert main(["check", "x.csv", "--out", str(tmp_path / "w")]) == 0
    err = capsys.readouterr().err
    assert err == "kkcheck: warning: axis looks like micrometres\n"  # no path, no source line


# -------------------------------------------------------------------------- batch interrupts


def _descendants(pid: int) -> set[int]:
    kids: dict[int, list[int]] = {}
    for d in Path("/proc").iterdir():
        if d.name.isdigit():
            try:
                ppid = int((d / "stat").read_text().rsplit(")", 1)[1].split()[1])
            except (OSError, IndexError, ValueError):
                continue
            kids.setdefault(ppid, []).append(int(d.name))
    out, todo = set(), [pid]
    while todo:
        for c in kids.get(todo.pop(), []):
            if c not in out:
                out.add(c)
                todo.append(c)
    return out


def _alive(pids) -> set[int]:
    return {p for p in pids if Path(f"/proc/{p}").exists()}


def _start_batch(tmp_path, n=40, extra=()):
    folder = tmp_path / "d"
    for i in range(n):
        _table(folder / f"t{i:03d}.csv", n=80, shift_ev=0.01 * (i % 3))
    out = tmp_path / "out"
    cmd = [sys.executable, "-m", "kkcheck.cli", "batch", str(folder), "--out", str(out), "-j", "2"]
    proc = subprocess.Popen([*cmd, "-q", *extra], env=_env(), stderr=subprocess.PIPE, text=True)
    t0 = time.monotonic()
    while len(list(out.glob("t*/summary.json"))) < 2:
        assert proc.poll() is None and time.monotonic() - t0 < 90, "the batch made no progress"
        time.sleep(0.05)
    return proc, folder, out, cmd


@pytest.mark.slow
def test_ctrl_c_stops_the_batch_and_writes_an_incomplete_index_then_resume(tmp_path):
    proc, folder, out, cmd = _start_batch(tmp_path)
    workers = _descendants(proc.pid)
    proc.send_signal(signal.SIGINT)
    _, err = proc.communicate(timeout=15)
    assert proc.returncode == 130, err
    t0 = time.monotonic()
    while _alive(workers) and time.monotonic() - t0 < 10:
        time.sleep(0.1)
    assert not _alive(workers), "workers outlived the batch"
    rows = (out / "index.csv").read_text().splitlines()
    assert (
        len(rows) == 41 and any(",not run," in r for r in rows) and any(",ok," in r for r in rows)
    )
    assert "Incomplete" in (out / "index.html").read_text()
    done = sorted(p.parent.name for p in out.glob("t*/summary.json"))
    stamps = {n: (out / n / MANIFEST_NAME).stat().st_mtime_ns for n in done}
    _table(folder / f"{done[0]}.csv", n=81)  # changed input: must be vetted again
    res = subprocess.run([*cmd, "-q", "--resume"], env=_env(), stderr=subprocess.PIPE, text=True)
    assert res.returncode == 0, res.stderr
    rows = (out / "index.csv").read_text().splitlines()
    assert len(rows) == 41 and not any(",not run," in r for r in rows)
    assert "Incomplete" not in (out / "index.html").read_text()
    again = {n for n in done if (out / n / MANIFEST_NAME).stat().st_mtime_ns != stamps[n]}
    assert again == {done[0]}  # only the changed one ran again


@pytest.mark.slow
def test_workers_end_when_the_batch_is_killed(tmp_path):
    proc, _, _, _ = _start_batch(tmp_path)
    workers = _descendants(proc.pid)
    assert workers
    proc.send_signal(signal.SIGKILL)  # not reaped yet: the workers see a zombie parent
    try:
        t0 = time.monotonic()
        while _alive(workers) and time.monotonic() - t0 < 10:
            time.sleep(0.1)
        assert not _alive(workers), "workers outlived a killed batch"
    finally:
        for pid in _alive(workers):
            os.kill(pid, signal.SIGKILL)
        proc.wait()
        proc.stderr.close()
