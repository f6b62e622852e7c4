"""The report page: header, verdict, cautions and figures first, then the tables, provenance.

The page has no external reference of any kind: the style sheet (``report.css``, package
data) is inlined, figures are embedded as data URIs, and the page carries no script.
"""

from __future__ import annotations

import importlib.resources
from collections.abc import Mapping
from pathlib import Path

from ..context import ReportContext
from ..format import write_document
from . import sections as S
from .tables import escape

__all__ = ["build_html", "write_html_report"]


def _css() -> str:
    return importlib.resources.files("kkcheck.report").joinpath("report.css").read_text("utf-8")


def _sections(ctx: ReportContext, prov: Mapping) -> list[tuple[str, str, str]]:
    """(id, heading, html) of every section the context has content for, in page order."""
    sections: list[tuple[str, str, str]] = []
    if ctx.figures:  # the evidence first, right after the verdict and the cautions
        sections.append(("figures", "Figures", S.section_figures(ctx)))
    if ctx.inputs or (ctx.merge or {}).get("sources"):
        sections.append(("sources", "Sources", S.section_sources(ctx)))
    if ctx.outliers is not None:
        sections.append(("flags", "Flagged points", S.section_flags(ctx)))
    if ctx.kk:
        sections.append(("kk", "Kramers–Kronig test", S.section_regions(ctx)))
    if ctx.sum_rules is not None:
        sections.append(("sumrules", "Sum rules", S.section_sum_rules(ctx)))
    if ctx.repair:
        sections.append(("repair", "Repair", S.section_repair(ctx)))
    if ctx.model:
        sections.append(("model", "Model parameters", S.section_model(ctx)))
    if ctx.slab:
        sections.append(("slab", "Slab check", S.section_slab(ctx)))
    sections.append(("provenance", "Provenance", S.section_provenance(ctx, prov)))
    return sections


def build_html(context: ReportContext | Mapping) -> str:
    """The report page as a string.

    Parameters
    ----------
    context : ReportContext or mapping
        What to show (:class:`~kkcheck.report.context.ReportContext`; a mapping with its
        field names as keys is converted). Every field is optional.

    Returns
    -------
    str
        A complete HTML5 document with no external references.
    """
    ctx = ReportContext.coerce(context)
    title = ctx.title or "kkcheck report"
    prov = S.provenance_record(ctx)
    sub = [str(ctx.material)] if ctx.material else []
    sub += [f"kkcheck {ctx.version}", f"generated {prov['date_utc']}"]
    sections = _sections(ctx, prov)
    toc = " ".join(f'<a href="#{sid}">{escape(head)}</a>' for sid, head, _ in sections)
    body = "".join(
        f'<section id="{sid}"><h2>{escape(head)}</h2>{h}</section>' for sid, head, h in sections
    )
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        '<meta name="generator" content="kkcheck">'
        f"<title>{escape(title)}</title><style>{_css()}</style></head><body>"
        f'<header><h1>{escape(title)}</h1><p class="subtitle">{escape(" · ".join(sub))}</p>'
        f'<nav class="toc">{toc}</nav></header>'
        f"<main>{S.section_verdict(ctx)}{S.section_cautions(ctx)}{body}</main>"
        "<footer>Self-contained report written by kkcheck: figures and styles are embedded; "
        "nothing is loaded from elsewhere.</footer></body></html>\n"
    )


def write_html_report(path, context: ReportContext | Mapping) -> Path:
    """Write the self-contained HTML report.

    Parameters
    ----------
    path : str or os.PathLike
        Output file (parent directories are created; written atomically).
    context : ReportContext or mapping
        Report content, as for :func:`build_html`.

    Returns
    -------
    pathlib.Path
        The written file.
    """
    return write_document(path, build_html(context))
