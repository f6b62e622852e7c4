"""Report layer: figures (matplotlib), a self-contained HTML report, a Markdown summary.

Every function takes plain values (numpy arrays, floats, strings, lists of simple dicts), so
the report never depends on the numerical stages' result types; the pipeline fills them in.

Figures (:mod:`kkcheck.report.figures`; each writes ``<stem>.png`` and ``<stem>.pdf`` and
returns the PNG path)
    plot_sources, plot_kk, plot_residuals, plot_repaired, plot_fit, plot_passivity, plot_slab

Documents
    write_html_report(path, context) -> Path   (context keys: :mod:`kkcheck.report.html`)
    write_markdown_summary(path, context) -> Path
    library_versions() -> dict
"""

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
from .html import build_html, library_versions, write_html_report
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
    "write_html_report",
    "build_html",
    "library_versions",
    "write_markdown_summary",
    "build_markdown",
]
