"""Vet every dataset in a folder, in parallel, on local processes or on a Dask cluster.

Each table file in the folder (``.csv .tsv .txt .dat .tab``) is one single-source dataset; each
``.toml`` file is a job config (:func:`kkcheck.job.load_config`) and may merge several
tables (keep those tables in a subfolder, or they are also vetted on their own). The folder is
not searched recursively. Every item runs in its own worker; a file that cannot be read
becomes an ``error`` row in the index (with the file, the line and what was expected) and does
not stop the others, and neither does a worker that dies. Outputs of item ``name`` go to
``OUT/name/``; the index is written as ``OUT/index.csv`` and ``OUT/index.html``.

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
    ``ok`` or ``error``.
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
    For ``error`` rows: ``file:line: what was expected`` (or the internal error).
"""

from __future__ import annotations

import csv
import html
import io
import multiprocessing
import os
import sys
import time
import urllib.parse
import warnings
from collections.abc import Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass
from pathlib import Path

from .errors import InputError

__all__ = ["BatchResult", "find_items", "vet_item", "run_batch", "INDEX_COLUMNS"]

TABLE_SUFFIXES = (".csv", ".tsv", ".txt", ".dat", ".tab")
CONFIG_SUFFIX = ".toml"
INDEX_FILES = ("index.csv", "index.html")

#: Columns of index.csv, in order.
INDEX_COLUMNS = (
    "name",
    "path",
    "status",
    "verdict",
    "chi2_dof",
    "regions",
    "outliers",
    "points",
    "range_lo_ev",
    "range_hi_ev",
    "pairs",
    "rms_rel",
    "passive",
    "warnings",
    "seconds",
    "error",
)

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


def vet_item(path: str, out_dir: str, name: str, fit: bool = False) -> dict:
    """Vet one item and return its index row (never raises for bad input or internal errors).

    This is the worker function: it runs in a separate process (or on a Dask worker).

    Parameters
    ----------
    path : str
        A table or a TOML config.
    out_dir : str
        Folder for this item's outputs (created).
    name : str
        The item's name in the index.
    fit : bool
        Also repair and fit (for configs: as the config says, else only check).

    Returns
    -------
    dict
        Keys :data:`INDEX_COLUMNS`; all values are plain str/int/bool (picklable).
    """
    from . import pipeline

    t0 = time.perf_counter()
    row: dict = {c: "" for c in INDEX_COLUMNS}
    row.update(name=name, path=str(path))
    p = Path(path)
    try:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            if p.suffix.lower() == CONFIG_SUFFIX:
                inputs, _, opts = pipeline.load_config(p)
                if not fit:
                    opts = pipeline.JobOptions(**{**opts.as_dict(), "do_fit": False, "html": False})
                res = pipeline.run_job(inputs, out_dir, opts, False, f"kkcheck batch ({p.name})")
            elif fit:
                res = pipeline.fit([str(p)], out_dir=out_dir)
            else:
                res = pipeline.check([str(p)], out_dir=out_dir)
    except InputError as exc:
        row.update(status="error", error=exc.one_line(), seconds=_seconds(t0))
        return row
    except Exception as exc:  # an internal failure must not stop the batch either
        msg = " ".join(str(exc).split())
        row.update(
            status="error",
            error=f"{path}: internal error: {type(exc).__name__}: {msg}",
            seconds=_seconds(t0),
        )
        return row
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
    row["seconds"] = _seconds(t0)
    return row


def _failed_row(task, exc: BaseException) -> dict:
    """Index row for an item whose worker failed outside :func:`vet_item` (e.g. it died)."""
    path, _, name, _ = task
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


def _init_worker(threads: int) -> None:
    """Cap numerical-library threads in a fresh worker (unless the user set them)."""
    for var in _THREAD_VARS:
        os.environ.setdefault(var, str(threads))


def _mp_context():
    """A start method that is safe when the parent runs threads (fork is not)."""
    methods = multiprocessing.get_all_start_methods()
    return multiprocessing.get_context("forkserver" if "forkserver" in methods else "spawn")


def _run_local(tasks, jobs: int, bar: _Bar) -> list[dict]:
    cores = os.cpu_count() or 1
    workers = min(jobs if jobs > 0 else cores, max(len(tasks), 1))
    rows = []
    if workers == 1:
        for t in tasks:
            rows.append(vet_item(*t))
            bar.step()
        return rows
    with ProcessPoolExecutor(
        max_workers=workers,
        mp_context=_mp_context(),
        initializer=_init_worker,
        initargs=(max(1, cores // workers),),
    ) as pool:
        futures = {pool.submit(vet_item, *t): t for t in tasks}
        for fut in as_completed(futures):
            try:
                rows.append(fut.result())
            except Exception as exc:  # a worker died (BrokenProcessPool) or could not start
                rows.append(_failed_row(futures[fut], exc))
            bar.step()
    return rows


def _run_dask(tasks, scheduler, bar: _Bar, client=None) -> list[dict]:
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
        rows = []
        for fut in dask_completed(list(futures)):
            try:
                rows.append(fut.result())
            except Exception as exc:  # e.g. KilledWorker: the item crashed its workers
                rows.append(_failed_row(futures[fut], exc))
            bar.step()
        return rows
    finally:
        if own:
            client.close()


#: index.csv columns holding text from file names or messages (guarded against formulas).
_TEXT_COLUMNS = ("name", "path", "error")


def _spreadsheet_safe(value):
    """Prefix text that a spreadsheet would run as a formula (=, +, -, @) with a quote.

    A file named ``=HYPERLINK(...).csv`` would otherwise become a live formula when a curator
    opens index.csv (OWASP "CSV injection", common practice).
    """
    text = str(value)
    return "'" + text if text[:1] in ("=", "+", "-", "@") else value


def _write_index(rows: Sequence[dict], out: Path, folder: Path, protect=()) -> tuple[Path, Path]:
    from .io import write_text

    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=INDEX_COLUMNS, lineterminator="\n")
    w.writeheader()
    for r in rows:
        w.writerow({k: _spreadsheet_safe(v) if k in _TEXT_COLUMNS else v for k, v in r.items()})
    csv_path = write_text(out / "index.csv", buf.getvalue(), overwrite_protect=protect)

    def link(r) -> str | None:
        if r["status"] != "ok":
            return None
        for target in ("report.html", "summary.json"):
            if (out / r["name"] / target).is_file():
                href = urllib.parse.quote(r["name"]) + "/" + target
                return html.escape(href, quote=True)
        return None

    def cell(r, c) -> str:
        v = html.escape(str(r.get(c, "")))
        href = link(r) if c == "name" else None
        return f'<a href="{href}">{v}</a>' if href else v

    head = "".join(f"<th>{html.escape(c)}</th>" for c in INDEX_COLUMNS)
    body = "\n".join(
        f'<tr class="{html.escape(str(r.get("verdict") or r["status"]), quote=True)}">'
        + "".join(f"<td>{cell(r, c)}</td>" for c in INDEX_COLUMNS)
        + "</tr>"
        for r in rows
    )
    n_bad = sum(r["status"] != "ok" for r in rows)
    n_inc = sum(r.get("verdict") == "inconsistent" for r in rows)
    page = f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>kkcheck batch index</title>
<style>
body {{ font-family: system-ui, sans-serif; margin: 2em; color: #222; }}
table {{ border-collapse: collapse; font-size: 0.9em; }}
th, td {{ border: 1px solid #ccc; padding: 0.25em 0.5em; text-align: left; }}
tr.inconsistent td {{ background: #fde8e8; }} tr.error td {{ background: #eee; color: #900; }}
tr.consistent td {{ background: #eef8ee; }}
</style></head><body>
<h1>kkcheck batch index</h1>
<p>Folder: {html.escape(str(folder))} &mdash; {len(rows)} datasets, {n_inc} inconsistent,
{n_bad} could not be vetted. Each verdict holds only for the window that dataset covers.</p>
<table><thead><tr>{head}</tr></thead><tbody>
{body}
</tbody></table></body></html>
"""
    html_path = write_text(out / "index.html", page, overwrite_protect=protect)
    return csv_path, html_path


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
) -> BatchResult:
    """Vet every item of ``folder``; write per-item outputs and the index into ``out_dir``.

    Parameters
    ----------
    folder : path
        Folder of tables and/or TOML configs (not searched recursively).
    out_dir : path
        Output folder (created); item ``name`` writes to ``out_dir/name``.
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

    Returns
    -------
    BatchResult

    Raises
    ------
    InputError
        No usable folder or items, negative ``jobs``, an unknown engine, a scheduler without
        the dask engine, or a Dask scheduler that cannot be reached. Bad items never raise:
        they become ``error`` rows.
    """
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
    folder = Path(folder)
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise InputError("expected a folder for --out, found a file", path=str(out))
    if items is None:
        items = find_items(folder, exclude=[out / f for f in INDEX_FILES])
    items = [Path(p) for p in items]
    out.mkdir(parents=True, exist_ok=True)
    taken: set[str] = set()
    tasks = [(str(p), str(out / (nm := _item_name(p, taken))), nm, fit) for p in items]
    bar = _Bar(len(tasks), progress)
    t0 = time.perf_counter()
    try:
        if engine == "local":
            rows = _run_local(tasks, jobs, bar)
        else:
            rows = _run_dask(tasks, scheduler, bar, client=client)
    finally:
        bar.close()
    rows.sort(key=lambda r: r["name"])
    files = _write_index(rows, out, folder, protect=[str(p) for p in items])
    return BatchResult(tuple(rows), out, files, time.perf_counter() - t0, engine)
