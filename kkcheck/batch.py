"""Vet every dataset in a folder, in parallel, on local processes or on a Dask cluster.

Each table file in the folder (``.csv .tsv .txt .dat .tab``) is one single-source dataset; each
``.toml`` file is a job config (:func:`kkcheck.job.load_config`) and may merge several
tables (keep those tables in a subfolder, or they are also vetted on their own). The folder is
not searched recursively. Every item runs in its own worker; a file that cannot be read
becomes an ``error`` row in the index (with the file, the line and what was expected) and does
not stop the others, and neither does a worker that dies. Outputs of item ``name`` go to
``OUT/name/``; the index is written as ``OUT/index.csv`` and ``OUT/index.html``.

Safety (see :mod:`kkcheck.outputs`): the batch holds the lock of ``OUT`` for its whole run;
index.csv and index.html are checked before any item runs (an index kkcheck did not write, e.g.
a user's own ``index.csv`` when ``OUT`` is the input folder, is refused and is vetted as a
table like any other file); each item's outputs are planned, checked and committed as one
(``OUT/name/.kkcheck-outputs.json`` records them with the input's sha256). Ctrl-C stops the
batch promptly: running workers are ended, and the index of what finished is written, marked
incomplete (the other items are ``not run`` rows). Local workers ignore Ctrl-C (the parent
ends them) and end themselves when the parent dies (also on SIGKILL: they watch their parent
process). With ``resume`` an item whose outputs are complete, unchanged and made from an
input with the same sha256 is not run again; its previous row is reused.

A config item is run with its own settings except three: its ``out`` key is replaced by
``OUT/name``, and without ``fit=True`` (``--fit``) it is only checked (no repair, fit or
report), like the tables.

The Dask engine needs the optional extra ``kkcheck[dask]`` and a scheduler address (or, from
Python, a ``dask.distributed.Client``). It submits the same worker function, so verdicts are the
same as with local processes. The workers must have kkcheck installed and see the input folder
and ``OUT`` at the same paths as the submitting machine (a shared filesystem).

Index columns (:data:`INDEX_COLUMNS`)
-------------------------------------
name, path
    Item name (file stem, made unique) and the file as given.
status
    ``ok``, ``error``, or ``not run`` (the batch was interrupted first).
verdict, chi2_dof, regions
    KK test verdict, chi2 per degree of freedom, number of inconsistent regions.
outliers
    Points flagged as spikes or steps.
points, range_lo_ev, range_hi_ev
    Points after merging and their photon-energy range [eV].
pairs, rms_rel, passive
    With ``fit``: pole pairs, rms relative error of the model, passivity certified.
warnings
    Number of distinct warnings raised while vetting the item (listed in its summary.json
    when the analysis stage raised them; reading warnings appear as notes of the input).
seconds
    Wall time of the item in its worker [s].
error
    For ``error`` rows: ``file:line: what was expected`` (or the internal error); text cells
    are bounded to :data:`MAX_CELL_CHARS` characters in both index files.
"""

from __future__ import annotations

import contextlib
import multiprocessing
import os
import signal
import sys
import threading
import time
import warnings
from collections.abc import Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass
from pathlib import Path

from .batchindex import (
    INDEX_COLUMNS,
    INDEX_FILES,
    _not_run_rows,
    _spreadsheet_safe,  # noqa: F401  (tests use it)
    _write_index,
)
from .errors import InputError, OutputError

__all__ = ["BatchResult", "find_items", "vet_item", "run_batch", "INDEX_COLUMNS"]

TABLE_SUFFIXES = (".csv", ".tsv", ".txt", ".dat", ".tab")
CONFIG_SUFFIX = ".toml"

#: How often a local worker checks that its parent still runs [s].
_PARENT_POLL_S = 0.5

#: Environment variables that cap the threads of numerical libraries in local workers.
_THREAD_VARS = ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS")


@dataclass(frozen=True)
class BatchResult:
    """Outcome of :func:`run_batch`.

    Attributes
    ----------
    rows : tuple of dict
        One row per item, keys :data:`INDEX_COLUMNS` (values as written to index.csv), sorted
        by name.
    out_dir : pathlib.Path
        The output folder.
    files : tuple of pathlib.Path
        index.csv and index.html.
    seconds : float
        Wall time of the whole batch [s], index writing included.
    engine : str
        ``"local"`` or ``"dask"``.
    """

    rows: tuple
    out_dir: Path
    files: tuple
    seconds: float
    engine: str

    @property
    def n_errors(self) -> int:
        """Number of items that could not be vetted."""
        return sum(r["status"] != "ok" for r in self.rows)

    def text_summary(self) -> str:
        """A few lines for the terminal: counts per verdict, each error, where the index is."""
        n = len(self.rows)
        verdicts: dict[str, int] = {}
        for r in self.rows:
            key = r["verdict"] if r["status"] == "ok" else "error"
            verdicts[key] = verdicts.get(key, 0) + 1
        parts = ", ".join(f"{v} {k}" for k, v in sorted(verdicts.items()))
        lines = [f"batch: {n} datasets in {self.seconds:.1f} s ({parts}); engine {self.engine}"]
        for r in self.rows:
            if r["status"] != "ok":
                lines.append(f"  error {r['name']}: {r['error']}")
        lines.append(f"index: {self.out_dir / 'index.html'}")
        return "\n".join(lines)


def _is_item(p: Path) -> bool:
    suffix = p.suffix.lower()
    return (
        p.is_file()
        and not p.name.startswith(".")
        and (suffix in TABLE_SUFFIXES or suffix == CONFIG_SUFFIX)
    )


def find_items(folder, *, exclude: Sequence = ()) -> list[Path]:
    """Table and config files directly in ``folder``, sorted by name.

    Hidden files and the paths in ``exclude`` (e.g. a previous run's index.csv when the output
    folder is the input folder) are skipped.
    """
    d = Path(folder)
    if not d.is_dir():
        raise InputError("expected a folder of tables or configs", path=str(d))
    skip = {Path(p).resolve() for p in exclude}
    items = sorted(p for p in d.iterdir() if _is_item(p) and p.resolve() not in skip)
    if not items:
        raise InputError(
            f"no tables ({', '.join(TABLE_SUFFIXES)}) or {CONFIG_SUFFIX} configs in this folder",
            path=str(d),
        )
    return items


def _item_name(path: Path, taken: set[str]) -> str:
    """The file stem, made unique (case-insensitively, for case-insensitive filesystems)."""
    name = path.stem
    if name.lower() in taken:
        name = f"{path.stem}_{path.suffix.lstrip('.')}"
    base, i = name, 2
    while name.lower() in taken:
        name = f"{base}_{i}"
        i += 1
    taken.add(name.lower())
    return name


def _seconds(t0: float) -> str:
    return f"{time.perf_counter() - t0:.2f}"


def _analyse_item(p: Path, fit: bool):
    """The job of one item, analysed but not written."""
    from . import pipeline

    if p.suffix.lower() == CONFIG_SUFFIX:
        inputs, _, opts = pipeline.load_config(p)
        if not fit:
            opts = pipeline.JobOptions(**{**opts.as_dict(), "do_fit": False, "html": False})
        return pipeline.run_job(inputs, None, opts, False, f"kkcheck batch ({p.name})")
    if fit:
        return pipeline.fit([str(p)])
    return pipeline.check([str(p)])


def _ok_row(row: dict, res, caught) -> None:
    msgs = set(res.warnings) | {f"{w.category.__name__}: {w.message}" for w in caught}
    kk = res.kk
    spec = res.clean.spectrum
    row.update(
        status="ok",
        verdict=str(kk.verdict),
        chi2_dof=f"{kk.chi2_dof:.4g}",
        regions=len(kk.regions),
        outliers=len(res.clean.outliers),
        points=len(spec),
        range_lo_ev=f"{spec.energy_ev[0]:.6g}",
        range_hi_ev=f"{spec.energy_ev[-1]:.6g}",
        warnings=len(msgs),
    )
    if res.fit is not None:
        row.update(
            pairs=int(res.fit.n_pairs),
            rms_rel=f"{res.fit.rms_rel:.3g}",
            passive=bool(res.fit.passivity.certified),
        )


def vet_item(
    path: str, out_dir: str, name: str, fit: bool = False, overwrite: bool = False
) -> dict:
    """Vet one item and return its index row (never raises for bad input or internal errors).

    This is the worker function: it runs in a separate process (or on a Dask worker).

    Parameters
    ----------
    path : str
        A table or a TOML config.
    out_dir : str
        Folder for this item's outputs (created; written by :func:`kkcheck.outputs.write_outputs`,
        which records the row and the input's sha256 for ``resume``).
    name : str
        The item's name in the index.
    fit : bool
        Also repair and fit (for configs: as the config says, else only check).
    overwrite : bool
        Replace files in ``out_dir`` that kkcheck did not write.

    Returns
    -------
    dict
        Keys :data:`INDEX_COLUMNS`; all values are plain str/int/bool (picklable).
    """
    from .io.write import sha256_file
    from .outputs import write_outputs

    t0 = time.perf_counter()
    row: dict = {c: "" for c in INDEX_COLUMNS}
    row.update(name=name, path=str(path))
    p = Path(path)
    try:
        sha = sha256_file(p)
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            res = _analyse_item(p, fit)
        _ok_row(row, res, caught)
        row["seconds"] = _seconds(t0)
        item = {"path": str(path), "sha256": sha, "fit": bool(fit)}
        write_outputs(
            res,
            out_dir,
            command=f"kkcheck batch ({p.name})",
            overwrite=overwrite,
            extra={"batch_row": row, "batch_item": item},
        )
    except (InputError, OutputError) as exc:
        row.update({c: "" for c in INDEX_COLUMNS[3:]})
        row.update(status="error", error=exc.one_line(), seconds=_seconds(t0))
    except Exception as exc:  # an internal failure must not stop the batch either
        msg = " ".join(str(exc).split())
        row.update({c: "" for c in INDEX_COLUMNS[3:]})
        row.update(
            status="error",
            error=f"{path}: internal error: {type(exc).__name__}: {msg}",
            seconds=_seconds(t0),
        )
    return row


def _previous_row(task) -> dict | None:
    """The row of an earlier run of ``task`` when its outputs are complete and up to date."""
    from .io.write import sha256_file
    from .outputs import read_manifest

    path, out_dir, name, fit = task[:4]
    m = read_manifest(out_dir)
    item, row = m.get("batch_item") or {}, m.get("batch_row")
    if not m.get("complete") or not isinstance(row, dict) or row.get("status") != "ok":
        return None
    if item.get("path") != str(path) or item.get("fit") != bool(fit):
        return None
    try:
        if sha256_file(path) != item.get("sha256"):
            return None
        for q, sha in (m.get("inputs") or {}).items():
            if sha256_file(q) != sha:
                return None
        for rel, sha in (m.get("files") or {}).items():
            if sha256_file(Path(out_dir) / rel) != sha:
                return None
    except OSError:
        return None
    return {**{c: "" for c in INDEX_COLUMNS}, **row, "name": name, "path": str(path)}


def _failed_row(task, exc: BaseException) -> dict:
    """Index row for an item whose worker failed outside :func:`vet_item` (e.g. it died)."""
    path, name = task[0], task[2]
    row: dict = {c: "" for c in INDEX_COLUMNS}
    msg = " ".join(str(exc).split()) or "no message"
    row.update(
        name=name,
        path=str(path),
        status="error",
        error=f"{path}: worker failed: {type(exc).__name__}: {msg}",
    )
    return row


class _Bar:
    """A one-line progress bar on stderr; silent when asked or when stderr is not a terminal."""

    def __init__(self, total: int, enabled: bool):
        self.total = total
        self.done = 0
        self.enabled = bool(enabled) and sys.stderr.isatty()

    def step(self) -> None:
        self.done += 1
        if self.enabled:
            frac = self.done / max(self.total, 1)
            bar = "#" * int(30 * frac)
            print(f"\r[{bar:<30}] {self.done}/{self.total}", end="", file=sys.stderr, flush=True)

    def close(self) -> None:
        if self.enabled:
            print(file=sys.stderr)


def _watch_parent(parent_pid: int) -> None:
    """End this worker when the batch's process is gone (also after its SIGKILL).

    A thread polls every :data:`_PARENT_POLL_S` seconds whether this process was re-parented
    (its parent, the batch or its fork server, died) or the batch's pid no longer runs.
    """
    from .folderlock import pid_running

    first_ppid = os.getppid()

    def watch():
        while True:
            time.sleep(_PARENT_POLL_S)
            if os.getppid() != first_ppid or not pid_running(parent_pid):
                os._exit(1)

    threading.Thread(target=watch, name="kkcheck-parent-watch", daemon=True).start()


def _init_worker(threads: int, parent_pid: int = 0) -> None:
    """Set up a fresh local worker.

    Caps numerical-library threads (unless the user set them), ignores Ctrl-C (the parent
    stops the batch and ends the workers) and watches the parent process.
    """
    for var in _THREAD_VARS:
        os.environ.setdefault(var, str(threads))
    signal.signal(signal.SIGINT, signal.SIG_IGN)
    if parent_pid:
        _watch_parent(parent_pid)


def _mp_context():
    """A start method that is safe when the parent runs threads (fork is not)."""
    methods = multiprocessing.get_all_start_methods()
    if "forkserver" not in methods:
        return multiprocessing.get_context("spawn")
    ctx = multiprocessing.get_context("forkserver")
    # the fork server imports the pipeline once; every worker forks from it ready to run
    ctx.set_forkserver_preload(["kkcheck.batch", "kkcheck.pipeline"])
    return ctx


def _end_workers(pool: ProcessPoolExecutor) -> None:
    """Cancel what has not started and end the running workers now (Ctrl-C)."""
    pool.shutdown(wait=False, cancel_futures=True)
    # no public way to end running tasks before Python 3.14: the workers are terminated
    for proc in list((getattr(pool, "_processes", None) or {}).values()):
        with contextlib.suppress(Exception):
            proc.terminate()


def _run_local(tasks, jobs: int, bar: _Bar, rows: list) -> None:
    """Run ``tasks``, appending each finished row to ``rows`` (kept on KeyboardInterrupt)."""
    cores = os.cpu_count() or 1
    workers = min(jobs if jobs > 0 else cores, max(len(tasks), 1))
    if workers == 1:
        for t in tasks:
            rows.append(vet_item(*t))
            bar.step()
        return
    pool = ProcessPoolExecutor(
        max_workers=workers,
        mp_context=_mp_context(),
        initializer=_init_worker,
        initargs=(max(1, cores // workers), os.getpid()),
    )
    try:
        futures = {pool.submit(vet_item, *t): t for t in tasks}
        for fut in as_completed(futures):
            try:
                rows.append(fut.result())
            except Exception as exc:  # a worker died (BrokenProcessPool) or could not start
                rows.append(_failed_row(futures[fut], exc))
            bar.step()
    except BaseException:
        _end_workers(pool)
        raise
    pool.shutdown(wait=True)


def _run_dask(tasks, scheduler, bar: _Bar, rows: list, client=None) -> None:
    try:
        from dask.distributed import Client
        from dask.distributed import as_completed as dask_completed
    except ImportError:
        raise InputError(
            "the dask engine needs the optional extra: pip install 'kkcheck[dask]'"
        ) from None
    own = client is None
    if own:
        try:
            client = Client(scheduler, timeout="20s")
        except OSError as exc:
            msg = " ".join(str(exc).split())
            raise InputError(f"cannot reach the Dask scheduler at {scheduler}: {msg}") from None
    try:
        futures = {}
        for t in tasks:
            futures[client.submit(vet_item, *t, pure=False)] = t
        try:
            for fut in dask_completed(list(futures)):
                try:
                    rows.append(fut.result())
                except Exception as exc:  # e.g. KilledWorker: the item crashed its workers
                    rows.append(_failed_row(futures[fut], exc))
                bar.step()
        except BaseException:
            client.cancel(list(futures))
            raise
    finally:
        if own:
            client.close()


def _check_engine(engine, client, scheduler, jobs) -> None:
    if engine not in ("local", "dask"):
        raise InputError(f"unknown engine {engine!r}; expected local or dask")
    if client is not None and engine != "dask":
        raise ValueError("a Dask client was given but engine is not 'dask'")
    if scheduler and engine != "dask":
        raise InputError("--scheduler needs --engine dask")
    if engine == "dask" and client is None and not scheduler:
        raise InputError("--engine dask needs --scheduler ADDRESS (e.g. tcp://host:8786)")
    if jobs < 0:
        raise InputError(f"--jobs must be 0 (one per core) or a positive count, got {jobs}")


def _own_index_files(out: Path) -> list[Path]:
    """This folder's index files that kkcheck wrote (a user's own index.csv is not skipped)."""
    from .outputs import plan_outputs

    ours = []
    for name in INDEX_FILES:
        try:
            plan_outputs(out, [name])
        except OutputError:
            continue  # exists and is not kkcheck's: an input like any other
        if (out / name).exists():
            ours.append(out / name)
    return ours


def run_batch(
    folder,
    out_dir,
    *,
    jobs: int = 0,
    engine: str = "local",
    scheduler: str | None = None,
    client=None,
    fit: bool = False,
    progress: bool = False,
    items: Sequence[Path] | None = None,
    overwrite: bool = False,
    resume: bool = False,
) -> BatchResult:
    """Vet every item of ``folder``; write per-item outputs and the index into ``out_dir``.

    Parameters
    ----------
    folder : path
        Folder of tables and/or TOML configs (not searched recursively).
    out_dir : path
        Output folder (created, locked for the run); item ``name`` writes to ``out_dir/name``.
    jobs : int
        Local worker processes (0: one per core; 1: in this process).
    engine : {"local", "dask"}
        Where the items run.
    scheduler : str, optional
        Dask scheduler address (``engine="dask"``).
    client : dask.distributed.Client, optional
        An existing client (Python API, ``engine="dask"``; takes precedence over
        ``scheduler`` and is not closed).
    fit : bool
        Also repair and fit a model for each dataset.
    progress : bool
        Progress bar on stderr (only when it is a terminal).
    items : sequence of path, optional
        Vet these files instead of the folder's contents.
    overwrite : bool
        Replace files in the output folders that kkcheck did not write.
    resume : bool
        Skip items whose outputs are complete, unchanged and made from the same input
        (sha256); their previous rows are reused.

    Returns
    -------
    BatchResult

    Raises
    ------
    InputError
        No usable folder or items, negative ``jobs``, an unknown engine, a scheduler without
        the dask engine, or a Dask scheduler that cannot be reached. Bad items never raise:
        they become ``error`` rows.
    OutputError
        The index files are refused (see :mod:`kkcheck.outputs`) or the output folder cannot
        be used; checked before any item runs.
    KeyboardInterrupt
        After the index of the finished items was written, marked incomplete.
    """
    from .outputs import plan_outputs, reserve_folder

    _check_engine(engine, client, scheduler, jobs)
    folder = Path(folder)
    out = Path(out_dir)
    with reserve_folder(out, "kkcheck batch"):
        if items is None:
            items = find_items(folder, exclude=_own_index_files(out))
        items = [Path(p) for p in items]
        protect = [str(p) for p in items]
        plan_outputs(out, INDEX_FILES, protect, overwrite=overwrite)  # before any item runs
        taken: set[str] = set()
        tasks = [
            (str(p), str(out / (nm := _item_name(p, taken))), nm, fit, overwrite) for p in items
        ]
        return _run_tasks(
            tasks,
            out,
            folder,
            protect,
            engine,
            scheduler,
            client,
            jobs,
            progress,
            resume,
            overwrite,
        )


def _run_tasks(
    tasks, out, folder, protect, engine, scheduler, client, jobs, progress, resume, overwrite
):
    rows: list[dict] = []
    if resume:
        for t in list(tasks):
            prev = _previous_row(t)
            if prev is not None:
                rows.append(prev)
        done = {r["name"] for r in rows}
        tasks = [t for t in tasks if t[2] not in done]
    bar = _Bar(len(tasks), progress)
    t0 = time.perf_counter()
    complete = False
    try:
        if engine == "local":
            _run_local(tasks, jobs, bar, rows)
        else:
            _run_dask(tasks, scheduler, bar, rows, client=client)
        complete = True
    finally:
        bar.close()
        if not complete:  # interrupted: the index of what finished, marked incomplete
            rows += _not_run_rows(tasks, rows)
            rows.sort(key=lambda r: r["name"])
            with contextlib.suppress(Exception):
                _write_index(rows, out, folder, protect, complete=False, overwrite=overwrite)
    rows.sort(key=lambda r: r["name"])
    files = _write_index(rows, out, folder, protect, overwrite=overwrite)
    return BatchResult(tuple(rows), out, files, time.perf_counter() - t0, engine)
