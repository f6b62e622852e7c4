"""Axes shared by the report figures: energy axis, ticks, wavelength axis, shaded spans.

Conventions (see DESIGN.md): the horizontal axis is photon energy [eV]; plots whose energy
range spans more than one decade use a logarithmic axis; the top axis of energy plots shows
the vacuum wavelength [nm] = 1239.841984 / E[eV] (hc, CODATA 2018). eps = eps1 + i eps2 in the
exp(-i w t) convention, so a passive medium has eps2 >= 0.
"""

from __future__ import annotations

import matplotlib.ticker as mticker
import numpy as np

from ...units import HC_EV_NM
from .style import DATA_COLOUR, FLAG_COLOUR, OK_COLOUR, REGION_COLOUR

__all__ = [
    "energy_limits",
    "uses_log",
    "set_energy_axis",
    "plain_log_ticks",
    "num_label",
    "symlog_ticks",
    "ev_nm",
    "add_wavelength_axis",
    "shade_spans",
    "shade_regions",
    "component_panels",
    "severity_alpha",
    "verdict_colour",
    "linestyle_for",
    "scatter_style",
    "LOG_SPAN",
    "wants_log_values",
    "eps2_log_axis",
]

#: A panel of eps2 (or k) goes on a log axis when its positive values span more than this
#: ratio (weak absorption is invisible on a linear axis; common practice, no source).
LOG_SPAN = 100.0


def energy_limits(*arrays) -> tuple[float, float]:
    """Smallest and largest finite positive energy [eV] of the arrays (0.1, 10 if none)."""
    vals = [np.asarray(a, dtype=float) for a in arrays if a is not None and len(a)]
    vals = [v[np.isfinite(v) & (v > 0)] for v in vals]
    vals = [v for v in vals if v.size]
    if not vals:
        return 0.1, 10.0
    lo = min(float(v.min()) for v in vals)
    hi = max(float(v.max()) for v in vals)
    if hi <= lo:
        lo, hi = lo / 1.1, hi * 1.1
    return lo, hi


def uses_log(lo: float, hi: float) -> bool:
    """A logarithmic energy axis when the range spans more than one decade."""
    return lo > 0 and hi / lo > 10.0


def set_energy_axis(axes, lo: float, hi: float, *, wavelength_axis: bool = True) -> None:
    """Shared x scaling for a column of panels; wavelength [nm] on top of the first."""
    log = uses_log(lo, hi)
    for ax in axes:
        if log:
            ax.set_xscale("log")
            ax.set_xlim(lo / 1.08, hi * 1.08)
            plain_log_ticks(ax.xaxis, lo, hi)
        else:
            pad = 0.02 * (hi - lo)
            ax.set_xlim(max(lo - pad, lo / 2), hi + pad)
    axes[-1].set_xlabel("Photon energy [eV]")
    for ax in axes[:-1]:
        ax.tick_params(labelbottom=False)
    if wavelength_axis:
        add_wavelength_axis(axes[0])


def plain_log_ticks(axis, lo: float, hi: float) -> None:
    """Log-axis ticks labelled as plain numbers (0.5, 1, 2, 5, ...) instead of 10^x."""
    decades = np.log10(hi / lo) if lo > 0 and hi > lo else 1.0
    subs = (1.0, 2.0, 5.0) if decades <= 2.5 else (1.0,)
    axis.set_major_locator(mticker.LogLocator(base=10.0, subs=subs))
    axis.set_major_formatter(mticker.FuncFormatter(num_label))
    axis.set_minor_formatter(mticker.NullFormatter())


def num_label(v: float, _pos=None) -> str:
    """Tick label: plain number in 1e-3..1e5, else a power of ten in mathtext."""
    if v == 0:
        return "0"
    a = abs(v)
    sign = "−" if v < 0 else ""
    if 1e-3 <= a < 1e5:
        return sign + f"{a:g}"
    exp = np.log10(a)
    if abs(exp - round(exp)) < 1e-9:
        return f"${'-' if v < 0 else ''}10^{{{int(round(exp))}}}$"
    return sign + f"{a:.0e}"


def symlog_ticks(linthresh: float, bottom: float, top: float) -> list[float]:
    """0 and +-powers of ten from 10*linthresh outwards, at most ~6 per side."""
    k0 = int(np.ceil(np.log10(10.0 * linthresh)))
    ticks = [0.0]
    for sign, lim in ((1.0, top), (-1.0, -bottom)):
        if lim <= 10.0 * linthresh:
            continue
        k1 = int(np.floor(np.log10(lim)))
        step = max(1, int(np.ceil((k1 - k0 + 1) / 6)))
        ticks += [sign * 10.0**k for k in range(k1, k0 - 1, -step)]
    return sorted(ticks)


def ev_nm(x):
    """E [eV] <-> vacuum wavelength [nm] = hc / E (its own inverse; inf at E <= 0)."""
    x = np.asarray(x, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(x > 0, HC_EV_NM / np.where(x > 0, x, 1.0), np.inf)


def add_wavelength_axis(ax) -> None:
    """A secondary top axis in vacuum wavelength [nm]."""
    sec = ax.secondary_xaxis("top", functions=(ev_nm, ev_nm))
    if ax.get_xscale() == "log":
        lo, hi = sorted(float(v) for v in ev_nm(np.array(ax.get_xlim())))
        plain_log_ticks(sec.xaxis, lo, hi)
    sec.set_xlabel("Wavelength [nm]")
    sec.tick_params(labelsize=8)
    sec.grid(False)


def shade_spans(ax, spans, colour, alpha, label=None, hatch=None) -> bool:
    """Shade each finite (lo, hi) energy span; True when anything was drawn."""
    drawn = False
    for lo, hi in spans:
        lo, hi = float(lo), float(hi)
        if not (np.isfinite(lo) and np.isfinite(hi)) or hi <= lo:
            continue
        ax.axvspan(
            lo,
            hi,
            facecolor=colour,
            alpha=alpha,
            hatch=hatch,
            edgecolor=colour if hatch else "none",
            linewidth=0.0,
            label=None if drawn else label,
            zorder=0,
        )
        drawn = True
    return drawn


def component_panels(component: str | None) -> tuple[int, ...]:
    """Which panels (0 = eps1, 1 = eps2) a flag/region on ``component`` belongs to."""
    c = (component or "").strip().lower()
    if c in ("eps1", "e1", "n", "real", "re"):
        return (0,)
    if c in ("eps2", "e2", "k", "imag", "im"):
        return (1,)
    return (0, 1)


def severity_alpha(severity) -> float:
    """Shade strength for a region: stronger for a higher severity (number or word)."""
    if isinstance(severity, str):
        return {"low": 0.15, "minor": 0.15, "medium": 0.25, "moderate": 0.25}.get(
            severity.strip().lower(), 0.35
        )
    try:
        s = float(severity)
    except (TypeError, ValueError):
        return 0.3
    if not np.isfinite(s):
        return 0.35
    return float(np.clip(0.12 + 0.04 * s, 0.12, 0.4))


def verdict_colour(verdict: str) -> str:
    """Green for a consistent verdict, red for an inconsistent one, else dark grey."""
    v = (verdict or "").strip().lower()
    if v == "consistent" or v.startswith(("pass", "ok", "consistent")):
        return OK_COLOUR
    if v.startswith(("inconsistent", "fail")):
        return FLAG_COLOUR
    return DATA_COLOUR


def linestyle_for(n_points: int) -> dict:
    """Markers on sparse data, plain lines on dense data."""
    if n_points <= 60:
        return {"marker": "o", "markersize": 3.0, "linewidth": 1.0}
    return {"marker": None, "linewidth": 1.3}


def scatter_style(n_points: int, markersize: float = 2.5) -> dict:
    """Data drawn as dots: round markers, smaller points above 400 samples."""
    if n_points > 400:
        return {"marker": ".", "markersize": 2.0, "linestyle": "none"}
    return {"marker": "o", "markersize": markersize, "linestyle": "none"}


def shade_regions(axes, regions) -> bool:
    """Shade flagged regions on their component's panel (eps1: axes[0], eps2: axes[1]).

    Returns True when anything was shaded; a one-point region is widened to be visible.
    """
    shaded = False
    for r in regions or ():
        lo, hi = float(r["from_ev"]), float(r["to_ev"])
        if hi <= lo:  # a one-point region: widen to be visible
            hi = lo * 1.01 if lo > 0 else lo + 1e-3
        for p in component_panels(r.get("component")):
            axes[p].axvspan(
                lo,
                hi,
                facecolor=REGION_COLOUR,
                alpha=severity_alpha(r.get("severity")),
                linewidth=0,
                zorder=0,
            )
            shaded = True
    return shaded


def wants_log_values(y) -> bool:
    """True when >= 90 % of ``y`` is positive and the positive values span > LOG_SPAN.

    Where more than a tenth of the values are zero or negative (a transparent range printed
    as k = 0, noise around zero) a log axis would hide them and magnify the noise: linear.
    """
    y = np.asarray(y, dtype=float)
    pos = y[np.isfinite(y) & (y > 0)]
    return pos.size >= 0.9 * max(y.size, 1) and pos.size > 1 and pos.max() > LOG_SPAN * pos.min()


def eps2_log_axis(ax, y) -> str:
    """Put ``ax`` on a log y axis when :func:`wants_log_values`; returns the note drawn ("").

    Values <= 0 cannot be shown on a log axis: the panel then says how many were left out and
    its y label says "log scale", so nobody reads a missing point as absent data.
    """
    if not wants_log_values(y):
        return ""
    y = np.asarray(y, dtype=float)
    ax.set_yscale("log", nonpositive="mask")
    label = ax.get_ylabel()
    ax.set_ylabel(f"{label} (log scale)" if label else "log scale")
    n_out = int(np.sum(np.isfinite(y) & (y <= 0)))
    note = f"{n_out} point(s) with ε₂ ≤ 0 not drawn (log axis)" if n_out else "log scale"
    if n_out:
        ax.text(0.01, 0.03, note, transform=ax.transAxes, fontsize=7, color="#555555")
    return note
