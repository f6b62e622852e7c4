"""Figures of the Kramers–Kronig test: data against reconstruction, normalised residuals.

Horizontal axis photon energy [eV] (see :mod:`.axes`); eps in the exp(-i w t) convention.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import matplotlib
import numpy as np
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from .axes import (
    component_panels,
    energy_limits,
    eps2_log_axis,
    scatter_style,
    set_energy_axis,
    shade_regions,
    verdict_colour,
)
from .style import (
    DATA_COLOUR,
    FLAG_COLOUR,
    MODEL_COLOUR,
    PALETTE,
    REGION_COLOUR,
    STYLE,
    new_figure,
    real_array,
    same_length,
    save,
)

__all__ = ["plot_kk", "plot_residuals", "worst_region", "RESIDUAL_AXIS_CAP"]


def worst_region(regions: Sequence[dict]) -> dict | None:
    """The region to zoom on: largest ``deviation_percent``, else largest ``severity``."""

    def size(r):
        for key in ("deviation_percent", "severity"):
            try:
                v = float(r.get(key))
            except (TypeError, ValueError):
                continue
            if np.isfinite(v):
                return v
        return 0.0

    regions = list(regions or ())
    return max(regions, key=size) if regions else None


def _zoom_window(e: np.ndarray, region: dict) -> np.ndarray:
    """Points of the region plus half its width (at least 3 points) on each side."""
    lo, hi = float(region["from_ev"]), float(region["to_ev"])
    pad = max(0.5 * (hi - lo), 1e-6 * hi)
    inside = (e >= lo - pad) & (e <= hi + pad)
    if inside.sum() < 7:  # a narrow region on a coarse grid: take neighbours by index
        i0, i1 = np.searchsorted(e, [lo, hi])
        inside[max(i0 - 3, 0) : min(i1 + 4, e.size)] = True
    return inside


def _draw_zoom(ax, e, y, m, s, region: dict, name: str) -> None:
    """Data (with +-1 sigma bars) and reconstruction over the worst region, linear axes."""
    w = _zoom_window(e, region)
    lo, hi = float(region["from_ev"]), float(region["to_ev"])
    ax.axvspan(lo, hi if hi > lo else lo * 1.001, facecolor=REGION_COLOUR, alpha=0.3, lw=0)
    yerr = None if s is None else s[w]
    ax.errorbar(
        e[w],
        y[w],
        yerr=yerr,
        fmt="o",
        color=DATA_COLOUR,
        markersize=2.5,
        elinewidth=0.8,
        capsize=0,
        label=r"data $\pm1\sigma$" if yerr is not None else "data",
    )
    if m is not None:
        ax.plot(e[w], m[w], color=MODEL_COLOUR, label="KK reconstruction", zorder=3)
    size = region.get("deviation_percent")
    size_txt = f", {float(size):.2g} % of |ε|" if size is not None and np.isfinite(size) else ""
    ax.set_title(
        f"Zoom on the worst inconsistent region: ε{name} at {lo:.4g}–{hi:.4g} eV{size_txt}",
        fontsize=9,
    )
    ax.set_ylabel(rf"$\varepsilon_{name}$ (zoom)")
    ax.set_xlabel("Photon energy [eV] (linear)")
    ax.legend(loc="best")


def _kk_legend(ax, shaded: bool, log_note: str) -> None:
    handles, labels = ax.get_legend_handles_labels()
    if shaded:
        handles.append(Patch(facecolor=REGION_COLOUR, alpha=0.35))
        labels.append("inconsistent region")
    ax.legend(handles, labels, loc="best")


def plot_kk(
    path_stem,
    energy_ev,
    eps1,
    eps2,
    eps1_model,
    eps2_model,
    regions: Sequence[dict] = (),
    verdict: str = "",
    *,
    sigma1=None,
    sigma2=None,
    verdict_text: str = "",
) -> Path:
    """Measured eps1, eps2 against their Kramers–Kronig reconstruction, with a zoom.

    With at least one region a third panel zooms on the worst one (largest
    ``deviation_percent``, else largest ``severity``) on linear axes, data with their +-1
    sigma bars, so data and reconstruction can be told apart where they disagree. eps2 is on
    a log axis when its positive values span more than :data:`.axes.LOG_SPAN` (points with
    eps2 <= 0 are then not drawn, and the panel says how many).

    Parameters
    ----------
    path_stem : str or os.PathLike
        Output path without suffix.
    energy_ev : array
        Photon energy [eV] of the merged data.
    eps1, eps2 : array
        Measured (merged) dielectric function, dimensionless.
    eps1_model, eps2_model : array or None
        The KK-consistent reconstruction on the same axis; ``None`` leaves a panel without one.
    regions : list of dict
        Inconsistent regions with keys ``from_ev``, ``to_ev`` [eV], ``component``,
        ``severity`` (number or word; a higher one is shaded darker) and optionally
        ``deviation_percent`` [% of max(|eps|, 1)].
    verdict : str
        Shown in the title, coloured green for "consistent", red for "inconsistent".
    sigma1, sigma2 : array or None
        Noise of eps1 and eps2 [eps units]; drawn as error bars in the zoom.
    verdict_text : str
        The verdict phrase with its size (``KKTestResult.verdict_text``); replaces
        ``verdict`` in the title when given.

    Returns
    -------
    pathlib.Path
        The PNG file.
    """
    e = real_array(energy_ev, "energy_ev")
    y1, y2 = real_array(eps1, "eps1"), real_array(eps2, "eps2")
    m1 = None if eps1_model is None else real_array(eps1_model, "eps1_model")
    m2 = None if eps2_model is None else real_array(eps2_model, "eps2_model")
    s1 = None if sigma1 is None else real_array(sigma1, "sigma1")
    s2 = None if sigma2 is None else real_array(sigma2, "sigma2")
    same_length(e, eps1=y1, eps2=y2, eps1_model=m1, eps2_model=m2, sigma1=s1, sigma2=s2)
    worst = worst_region(regions)
    with matplotlib.rc_context(STYLE):
        fig = new_figure(7.6 if worst is not None else 5.6)
        if worst is not None:
            grid = fig.add_gridspec(3, 1, height_ratios=(1.0, 1.0, 0.9))
            axes = [fig.add_subplot(grid[0])]
            axes.append(fig.add_subplot(grid[1], sharex=axes[0]))
        else:
            axes = list(fig.subplots(2, 1, sharex=True))
        style = scatter_style(len(e))
        for ax, y, m, name in ((axes[0], y1, m1, "1"), (axes[1], y2, m2, "2")):
            ax.plot(e, y, color=DATA_COLOUR, alpha=0.7, label="data", **style)
            if m is not None:
                ax.plot(e, m, color=MODEL_COLOUR, label="KK reconstruction", zorder=3)
            ax.set_ylabel(rf"$\varepsilon_{name}$")
        log_note = eps2_log_axis(axes[1], y2)
        if not log_note:
            axes[1].axhline(0.0, color="#888888", linewidth=0.6, zorder=1)
        shaded = shade_regions(axes, regions)
        lo, hi = energy_limits(e)
        set_energy_axis(axes, lo, hi)
        _kk_legend(axes[0], shaded, log_note)
        v = str(verdict or "no verdict")
        sub = str(verdict_text) if verdict_text and verdict_text != v else ""
        axes[0].set_title(
            f"Kramers–Kronig test: {v}" + (f"\n{sub}" if sub else ""),
            color=verdict_colour(v),
            fontweight="bold",
            fontsize=10.0 if not sub else 9.0,
        )
        if worst is not None:
            p = component_panels(worst.get("component"))[0]
            y, m, s = ((y1, m1, s1), (y2, m2, s2))[p]
            _draw_zoom(fig.add_subplot(grid[2]), e, y, m, s, worst, str(p + 1))
        return save(fig, path_stem)


#: Largest scale of the residual axis, in multiples of the threshold: residuals beyond it are
#: drawn as triangles on the panel's edge (one linear scale, never a broken or log axis).
RESIDUAL_AXIS_CAP = 20.0


def _draw_residual_panel(ax, e, r, threshold: float, style: dict, name: str) -> int:
    """Residuals inside +-threshold in blue, beyond in red; returns the number off scale.

    The axis is linear, up to +-``RESIDUAL_AXIS_CAP`` x threshold; residuals beyond are drawn
    as triangles on the edge so the noise band stays readable next to a large fault.
    """
    ax.axhline(0.0, color="#888888", linewidth=0.6)
    for s in (-threshold, threshold):
        ax.axhline(s, color=FLAG_COLOUR, linestyle="--", linewidth=0.9)
    ax.set_ylabel(rf"$\Delta\varepsilon_{name}/\sigma$ (linear)")
    if r is None:
        ax.text(
            0.5,
            0.5,
            "not computed",
            transform=ax.transAxes,
            ha="center",
            va="center",
            color="#666666",
        )
        ax.set_ylim(-1.3 * threshold, 1.3 * threshold)
        return 0
    finite = np.isfinite(r)
    big = float(np.max(np.abs(r[finite]))) if np.any(finite) else 0.0
    lim = max(1.3 * threshold, min(1.1 * big, RESIDUAL_AXIS_CAP * threshold))
    ok = np.abs(r) <= threshold
    bad = finite & ~ok
    inside = np.abs(r) <= lim
    ax.plot(e[ok], r[ok], color=PALETTE[0], **style)
    ax.plot(e[bad & inside], r[bad & inside], color=FLAG_COLOUR, **style)
    off = bad & ~inside
    for sign, marker in ((1.0, "^"), (-1.0, "v")):
        sel = off & (np.sign(r) == sign)
        ax.plot(
            e[sel],
            np.full(sel.sum(), 0.97 * sign * lim),
            marker,
            color=FLAG_COLOUR,
            markersize=4,
            linestyle="none",
        )
    ax.set_ylim(-lim, lim)
    return int(off.sum())


def _residual_legend(threshold: float, with_regions: bool, off_scale: int, big: float):
    handles = [
        Line2D([], [], color=PALETTE[0], marker="o", linestyle="none", markersize=3),
        Line2D([], [], color=FLAG_COLOUR, marker="o", linestyle="none", markersize=3),
        Line2D([], [], color=FLAG_COLOUR, linestyle="--"),
    ]
    labels = [
        rf"$|r| \leq {threshold:g}\sigma$",
        rf"$|r| > {threshold:g}\sigma$",
        rf"$\pm{threshold:g}\sigma$",
    ]
    if off_scale:
        handles.append(Line2D([], [], color=FLAG_COLOUR, marker="^", linestyle="none"))
        labels.append(f"off scale ({off_scale}; largest |r| {big:.3g}σ)")
    if with_regions:
        handles.append(Patch(facecolor=REGION_COLOUR, alpha=0.35))
        labels.append("inconsistent region")
    return handles, labels


def plot_residuals(
    path_stem,
    energy_ev,
    resid1,
    resid2,
    threshold: float = 3.0,
    regions: Sequence[dict] = (),
) -> Path:
    """Normalised residuals (data - KK reconstruction) / sigma, with the +-threshold lines.

    The vertical axis is linear in units of sigma, up to +-:data:`RESIDUAL_AXIS_CAP` x
    threshold; residuals beyond that are drawn as triangles on the panel's edge and counted in
    the legend with the largest one, so the noise band and a large fault both stay readable on
    one labelled scale.

    Parameters
    ----------
    path_stem : str or os.PathLike
        Output path without suffix.
    energy_ev : array
        Photon energy [eV].
    resid1, resid2 : array or None
        Normalised residuals of eps1 and eps2 (dimensionless, in units of sigma).
    threshold : float
        Flagging threshold in sigma (drawn as dashed lines).
    regions : list of dict
        As in :func:`plot_kk`.

    Returns
    -------
    pathlib.Path
        The PNG file.
    """
    e = real_array(energy_ev, "energy_ev")
    r1 = None if resid1 is None else real_array(resid1, "resid1")
    r2 = None if resid2 is None else real_array(resid2, "resid2")
    same_length(e, resid1=r1, resid2=r2)
    threshold = float(threshold)
    if not threshold > 0:
        raise ValueError("threshold must be positive")
    with matplotlib.rc_context(STYLE):
        fig = new_figure(5.0)
        axes = fig.subplots(2, 1, sharex=True)
        style = scatter_style(len(e), markersize=2.2)
        off = sum(
            _draw_residual_panel(ax, e, r, threshold, style, name)
            for ax, r, name in ((axes[0], r1, "1"), (axes[1], r2, "2"))
        )
        shade_regions(axes, regions)
        lo, hi = energy_limits(e)
        set_energy_axis(list(axes), lo, hi)
        rr = [np.abs(r[np.isfinite(r)]) for r in (r1, r2) if r is not None]
        big = max((float(a.max()) for a in rr if a.size), default=0.0)
        handles, labels = _residual_legend(threshold, bool(regions), off, big)
        axes[0].legend(handles, labels, loc="best", ncols=2)
        axes[0].set_title("Normalised residuals of the Kramers–Kronig test")
        return save(fig, path_stem)
