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

import importlib

#: public name -> submodule that defines it; loaded on first use, so that importing
#: kkcheck.report.summary (the pipeline does) does not load matplotlib.
_WHERE = {
    "ReportContext": ".context",
    "ReportFigure": ".context",
    "library_versions": ".context",
    "FIGURE_DPI": ".figures",
    "plot_fit": ".figures",
    "plot_kk": ".figures",
    "plot_passivity": ".figures",
    "plot_repaired": ".figures",
    "plot_residuals": ".figures",
    "plot_slab": ".figures",
    "plot_sources": ".figures",
    "build_html": ".html",
    "write_html_report": ".html",
    "build_markdown": ".markdown",
    "write_markdown_summary": ".markdown",
}

__all__ = list(_WHERE)


def __getattr__(name):
    if name in _WHERE:
        return getattr(importlib.import_module(_WHERE[name], __name__), name)
    raise AttributeError(f"module {__name__!r} has no attribute {name!r}")
