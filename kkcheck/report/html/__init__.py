"""One self-contained HTML report: verdict first, cautions, tables, figures, provenance.

The page has no external reference of any kind: the style sheet (``report.css``, package
data) is inlined, figures are embedded as base64 ``data:image/png`` URIs, and the page carries
no script. Every string that comes from the user or from input files (source names, paths,
column names, parameters, command line) is escaped with :func:`html.escape`.

Modules: :mod:`.tables` (escaping, tables), :mod:`.sections` (one function per section),
:mod:`.page` (the document). What the page shows is a
:class:`~kkcheck.report.context.ReportContext`.

References
----------
.. [1] WHATWG, "HTML Living Standard", section 13.1 (syntax) — the characters escaped by
   :func:`html.escape` (``& < > " '``) are the ones that can end text or attribute content.
"""

from ..context import library_versions
from ..format import STANDARD_CAUTIONS
from .page import build_html, write_html_report

__all__ = ["write_html_report", "build_html", "library_versions", "STANDARD_CAUTIONS"]
