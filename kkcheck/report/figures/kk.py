"""Figures of the Kramers–Kronig test: data against reconstruction, normalised residuals.

Horizontal axis photon energy [eV] (see :mod:`.axes`); eps in the exp(-i w t) convention.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import matplotlib
import matplotlib.ticker as mticker
import numpy as np
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from .axes import (
    energy_limits,
    num_label,
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

__all__ = ["plot_kk", "plot_residuals"]


def plot_kk(
    path_stem,
    energy_ev,
    eps1,
    eps2,
    eps1_model,
    eps2_model,
    regions: Sequence[dict] = (),
    verdict: str = "",
) -> Path:
    """Measured eps1, eps2 against their Kramers–Kronig reconstruction.

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
        Flagged regions with keys ``from_ev``, ``to_ev`` [eV], ``component`` and
        ``severity`` (number or word; a higher one is shaded darker).
    verdict : str
        Shown in the title, coloured green for "consistent", red for "inconsistent".

    Returns
    -------
    pathlib.Path
        The PNG file.
    """
    e = real_array(energy_ev, "energy_ev")
    y1 = real_array(eps1, "eps1")
    y2 = real_array(eps2, "eps2")
    m1 = None if eps1_model is None else real_array(eps1_model, "eps1_model")
    m2 = None if eps2_model is None else real_array(eps2_model, "eps2_model")
    same_length(e, eps1=y1, eps2=y2, eps1_model=m1, eps2_model=m2)
    with matplotlib.rc_context(STYLE):
        fig = new_figure(5.6)
        axes = fig.subplots(2, 1, sharex=True)
        style = scatter_style(len(e))
        for ax, y, m, name in ((axes[0], y1, m1, "1"), (axes[1], y2, m2, "2")):
            ax.plot(e, y, color=DATA_COLOUR, alpha=0.7, label="data", **style)
            if m is not None:
                ax.plot(e, m, color=MODEL_COLOUR, label="KK reconstruction", zorder=3)
            ax.set_ylabel(rf"$\varepsilon_{name}$")
        axes[1].axhline(0.0, color="#888888", linewidth=0.6, zorder=1)
        shaded = shade_regions(axes, regions)
        lo, hi = energy_limits(e)
        set_energy_axis(list(axes), lo, hi)
        handles, labels = axes[0].get_legend_handles_labels()
        if shaded:
            handles.append(Patch(facecolor=REGION_COLOUR, alpha=0.35))
            labels.append("flagged region")
        axes[0].legend(handles, labels, loc="best")
        v = str(verdict) if verdict else "no verdict"
        axes[0].set_title(f"Kramers–Kronig test: {v}", color=verdict_colour(v), fontweight="bold")
        return save(fig, path_stem)


def _symlog_residual_axis(ax, r, threshold: float, big: float) -> None:
    """Symmetric-log y axis, linear inside +-threshold, ticks at +-threshold and 10^k."""
    ax.set_yscale("symlog", linthresh=threshold, linscale=1.0)
    ax.yaxis.set_major_formatter(mticker.FuncFormatter(num_label))
    lo_r, hi_r = float(np.nanmin(r)), float(np.nanmax(r))
    ticks = [-threshold, 0.0, threshold]
    k0 = int(np.floor(np.log10(threshold))) + 1
    for k in range(k0, int(np.ceil(np.log10(big))) + 1):
        ticks += [10.0**k] if hi_r >= 10.0 ** (k - 1) else []
        ticks += [-(10.0**k)] if lo_r <= -(10.0 ** (k - 1)) else []
    ax.yaxis.set_major_locator(mticker.FixedLocator(sorted(ticks)))


def _draw_residual_panel(ax, e, r, threshold: float, style: dict, name: str) -> None:
    """Residuals inside +-threshold in blue, beyond in red; symlog above 10x threshold."""
    ax.axhline(0.0, color="#888888", linewidth=0.6)
    for s in (-threshold, threshold):
        ax.axhline(s, color=FLAG_COLOUR, linestyle="--", linewidth=0.9)
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
    else:
        ok = np.abs(r) <= threshold
        ax.plot(e[ok], r[ok], color=PALETTE[0], **style)
        ax.plot(e[~ok], r[~ok], color=FLAG_COLOUR, **style)
        big = np.nanmax(np.abs(r)) if np.any(np.isfinite(r)) else 0.0
        if big > 10 * threshold:
            _symlog_residual_axis(ax, r, threshold, big)
        else:
            lim = max(1.3 * threshold, 1.1 * big)
            ax.set_ylim(-lim, lim)
    ax.set_ylabel(rf"$\Delta\varepsilon_{name}/\sigma$")


def _residual_legend(threshold: float, with_regions: bool) -> tuple[list, list]:
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
    if with_regions:
        handles.append(Patch(facecolor=REGION_COLOUR, alpha=0.35))
        labels.append("flagged region")
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

    When a residual exceeds 10x the threshold the vertical axis becomes symmetric-log, linear
    inside +-threshold, so both the noise band and large faults stay readable.

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
        for ax, r, name in ((axes[0], r1, "1"), (axes[1], r2, "2")):
            _draw_residual_panel(ax, e, r, threshold, style, name)
        shade_regions(axes, regions)
        lo, hi = energy_limits(e)
        set_energy_axis(list(axes), lo, hi)
        handles, labels = _residual_legend(threshold, bool(regions))
        axes[0].legend(handles, labels, loc="best", ncols=2)
        axes[0].set_title("Normalised residuals of the Kramers–Kronig test")
        return save(fig, path_stem)
