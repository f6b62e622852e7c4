"""What the report writers read: one frozen :class:`ReportContext`.

:func:`kkcheck.report.html.build_html` and :func:`kkcheck.report.markdown.build_markdown` take
a :class:`ReportContext` (or a plain mapping with the same keys, turned into one by
:meth:`ReportContext.from_mapping`). The blocks mirror ``summary.json`` and ``model.json``
(DESIGN.md, machine-readable outputs), so a caller can start from
``ReportContext.from_mapping({**summary, "model": model})`` and add the rest.
:mod:`kkcheck.report.assemble` is the one place that builds it from a pipeline result.

Every field is optional: ``None`` (or an empty tuple) leaves its section out of the page and
the table of contents.
"""

from __future__ import annotations

import importlib.metadata
import os
import platform
from collections.abc import Mapping
from dataclasses import dataclass, fields
from pathlib import Path
from types import MappingProxyType
from typing import Any

from .._version import __version__

__all__ = ["ReportContext", "ReportFigure", "library_versions"]

_LIBRARIES = ("kkcheck", "numpy", "scipy", "pandas", "matplotlib", "statsmodels")


@dataclass(frozen=True)
class ReportFigure:
    """One figure of the report.

    Attributes
    ----------
    path : pathlib.Path
        The PNG file (embedded in the page as a data URI).
    caption : str
        Caption text.
    title : str or None
        Short title; the file stem when None.
    """

    path: Path
    caption: str = ""
    title: str | None = None

    def __post_init__(self):
        object.__setattr__(self, "path", Path(os.fspath(self.path)))

    @classmethod
    def from_mapping(cls, m: Mapping) -> ReportFigure:
        """From ``{"path": ..., "caption": ..., "title": ...}`` (only ``path`` required)."""
        return cls(m["path"], m.get("caption", ""), m.get("title"))


def _frozen_mapping(value) -> Mapping | None:
    return None if value is None else MappingProxyType(dict(value))


@dataclass(frozen=True)
class ReportContext:
    """Everything the HTML report and the Markdown summary show.

    Mapping fields are stored as read-only views; sequences as tuples.

    Attributes
    ----------
    title : str or None
        Page title; ``"kkcheck report"`` when None or empty.
    material : str or None
        Sample or material name, shown under the title.
    version : str
        kkcheck version (default :data:`kkcheck._version.__version__`).
    verdict : str or None
        Overrides ``kk["verdict"]`` as the headline word.
    inputs : tuple of mapping
        One per input file, in input order: ``path``, ``sha256`` (hex), ``points`` (int),
        ``axis`` (e.g. ``"wavelength_nm"``), ``quantity`` (``"nk"`` or ``"eps"``),
        ``range_ev`` ([lo, hi] in eV), and optionally ``name``.
    convention : mapping or None
        ``detected`` (``"exp(-iwt)"`` or ``"exp(+iwt)"``) and ``converted`` (bool), optionally
        ``per_input`` (list of ``path``, ``detected``, ``converted``) to name converted files.
    merge : mapping or None
        ``sources``: list, in input order, of ``name``, ``range_ev``, ``eps1_offset``,
        ``scale`` (eps_source ~ scale * eps_reference + eps1_offset); ``gaps_ev``: list of
        [lo, hi] [eV].
    outliers : tuple of mapping, or None
        ``energy_ev``, ``source``, ``component``, ``kind`` (``"spike"``, ``"step"``, ...), and
        any further keys (shown as extra columns). None: no screening section at all; an
        empty tuple: screening ran and flagged nothing.
    kk : mapping or None
        ``method``, ``anchors_ev`` (list), ``rms``, ``max`` (normalised residuals [sigma]),
        ``noise`` (eps units), ``verdict`` (``"consistent"`` / ``"inconsistent"``),
        ``regions`` (list of ``from_ev``, ``to_ev``, ``component``, ``severity``), optionally
        ``chi2_dof``, ``threshold`` [sigma] and ``range_ev`` (the window tested [eV]).
    sum_rules : mapping, tuple of mapping, or None
        Free form: ``{name: value}``, ``{name: {field: value}}`` or row mappings. None: no
        section; empty: "No sum rules were evaluated."
    repair : mapping or None
        Free-form key/value summary of the repair (nested mappings become dotted keys).
    model : mapping or None
        As ``model.json``: ``eps_inf``, ``pairs`` (list of ``{"pole": [re, im], "residue":
        [re, im]}`` in eV), ``range_ev``, ``metrics`` (e.g. ``rms_rel``, ``max_rel``),
        ``passivity`` (``certified``, ``min_eps2``, ``method``), ``stable`` (bool), and
        optionally ``equivalents``: list of ``{"kind": "lorentz"|"drude"|..., <param>:
        value, ...}`` (physical-model reading of the pairs, parameters in eV).
    slab : mapping or None
        ``thickness_nm`` and further numbers (e.g. ``max_abs_dR``, ``max_abs_dT``).
    figures : tuple of ReportFigure
    cautions : tuple of str
        Extra cautions appended to the standard ones.
    provenance : mapping or None
        ``command`` (str or list of argv), ``date_utc`` (ISO 8601; default: now),
        ``versions`` ({package: version}; default :func:`library_versions`), ``parameters``
        (nested mapping of every setting; flattened to dotted keys), ``config_path``, ``cwd``.
    """

    title: str | None = None
    material: str | None = None
    version: str = __version__
    verdict: str | None = None
    inputs: tuple[Mapping[str, Any], ...] = ()
    convention: Mapping[str, Any] | None = None
    merge: Mapping[str, Any] | None = None
    outliers: tuple[Mapping[str, Any], ...] | None = None
    kk: Mapping[str, Any] | None = None
    sum_rules: Mapping[str, Any] | tuple[Mapping[str, Any], ...] | None = None
    repair: Mapping[str, Any] | None = None
    model: Mapping[str, Any] | None = None
    slab: Mapping[str, Any] | None = None
    figures: tuple[ReportFigure, ...] = ()
    cautions: tuple[str, ...] = ()
    provenance: Mapping[str, Any] | None = None

    def __post_init__(self):
        def put(name, value):
            object.__setattr__(self, name, value)

        put("version", self.version or __version__)
        put("inputs", tuple(self.inputs or ()))
        if self.outliers is not None:
            put("outliers", tuple(self.outliers))
        for name in ("convention", "merge", "kk", "repair", "model", "slab", "provenance"):
            put(name, _frozen_mapping(getattr(self, name)))
        sr = self.sum_rules
        if sr is not None:
            put("sum_rules", _frozen_mapping(sr) if isinstance(sr, Mapping) else tuple(sr))
        put(
            "figures",
            tuple(
                f if isinstance(f, ReportFigure) else ReportFigure.from_mapping(f)
                for f in self.figures or ()
            ),
        )
        put("cautions", tuple(str(c) for c in self.cautions or ()))

    @classmethod
    def from_mapping(cls, context: Mapping) -> ReportContext:
        """A context from a plain mapping whose keys are the field names (all optional).

        A key present with value None counts as present for ``outliers`` and ``sum_rules``
        (their section is shown, saying there is nothing in it); other None values are absent.
        Unknown keys are ignored.
        """
        if not isinstance(context, Mapping):
            raise ValueError("context must be a ReportContext or a mapping (dict)")
        names = {f.name for f in fields(cls)}
        kw = {k: v for k, v in context.items() if k in names and v is not None}
        if "outliers" in context:
            kw["outliers"] = tuple(context["outliers"] or ())
        if "sum_rules" in context and not context["sum_rules"]:
            kw["sum_rules"] = {}
        return cls(**kw)

    @classmethod
    def coerce(cls, context: ReportContext | Mapping) -> ReportContext:
        """``context`` itself when it is a ReportContext, else :meth:`from_mapping`."""
        return context if isinstance(context, cls) else cls.from_mapping(context)


def library_versions() -> dict[str, str]:
    """Versions of Python, kkcheck and the libraries it computes with."""
    out = {"python": platform.python_version()}
    for name in _LIBRARIES:
        try:
            out[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            out[name] = __version__ if name == "kkcheck" else "not installed"
    return out
