"""HTML building blocks: escaping and tables.

Every string that comes from the user or from input files is escaped with
:func:`html.escape` (WHATWG HTML Living Standard, section 13.1, syntax: ``& < > " '`` are the
characters that can end text or attribute content).
"""

from __future__ import annotations

import html
from collections.abc import Iterable, Mapping, Sequence

from ..format import as_number, fmt

__all__ = ["escape", "table", "generic_table", "kv_table", "none_note", "LONG_TABLE_ROWS"]

#: Tables with more rows than this are collapsed in a <details> box (its summary names the
#: table and its row count), so the verdict and the figures are not buried under them.
LONG_TABLE_ROWS = 12


def escape(value) -> str:
    """Escape any value for HTML text or a double-quoted attribute (None becomes "")."""
    return html.escape("" if value is None else str(value), quote=True)


def table(
    headers: Sequence[str],
    rows: Iterable[Sequence],
    numeric: Sequence[bool] = (),
    caption: str | None = None,
) -> str:
    """A scrollable table; rows are sequences of already-escaped HTML cell contents.

    More than :data:`LONG_TABLE_ROWS` rows: the table is collapsed in a ``<details>`` box.
    """
    num = list(numeric) + [False] * (len(headers) - len(numeric))
    head = "".join(f"<th>{escape(h)}</th>" for h in headers)
    body = []
    for row in rows:
        cells = "".join(
            f'<td class="num">{c}</td>' if num[j] else f"<td>{c}</td>" for j, c in enumerate(row)
        )
        body.append(f"<tr>{cells}</tr>")
    cap = f"<caption>{escape(caption)}</caption>" if caption else ""
    html_ = (
        f'<div class="tablewrap"><table>{cap}<thead><tr>{head}</tr></thead>'
        f"<tbody>{''.join(body)}</tbody></table></div>"
    )
    if len(body) <= LONG_TABLE_ROWS:
        return html_
    what = escape(caption) if caption else "Table"
    return (
        f'<details class="long"><summary>{what} ({len(body)} rows; click to show)</summary>'
        f"{html_}</details>"
    )


def generic_table(rows: Sequence[Mapping], caption: str | None = None) -> str:
    """One column per key seen in any row (first-seen order); numeric columns right-aligned."""
    keys: list[str] = []
    for r in rows:
        for k in r:
            if k not in keys:
                keys.append(k)
    body = [[escape(fmt(r.get(k))) for k in keys] for r in rows]
    numeric = [all(as_number(r.get(k)) is not None for r in rows if k in r) for k in keys]
    return table(keys, body, numeric, caption)


def kv_table(items: Iterable[tuple[str, object]], caption: str | None = None) -> str:
    """A two-column quantity/value table."""
    body = [[escape(k), escape(fmt(v))] for k, v in items]
    return table(["quantity", "value"], body, [False, False], caption)


def none_note(text: str) -> str:
    """A paragraph saying a section has nothing to show."""
    return f'<p class="none">{escape(text)}</p>'
