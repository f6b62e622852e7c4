"""The index of a batch run: index.csv and index.html, every text cell bounded and safe.

Text that comes from file names, paths or error messages (which may quote any readable file)
is put on one line and cut to :data:`MAX_CELL_CHARS` characters in both files; in index.csv it
is guarded against spreadsheet formulas (:func:`kkcheck.io.write.spreadsheet_safe`), in
index.html escaped. Both files are planned, checked and committed as one by
:func:`kkcheck.outputs.staged_outputs`.
"""

from __future__ import annotations

import csv
import html
import io
import urllib.parse
from collections.abc import Sequence
from pathlib import Path

__all__ = ["INDEX_COLUMNS", "INDEX_FILES", "MAX_CELL_CHARS", "NOT_RUN"]

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

#: Longest text cell written into the index (file names, paths, error messages) [characters].
MAX_CELL_CHARS = 300


#: index.csv columns holding text from file names or messages (guarded against formulas).
_TEXT_COLUMNS = ("name", "path", "error")


def _bounded(value) -> str:
    """A text cell on one line and at most :data:`MAX_CELL_CHARS` characters."""
    text = " ".join(str(value).split())
    if len(text) > MAX_CELL_CHARS:
        text = text[: MAX_CELL_CHARS - 3] + "..."
    return text


def _spreadsheet_safe(value):
    """Text bounded and quoted when a spreadsheet would run it as a formula (see io.write).

    Values that are not text (counts, flags) are returned as they are.
    """
    from .io.write import spreadsheet_safe

    return spreadsheet_safe(_bounded(value)) if isinstance(value, str) else value


def _index_csv(rows: Sequence[dict]) -> str:
    buf = io.StringIO()
    w = csv.DictWriter(buf, fieldnames=INDEX_COLUMNS, lineterminator="\n")
    w.writeheader()
    for r in rows:
        w.writerow({k: _spreadsheet_safe(v) if k in _TEXT_COLUMNS else v for k, v in r.items()})
    return buf.getvalue()


def _index_html(rows: Sequence[dict], out: Path, folder: Path, complete: bool) -> str:
    def link(r) -> str | None:
        if r["status"] != "ok":
            return None
        for target in ("report.html", "summary.json"):
            if (out / r["name"] / target).is_file():
                href = urllib.parse.quote(r["name"]) + "/" + target
                return html.escape(href, quote=True)
        return None

    def cell(r, c) -> str:
        v = html.escape(_bounded(r.get(c, "")))
        href = link(r) if c == "name" else None
        return f'<a href="{href}">{v}</a>' if href else v

    head = "".join(f"<th>{html.escape(c)}</th>" for c in INDEX_COLUMNS)
    body = "\n".join(
        f'<tr class="{html.escape(str(r.get("verdict") or r["status"]), quote=True)}">'
        + "".join(f"<td>{cell(r, c)}</td>" for c in INDEX_COLUMNS)
        + "</tr>"
        for r in rows
    )
    n_bad = sum(r["status"] == "error" for r in rows)
    n_inc = sum(r.get("verdict") == "inconsistent" for r in rows)
    n_left = sum(r["status"] == NOT_RUN for r in rows)
    warn = (
        ""
        if complete
        else f'<p class="incomplete"><strong>Incomplete:</strong> the batch was interrupted; '
        f"{n_left} datasets were not run (rerun with --resume to finish).</p>\n"
    )
    return f"""<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>kkcheck batch index</title>
<style>
body {{ font-family: system-ui, sans-serif; margin: 2em; color: #222; }}
table {{ border-collapse: collapse; font-size: 0.9em; }}
th, td {{ border: 1px solid #ccc; padding: 0.25em 0.5em; text-align: left; }}
tr.inconsistent td {{ background: #fde8e8; }} tr.error td {{ background: #eee; color: #900; }}
tr.consistent td {{ background: #eef8ee; }} .incomplete {{ color: #900; }}
</style></head><body>
<h1>kkcheck batch index</h1>
{warn}<p>Folder: {html.escape(_bounded(folder))} &mdash; {len(rows)} datasets, {n_inc} inconsistent,
{n_bad} could not be vetted. Each verdict holds only for the window that dataset covers.</p>
<table><thead><tr>{head}</tr></thead><tbody>
{body}
</tbody></table></body></html>
"""


def _write_index(
    rows: Sequence[dict], out: Path, folder: Path, protect=(), *, complete=True, overwrite=False
) -> tuple[Path, Path]:
    """index.csv and index.html, planned, checked and committed as one (kkcheck.outputs)."""
    from .io import write_text
    from .outputs import staged_outputs

    extra = {"complete": bool(complete)}
    with staged_outputs(
        out, protect, overwrite=overwrite, command="kkcheck batch", extra=extra
    ) as stage:
        write_text(stage / "index.csv", _index_csv(rows))
        write_text(stage / "index.html", _index_html(rows, out, folder, complete))
    return out / "index.csv", out / "index.html"


#: Status of the rows of items an interrupted batch did not finish.
NOT_RUN = "not run"


def _not_run_rows(tasks, rows) -> list[dict]:
    done = {r["name"] for r in rows}
    out = []
    for t in tasks:
        if t[2] not in done:
            row: dict = {c: "" for c in INDEX_COLUMNS}
            row.update(
                name=t[2], path=t[0], status=NOT_RUN, error="the batch was interrupted first"
            )
            out.append(row)
    return out
