"""Vet every dataset in a folder, in parallel, on local processes or on a Dask cluster.

Each table file in the folder (``.csv .tsv .txt .dat .tab``) is one single-source dataset; each
``.toml`` file is a job config (:func:`kkcheck.pipeline.load_config`) and may merge several
tables. Every item runs in its own worker; a file that cannot be read becomes an ``error`` row
in the index and does not stop the others. Outputs of item ``name`` go to ``OUT/name/``; the
index is written as ``OUT/index.csv`` and ``OUT/index.html``.

The Dask engine needs the optional extra ``kkcheck[dask]`` and a scheduler address (or, from
Python, a ``dask.distributed.Client``); it submits the same worker function, so verdicts are
the same as with local processes.
"""

from __future__ import annotations

import csv
import html
import io
import os
import sys
import time
from collections.abc import Sequence
from concurrent.futures import ProcessPoolExecutor, as_completed
from dataclasses import dataclass
from pathlib import Path

from .errors import InputError

__all__ = ["BatchResult", "find_items", "vet_item", "run_batch", "INDEX_COLUMNS"]

TABLE_SUFFIXES = (".csv", ".tsv", ".txt", ".dat", ".tab")

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
    "seconds",
    "error",
)


@dataclass(frozen=True)
class BatchResult:
    """Outcome of :func:`run_batch`.

    Attributes
    ----------
    rows : tuple of dict
        One row per item, keys :data:`INDEX_COLUMNS`, sorted by name.
    out_dir : pathlib.Path
    files : tuple of pathlib.Path
        index.csv and index.html.
    seconds : float
        Wall time [s].
    engine : str
    """

    rows: tuple
    out_dir: Path
    files: tuple
    seconds: float
    engine: str

    @property
    def n_errors(self) -> int:
        return sum(r["status"] != "ok" for r in self.rows)

    def text_summary(self) -> str:
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


def find_items(folder) -> list[Path]:
    """Table and config files directly in ``folder``, sorted by name (hidden files skipped)."""
    d = Path(folder)
    if not d.is_dir():
        raise InputError("expected a folder of tables or configs", path=str(d))
    items = sorted(
        p
        for p in d.iterdir()
        if p.is_file()
        and not p.name.startswith(".")
        and (p.suffix.lower() in TABLE_SUFFIXES or p.suffix.lower() == ".toml")
    )
    if not items:
        raise InputError(
            f"no tables ({', '.join(TABLE_SUFFIXES)}) or .toml configs in this folder",
            path=str(d),
        )
    return items


def _item_name(path: Path, taken: set[str]) -> str:
    name = path.stem
    if name in taken:
        name = f"{path.stem}_{path.suffix.lstrip('.')}"
    taken.add(name)
    return name


def vet_item(path: str, out_dir: str, name: str, fit: bool = False) -> dict:
    """Vet one item and return its index row (never raises for bad input).

    This is the worker function: it runs in a separate process (or on a Dask worker).
    """
    from . import pipeline

    t0 = time.perf_counter()
    row = {c: "" for c in INDEX_COLUMNS}
    row.update(name=name, path=str(path))
    p = Path(path)
    try:
        if p.suffix.lower() == ".toml":
            inputs, _, opts = pipeline.load_config(p)
            if not fit:
                opts = pipeline.JobOptions(**{**opts.as_dict(), "do_fit": False, "html": False})
            res = pipeline._job(inputs, out_dir, opts, False, f"kkcheck batch ({p.name})")
        elif fit:
            res = pipeline.fit([str(p)], out_dir=out_dir)
        else:
            res = pipeline.check([str(p)], out_dir=out_dir)
    except InputError as exc:
        row.update(status="error", error=exc.one_line(), seconds=f"{time.perf_counter() - t0:.2f}")
        return row
    except Exception as exc:  # an internal failure must not stop the batch either
        msg = " ".join(str(exc).split())
        row.update(status="error", error=f"internal error: {type(exc).__name__}: {msg}")
        row["seconds"] = f"{time.perf_counter() - t0:.2f}"
        return row
    kk = res.kk
    spec = res.clean.spectrum
    row.update(
        status="ok",
        verdict=kk.verdict,
        chi2_dof=f"{kk.chi2_dof:.4g}",
        regions=len(kk.regions),
        outliers=len(res.clean.outliers),
        points=len(spec),
        range_lo_ev=f"{spec.energy_ev[0]:.6g}",
        range_hi_ev=f"{spec.energy_ev[-1]:.6g}",
    )
    if res.fit is not None:
        row.update(
            pairs=res.fit.n_pairs,
            rms_rel=f"{res.fit.rms_rel:.3g}",
            passive=bool(res.fit.passivity.certified),
        )
    row["seconds"] = f"{time.perf_counter() - t0:.2f}"
    return row


class _Bar:
    """A one-line progress bar on stderr; silent when asked or when stderr is not a terminal."""

    def __init__(self, total: int, enabled: bool):
        self.total = total
        self.done = 0
        self.enabled = enabled and sys.stderr.isatty()

    def step(self) -> None:
        self.done += 1
        if self.enabled:
            frac = self.done / max(self.total, 1)
            bar = "#" * int(30 * frac)
            print(f"\r[{bar:<30}] {self.done}/{self.total}", end="", file=sys.stderr, flush=True)

    def close(self) -> None:
        if self.enabled:
            print(file=sys.stderr)


def _run_local(tasks, jobs: int, bar: _Bar) -> list[dict]:
    workers = jobs if jobs > 0 else (os.cpu_count() or 1)
    rows = []
    if workers == 1:
        for t in tasks:
            rows.append(vet_item(*t))
            bar.step()
        return rows
    with ProcessPoolExecutor(max_workers=workers) as pool:
        futures = [pool.submit(vet_item, *t) for t in tasks]
        for fut in as_completed(futures):
            rows.append(fut.result())
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
        if not scheduler:
            raise InputError("--engine dask needs --scheduler ADDRESS (e.g. tcp://host:8786)")
        try:
            client = Client(scheduler, timeout="20s")
        except OSError as exc:
            raise InputError(f"cannot reach the Dask scheduler at {scheduler}: {exc}") from None
    try:
        futures = [client.submit(vet_item, *t, pure=False) for t in tasks]
        rows = []
        for fut in dask_completed(futures):
            rows.append(fut.result())
            bar.step()
        return rows
    finally:
        if own:
            client.close()


def _write_index(rows: Sequence[dict], out: Path, folder: Path) -> tuple[Path, Path]:
    from .io import write_text

    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=INDEX_COLUMNS, lineterminator="\n")
    w.writeheader()
    for r in rows:
        w.writerow(r)
    csv_path = out / "index.csv"
    write_text(csv_path, buf.getvalue())

    def cell(r, c):
        v = html.escape(str(r.get(c, "")))
        if c == "name" and r["status"] == "ok":
            return f'<a href="{html.escape(r["name"])}/summary.json">{v}</a>'
        return v

    head = "".join(f"<th>{html.escape(c)}</th>" for c in INDEX_COLUMNS)
    body = "\n".join(
        f'<tr class="{html.escape(str(r.get("verdict") or r["status"]))}">'
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
{n_bad} could not be read. Each verdict holds only for the window that dataset covers.</p>
<table><thead><tr>{head}</tr></thead><tbody>
{body}
</tbody></table></body></html>
"""
    html_path = out / "index.html"
    write_text(html_path, page)
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
        Output folder; item ``name`` writes to ``out_dir/name``.
    jobs : int
        Local worker processes (0: one per core).
    engine : {"local", "dask"}
    scheduler : str, optional
        Dask scheduler address (``engine="dask"``).
    client : dask.distributed.Client, optional
        An existing client (Python API; takes precedence over ``scheduler``).
    fit : bool
        Also repair and fit a model for each dataset.
    progress : bool
        Progress bar on stderr (only when it is a terminal).
    """
    folder = Path(folder)
    items = list(items) if items is not None else find_items(folder)
    out = Path(out_dir)
    out.mkdir(parents=True, exist_ok=True)
    taken: set[str] = set()
    tasks = [(str(p), str(out / (nm := _item_name(p, taken))), nm, fit) for p in items]
    bar = _Bar(len(tasks), progress)
    t0 = time.perf_counter()
    if engine == "local":
        rows = _run_local(tasks, jobs, bar)
    elif engine == "dask":
        rows = _run_dask(tasks, scheduler, bar, client=client)
    else:
        raise InputError(f"unknown engine {engine!r}; expected local or dask")
    bar.close()
    rows.sort(key=lambda r: r["name"])
    files = _write_index(rows, out, folder)
    return BatchResult(tuple(rows), out, files, time.perf_counter() - t0, engine)
