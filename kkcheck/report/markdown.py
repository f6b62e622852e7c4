"""A short Markdown summary of a kkcheck run, fit for a paper's supplementary material.

It reads the same context dict as :func:`kkcheck.report.html.write_html_report` (keys in that
module's docstring) and states what was done, the verdict with its key numbers, the model
table and the range caution. User strings are escaped so that they cannot break a table or
start Markdown/HTML markup.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from pathlib import Path

from .html import (
    _cautions,
    _fmt,
    _key_numbers,
    _pair_rows,
    _range,
    _source_rows,
    _verdict_word,
    _write_document,
)

__all__ = ["write_markdown_summary", "build_markdown"]

_MD_SPECIAL = re.compile(r"([\\`*_\[\]<>|~])")
_ENTITY_START = re.compile(r"&(?=#?\w+;)")


def _m(value) -> str:
    """Escape a user string for Markdown text and table cells (one line)."""
    text = " ".join(str(value).split())  # newlines would end a table row
    text = _ENTITY_START.sub("&amp;", text)  # "&lt;" must not turn into "<"
    return _MD_SPECIAL.sub(r"\\\1", text)


def _md_table(headers, rows) -> list[str]:
    lines = ["| " + " | ".join(headers) + " |", "|" + "|".join("---" for _ in headers) + "|"]
    lines += ["| " + " | ".join(str(c) for c in row) + " |" for row in rows]
    return lines


def build_markdown(context: Mapping) -> str:
    """The summary as a Markdown string (see :mod:`kkcheck.report.html` for ``context``)."""
    if not isinstance(context, Mapping):
        raise ValueError("context must be a mapping (dict)")
    ctx = context
    version = ctx.get("version")
    if not version:
        from .._version import __version__ as version
    kk = ctx.get("kk") or {}
    model = ctx.get("model") or {}
    title = "Optical-constant vetting"
    if ctx.get("material"):
        title += f": {_m(ctx['material'])}"
    lines = [f"# {title}", ""]

    # what was done
    sources = _source_rows(ctx)
    done = []
    if sources:
        listed = "; ".join(
            f"{_m(s['name'])} ({_m(_range(s['range_ev']))}, {_m(_fmt(s['points']))} points)"
            for s in sources
        )
        done.append(
            f"{len(sources)} source(s) were read and merged onto one photon-energy axis: {listed}."
        )
    gaps = (ctx.get("merge") or {}).get("gaps_ev") or ()
    if gaps:
        done.append("Uncovered gaps: " + ", ".join(_m(_range(g)) for g in gaps) + ".")
    if "outliers" in ctx:
        done.append(
            f"Outlier screening flagged {len(ctx.get('outliers') or ())} point(s); "
            "flagged points were kept and marked, not deleted."
        )
    if kk:
        method = f" ({_m(kk['method'])})" if kk.get("method") else ""
        done.append(
            f"The real and imaginary parts were tested against each other with the "
            f"Kramers–Kronig relations{method}."
        )
    if ctx.get("repair"):
        done.append("A Kramers–Kronig-consistent repair was computed with its uncertainty.")
    if model:
        done.append(
            f"A rational model of {len(model.get('pairs') or ())} complex-conjugate pole "
            f"pair(s) was fitted over {_m(_range(model.get('range_ev')))}"
            + (", and certified passive" if (model.get("passivity") or {}).get("certified") else "")
            + "."
        )
    if ctx.get("slab"):
        done.append(
            f"Slab reflectance and transmittance (thickness "
            f"{_m(_fmt((ctx.get('slab') or {}).get('thickness_nm')))} nm) were compared "
            "between data and model."
        )
    lines += ["## What was done", ""]
    lines += [f"- {d}" for d in done] or ["- Nothing beyond reading the inputs."]
    lines.append(f"- Software: kkcheck {_m(version)}.")
    lines.append("")

    # verdict
    word = _verdict_word(ctx)
    lines += ["## Verdict", "", f"**{_m(word)}**", ""]
    nums = _key_numbers(ctx)
    if nums:
        lines += _md_table(["quantity", "value"], [[_m(k), _m(v)] for k, v in nums])
        lines.append("")
    regions = kk.get("regions") or ()
    if regions:
        lines.append("Flagged regions:")
        lines.append("")
        lines += _md_table(
            ["from [eV]", "to [eV]", "component", "severity"],
            [
                [
                    _m(_fmt(r.get("from_ev"))),
                    _m(_fmt(r.get("to_ev"))),
                    _m(_fmt(r.get("component"))),
                    _m(_fmt(r.get("severity"))),
                ]
                for r in regions
            ],
        )
        lines.append("")

    # model
    if model:
        lines += ["## Model", ""]
        lines.append(
            "eps(w) = eps_inf + sum_p [c_p/(s - a_p) + conj(c_p)/(s - conj(a_p))], s = -i w, "
            "time dependence exp(-i w t), w, a_p, c_p in eV; "
            f"eps_inf = {_m(_fmt(model.get('eps_inf'), 8))}."
        )
        lines.append("")
        rows = _pair_rows(model)
        if rows:
            lines += _md_table(
                [
                    "pair",
                    "Re a [eV]",
                    "Im a [eV]",
                    "Re c [eV]",
                    "Im c [eV]",
                    "\\|a\\| [eV]",
                    "-2 Re a [eV]",
                    "static Δε",
                ],
                [
                    [
                        r["index"],
                        _fmt(r["pole"].real, 8),
                        _fmt(r["pole"].imag, 8),
                        _fmt(r["residue"].real, 8),
                        _fmt(r["residue"].imag, 8),
                        _fmt(r["resonance_ev"]),
                        _fmt(r["damping_ev"]),
                        _fmt(r["static"]),
                    ]
                    for r in rows
                ],
            )
            lines.append("")

    # cautions
    lines += ["## Range and limits", ""]
    lines += [f"- {_m(c)}" for c in _cautions(ctx)]
    lines.append("")
    return "\n".join(lines)


def write_markdown_summary(path, context: Mapping) -> Path:
    """Write the Markdown summary.

    Parameters
    ----------
    path : str or os.PathLike
        Output file (parent directories are created).
    context : dict
        Report content; keys in :mod:`kkcheck.report.html`.

    Returns
    -------
    pathlib.Path
        The written file.
    """
    return _write_document(path, build_markdown(context))
