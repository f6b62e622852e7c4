"""Formatting shared by the HTML report and the Markdown summary.

Plain-text renderings of context values (not escaped: each writer escapes for its own
markup), the verdict word, the key numbers and cautions shown first, the rows of the source
and pole-pair tables, and the atomic document writer. Every function reading a context takes
a :class:`~kkcheck.report.context.ReportContext`.
"""

from __future__ import annotations

import math
import numbers
import os
from collections.abc import Mapping
from pathlib import Path

from .context import ReportContext

__all__ = [
    "STANDARD_CAUTIONS",
    "fmt",
    "fmt_range",
    "as_number",
    "flatten",
    "verdict_word",
    "data_window_ev",
    "key_numbers",
    "all_cautions",
    "source_rows",
    "pair_rows",
    "REGION_HEADERS",
    "region_cells",
    "write_document",
]

#: Cautions shown in every report (the range-specific ones are added from the context).
STANDARD_CAUTIONS = (
    "A constant offset in ε₁ cannot be detected: the Kramers–Kronig relations fix ε₁ only up "
    "to the constant ε∞, so a uniform shift of ε₁ passes every test here.",
    "This report supports, and does not replace, licensed or professional judgment where "
    "safety depends on the result.",
)


def fmt(value, digits: int = 4) -> str:
    """Plain-text rendering of a value from the context (not escaped)."""
    if value is None:
        return "—"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, numbers.Integral):
        return str(int(value))
    if isinstance(value, numbers.Real):
        v = float(value)
        if math.isnan(v):
            return "NaN"
        if math.isinf(v):
            return "∞" if v > 0 else "−∞"
        return f"{v:.{digits}g}"
    if isinstance(value, numbers.Complex):
        sign = "+" if value.imag >= 0 else "−"
        return f"{fmt(value.real, digits)} {sign} {fmt(abs(value.imag), digits)}i"
    if isinstance(value, Mapping):
        return ", ".join(f"{k}={fmt(v, digits)}" for k, v in value.items())
    if isinstance(value, (list, tuple)) or (
        hasattr(value, "tolist") and not isinstance(value, str)
    ):
        seq = value.tolist() if hasattr(value, "tolist") else value
        if isinstance(seq, (list, tuple)):
            return ", ".join(fmt(v, digits) for v in seq) if seq else "(none)"
        return fmt(seq, digits)
    return str(value)


def fmt_range(r, unit: str = "eV") -> str:
    """``"lo – hi eV"`` for a pair, :func:`fmt` of anything else, ``"—"`` for None."""
    if r is None:
        return "—"
    try:
        lo, hi = r
    except (TypeError, ValueError):
        return fmt(r)
    return f"{fmt(lo)} – {fmt(hi)} {unit}"


def as_number(value) -> float | None:
    """``float(value)`` for a real number (not a bool), else None."""
    if isinstance(value, bool) or value is None:
        return None
    if isinstance(value, numbers.Real):
        return float(value)
    return None


def flatten(d: Mapping, prefix: str = "") -> list[tuple[str, object]]:
    """Nested mappings as (dotted key, value) pairs, in order."""
    out: list[tuple[str, object]] = []
    for k, v in d.items():
        key = f"{prefix}.{k}" if prefix else str(k)
        if isinstance(v, Mapping) and v:
            out.extend(flatten(v, key))
        else:
            out.append((key, v))
    return out


def verdict_word(ctx: ReportContext) -> str:
    """The headline word: ``ctx.verdict``, else the KK verdict, else ``"not tested"``."""
    v = ctx.verdict
    if not v:
        v = (ctx.kk or {}).get("verdict")
    return str(v) if v else "not tested"


def data_window_ev(ctx: ReportContext):
    """The tested window [eV]: ``kk.range_ev``, else the span of all sources, else None."""
    kk = ctx.kk or {}
    if kk.get("range_ev") is not None:
        return kk["range_ev"]
    lows, highs = [], []
    for src in list(ctx.inputs) + list((ctx.merge or {}).get("sources") or ()):
        r = src.get("range_ev") if isinstance(src, Mapping) else None
        if r is not None and len(r) == 2:
            lows.append(float(r[0]))
            highs.append(float(r[1]))
    if lows:
        return (min(lows), max(highs))
    return None


def _model_numbers(model: Mapping) -> list[tuple[str, str]]:
    out = [("model pole pairs", str(len(model.get("pairs") or ())))]
    metrics = model.get("metrics") or {}
    if as_number(metrics.get("rms_rel")) is not None:
        out.append(("model error, rms", f"{100 * float(metrics['rms_rel']):.3g} %"))
    if as_number(metrics.get("max_rel")) is not None:
        out.append(("model error, max", f"{100 * float(metrics['max_rel']):.3g} %"))
    pas = model.get("passivity") or {}
    if "certified" in pas:
        out.append(("passivity certified", fmt(bool(pas["certified"]))))
    if "stable" in model:
        out.append(("stable", fmt(bool(model["stable"]))))
    return out


def key_numbers(ctx: ReportContext) -> list[tuple[str, str]]:
    """(label, formatted value) pairs for the verdict box, most important first."""
    out: list[tuple[str, str]] = []
    kk = ctx.kk or {}
    # kk rms and max are normalised residuals (units of sigma); noise is in eps units
    rms, noise = as_number(kk.get("rms")), as_number(kk.get("noise"))
    if rms is not None:
        out.append(("KK residual, rms [σ]", fmt(rms, 3)))
    if as_number(kk.get("max")) is not None:
        out.append(("KK residual, max [σ]", fmt(kk["max"], 3)))
    if noise is not None:
        out.append(("noise, median σ(ε₁)", fmt(noise, 3)))
    if as_number(kk.get("chi2_dof")) is not None:
        out.append(("χ²/dof", fmt(kk["chi2_dof"], 3)))
    if as_number(kk.get("deviation_max_percent")) is not None:
        tol = as_number(kk.get("tolerance_percent"))
        out.append(
            (
                "largest deviation [% of |ε|]",
                fmt(kk["deviation_max_percent"], 3)
                + (f" (tolerance {fmt(tol, 3)})" if tol is not None else ""),
            )
        )
    if "regions" in kk:
        out.append(("inconsistent regions", str(len(kk.get("regions") or ()))))
    if ctx.outliers is not None:
        out.append(("flagged points", str(len(ctx.outliers))))
    window = data_window_ev(ctx)
    if window is not None:
        out.append(("data range", fmt_range(window)))
    n_src = len(ctx.inputs or (ctx.merge or {}).get("sources") or ())
    if n_src:
        out.append(("sources", str(n_src)))
    if ctx.model:
        out.extend(_model_numbers(ctx.model))
    return out


def all_cautions(ctx: ReportContext) -> list[str]:
    """The range cautions, :data:`STANDARD_CAUTIONS`, then ``ctx.cautions``."""
    model = ctx.model or {}
    fit_range = model.get("range_ev")
    out = []
    if model:
        where = f" ({fmt_range(fit_range)})" if fit_range is not None else ""
        out.append(
            f"The fitted model holds only over its fitted range{where}. Outside that range it "
            "is an extrapolation, however smooth and passive it looks."
        )
    else:
        out.append(
            "Any model built from these data holds only over the range it was fitted to; "
            "outside it, it is an extrapolation."
        )
    window = data_window_ev(ctx)
    where = f" ({fmt_range(window)})" if window is not None else ""
    out.append(
        f"The Kramers–Kronig verdict is drawn from the measured window{where}. It cannot see "
        "absorption far outside that window, and the narrower the window, the weaker the test."
    )
    out.extend(STANDARD_CAUTIONS)
    out.extend(ctx.cautions)
    return out


def source_rows(ctx: ReportContext) -> list[dict]:
    """Join ``inputs`` and ``merge.sources`` by position (both are in input order)."""
    inputs = list(ctx.inputs)
    merged = list((ctx.merge or {}).get("sources") or ())
    rows = []
    for i in range(max(len(inputs), len(merged))):
        a = inputs[i] if i < len(inputs) else {}
        b = merged[i] if i < len(merged) else {}
        path = a.get("path", "")
        name = b.get("name") or a.get("name") or (Path(str(path)).name if path else f"#{i + 1}")
        rows.append(
            {
                "name": name,
                "path": path,
                "sha256": a.get("sha256", ""),
                "points": a.get("points"),
                "axis": a.get("axis"),
                "quantity": a.get("quantity"),
                "range_ev": b.get("range_ev", a.get("range_ev")),
                "scale": b.get("scale"),
                "eps1_offset": b.get("eps1_offset"),
            }
        )
    return rows


#: Columns of the region tables (HTML and Markdown), in the order of :func:`region_cells`.
REGION_HEADERS = (
    "from [eV]",
    "to [eV]",
    "component",
    "deviation [% of |ε|]",
    "peak [σ]",
    "strength",
    "max |Δn|",
    "max |Δk|",
    "found as",
)


def region_cells(r: Mapping) -> list[str]:
    """Plain-text cells of one region (``kk.regions`` entry of summary.json)."""
    return [
        fmt(r.get("from_ev")),
        fmt(r.get("to_ev")),
        fmt(r.get("component")),
        fmt(r.get("deviation_percent"), 3),
        fmt(r.get("severity"), 3),
        fmt(r.get("label")),
        fmt(r.get("dn_max"), 3),
        fmt(r.get("dk_max"), 3),
        fmt(r.get("origin")),
    ]


def pair_rows(model: Mapping) -> list[dict]:
    """Pole pairs with derived quantities.

    Notes
    -----
    For one pair p(s) = c/(s - a) + conj(c)/(s - conj(a)) with s = -i w:
    resonance energy |a|, damping (full width) gamma = -2 Re a, and the static contribution
    p(0) = -2 Re(c / a) (infinite for a pole at 0, a conductor term).
    """
    rows = []
    for i, pair in enumerate(model.get("pairs") or ()):
        a = complex(*pair["pole"])
        c = complex(*pair["residue"])
        static = math.inf if a == 0 else -2.0 * (c / a).real
        rows.append(
            {
                "index": i + 1,
                "pole": a,
                "residue": c,
                "resonance_ev": abs(a),
                "damping_ev": -2.0 * a.real,
                "static": static,
            }
        )
    return rows


def write_document(path, text: str) -> Path:
    """Create the parent folder and write ``text`` atomically."""
    from ..io import write_text  # atomic: a half-written report never replaces a good one

    out = Path(os.fspath(path))
    out.parent.mkdir(parents=True, exist_ok=True)
    return write_text(out, text)
