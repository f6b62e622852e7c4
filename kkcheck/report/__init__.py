"""Report layer: figures (matplotlib), a self-contained HTML report, a Markdown summary.

The figure functions take plain values (numpy arrays, floats, strings, lists of simple
dicts); the documents take one frozen :class:`ReportContext`. So the report never depends on
the numerical stages' result types: :mod:`kkcheck.report.assemble` is the one module that
turns a pipeline result into figures and a context.

Figures (:mod:`kkcheck.report.figures`; each writes ``<stem>.png`` and ``<stem>.pdf`` and
returns the PNG path)
    plot_sources, plot_repaired (:mod:`.figures.data`); plot_kk, plot_residuals
    (:mod:`.figures.kk`); plot_fit, plot_passivity, plot_slab (:mod:`.figures.fit`)

Documents
    ReportContext, ReportFigure (:mod:`.context`): what the documents show
    write_html_report(path, context) -> Path, build_html(context) -> str (:mod:`.html`)
    write_markdown_summary(path, context) -> Path, build_markdown(context) -> str
    (:mod:`.markdown`)
    library_versions() -> dict

Shared plain-text formatting of both documents: :mod:`.format`.
"""

from .context import ReportContext, ReportFigure, library_versions
from .figures import (
    FIGURE_DPI,
    plot_fit,
    plot_kk,
    plot_passivity,
    plot_repaired,
    plot_residuals,
    plot_slab,
    plot_sources,
)
from .html import build_html, write_html_report
from .markdown import build_markdown, write_markdown_summary

__all__ = [
    "FIGURE_DPI",
    "plot_sources",
    "plot_kk",
    "plot_residuals",
    "plot_repaired",
    "plot_fit",
    "plot_passivity",
    "plot_slab",
    "ReportContext",
    "ReportFigure",
    "write_html_report",
    "build_html",
    "library_versions",
    "write_markdown_summary",
    "build_markdown",
]
