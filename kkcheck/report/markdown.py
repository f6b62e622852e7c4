"""A short Markdown summary of a kkcheck run, fit for a paper's supplementary material.

It reads the same :class:`~kkcheck.report.context.ReportContext` as
:func:`kkcheck.report.html.write_html_report` and states what was done, the verdict with its
key numbers, the model table and the range caution. User strings are escaped so that they
cannot break a table or start Markdown/HTML markup.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from pathlib import Path

from .context import ReportContext
from .format import (
    REGION_HEADERS,
    all_cautions,
    fmt,
    fmt_range,
    key_numbers,
    pair_rows,
    region_cells,
    source_rows,
    verdict_word,
    write_document,
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


def _done(ctx: ReportContext) -> list[str]:
    """The sentences of "What was done", in pipeline order."""
    kk = ctx.kk or {}
    model = ctx.model or {}
    sources = source_rows(ctx)
    done = []
    if sources:
        listed = "; ".join(
            f"{_m(s['name'])} ({_m(fmt_range(s['range_ev']))}, {_m(fmt(s['points']))} points)"
            for s in sources
        )
        done.append(
            f"{len(sources)} source(s) were read and merged onto one photon-energy axis: {listed}."
        )
    gaps = (ctx.merge or {}).get("gaps_ev") or ()
    if gaps:
        done.append("Uncovered gaps: " + ", ".join(_m(fmt_range(g)) for g in gaps) + ".")
    if ctx.outliers is not None:
        done.append(
            f"Outlier screening flagged {len(ctx.outliers)} point(s); "
            "flagged points were kept and marked, not deleted."
        )
    if kk:
        method = f" ({_m(kk['method'])})" if kk.get("method") else ""
        done.append(
            f"The real and imaginary parts were tested against each other with the "
            f"Kramers–Kronig relations{method}."
        )
    if ctx.repair:
        done.append("A Kramers–Kronig-consistent repair was computed with its uncertainty.")
    if model:
        done.append(
            f"A rational model of {len(model.get('pairs') or ())} complex-conjugate pole "
            f"pair(s) was fitted over {_m(fmt_range(model.get('range_ev')))}"
            + (", and certified passive" if (model.get("passivity") or {}).get("certified") else "")
            + "."
        )
    if ctx.slab:
        done.append(
            f"Slab reflectance and transmittance (thickness "
            f"{_m(fmt(ctx.slab.get('thickness_nm')))} nm) were compared "
            "between data and model."
        )
    return done


def _verdict(ctx: ReportContext) -> list[str]:
    """The verdict word and phrase, the key numbers and the inconsistent regions."""
    lines = ["## Verdict", "", f"**{_m(verdict_word(ctx))}**", ""]
    text = (ctx.kk or {}).get("verdict_text")
    if text:
        lines += [_m(text), ""]
    nums = key_numbers(ctx)
    if nums:
        lines += _md_table(["quantity", "value"], [[_m(k), _m(v)] for k, v in nums])
        lines.append("")
    kk = ctx.kk or {}
    for key, head in (
        ("regions", "Inconsistent regions"),
        ("regions_within_tolerance", "Significant but below the tolerance (not counted)"),
    ):
        regions = kk.get(key) or ()
        if regions:
            lines += [f"{head}:", ""]
            lines += _md_table(
                [_m(h) for h in REGION_HEADERS],
                [[_m(c) for c in region_cells(r)] for r in regions],
            )
            lines.append("")
    return lines


def _model(model: Mapping) -> list[str]:
    """The model form, eps_inf and the pole-pair table (8 significant digits)."""
    lines = ["## Model", ""]
    lines.append(
        "eps(w) = eps_inf + sum_p [c_p/(s - a_p) + conj(c_p)/(s - conj(a_p))], s = -i w, "
        "time dependence exp(-i w t), w, a_p, c_p in eV; "
        f"eps_inf = {_m(fmt(model.get('eps_inf'), 8))}."
    )
    lines.append("")
    rows = pair_rows(model)
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
                    fmt(r["pole"].real, 8),
                    fmt(r["pole"].imag, 8),
                    fmt(r["residue"].real, 8),
                    fmt(r["residue"].imag, 8),
                    fmt(r["resonance_ev"]),
                    fmt(r["damping_ev"]),
                    fmt(r["static"]),
                ]
                for r in rows
            ],
        )
        lines.append("")
    return lines


def build_markdown(context: ReportContext | Mapping) -> str:
    """The summary as a Markdown string.

    Parameters
    ----------
    context : ReportContext or mapping
        What to summarise (a mapping with the field names as keys is converted).

    Returns
    -------
    str
        Markdown text: what was done, verdict, model, range and limits.
    """
    ctx = ReportContext.coerce(context)
    title = "Optical-constant vetting"
    if ctx.material:
        title += f": {_m(ctx.material)}"
    lines = [f"# {title}", ""]
    lines += ["## What was done", ""]
    lines += [f"- {d}" for d in _done(ctx)] or ["- Nothing beyond reading the inputs."]
    lines.append(f"- Software: kkcheck {_m(ctx.version)}.")
    lines.append("")
    lines += _verdict(ctx)
    if ctx.model:
        lines += _model(ctx.model)
    lines += ["## Range and limits", ""]
    lines += [f"- {_m(c)}" for c in all_cautions(ctx)]
    lines.append("")
    return "\n".join(lines)


def write_markdown_summary(path, context: ReportContext | Mapping) -> Path:
    """Write the Markdown summary.

    Parameters
    ----------
    path : str or os.PathLike
        Output file (parent directories are created; written atomically).
    context : ReportContext or mapping
        Report content, as for :func:`build_markdown`.

    Returns
    -------
    pathlib.Path
        The written file.
    """
    return write_document(path, build_markdown(context))
