"""Figure of the MSKK view: measured eps1 against eps1 rebuilt from eps2, pinned at anchors.

Top panel: measured eps1 with its +-2 sigma band, the multiply subtractive KK (MSKK)
reconstruction with its +-2 sigma band, the anchors (filled diamonds) and the held-out
anchor (open diamond, with the value the other anchors predict there). Bottom panel: the
residual z = (eps1_measured - eps1_MSKK) / sqrt(sigma_eps1^2 + sigma_MSKK^2) on a linear
scale with the +-3 lines; residuals beyond +-:data:`.kk.RESIDUAL_AXIS_CAP` x 3 are drawn as
triangles on the panel's edge. Horizontal axis photon energy [eV], wavelength [nm] on top
(:mod:`.axes`). Plain arrays in (the view's fields, :class:`kkcheck.kk.mskk.MSKKView`).

References
----------
.. [1] K. F. Palmer, M. Z. Williams, B. A. Budde, "Multiply subtractive Kramers–Kronig
   analysis of optical data," Appl. Opt. 37, 2660 (1998) (from memory); see
   docs/references.md [Palmer1998].
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import matplotlib
import numpy as np
from matplotlib.lines import Line2D

from .axes import energy_limits, scatter_style, set_energy_axis, shade_spans
from .kk import RESIDUAL_AXIS_CAP
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

__all__ = ["plot_mskk", "MSKK_Z_LIMIT", "ANCHOR_LABEL", "HOLDOUT_LABEL"]

#: Residual lines of the bottom panel [combined sigma] (the view's |z| > 3 rule).
MSKK_Z_LIMIT = 3.0
#: Legend label of the anchor markers (tests and readers find them by it).
ANCHOR_LABEL = "anchors (ε₁ pinned to the measured value)"
#: Start of the legend label of the held-out anchor.
HOLDOUT_LABEL = "held-out anchor"

_ANCHOR_COLOUR = PALETTE[2]
_BAND_SIGMA = 2.0


def _holdout_label(z: float) -> str:
    if np.isfinite(z):
        return f"{HOLDOUT_LABEL} (measured; predicted {abs(z):.1f}σ off)"
    return f"{HOLDOUT_LABEL} (measured)"


def _draw_values(ax, e, y1, s1, m, sm, style) -> None:
    """Measured eps1 and MSKK eps1, each with its +-2 sigma band."""
    k = _BAND_SIGMA
    ax.fill_between(e, y1 - k * s1, y1 + k * s1, color=DATA_COLOUR, alpha=0.18, lw=0)
    ax.plot(e, y1, color=DATA_COLOUR, alpha=0.7, label=rf"measured ε₁ (band ±{k:g}σ)", **style)
    ax.fill_between(e, m - k * sm, m + k * sm, color=MODEL_COLOUR, alpha=0.3, lw=0)
    ax.plot(e, m, color=MODEL_COLOUR, zorder=3, label=rf"MSKK ε₁ from ε₂ (band ±{k:g}σ)")
    ax.set_ylabel(r"$\varepsilon_1$")


def _draw_anchors(ax, anchors_ev, anchors_eps1, e, y1, holdout) -> None:
    """Anchors as filled diamonds (one marker each); the held-out one open, prediction x."""
    ax.plot(
        anchors_ev,
        anchors_eps1,
        "D",
        color=_ANCHOR_COLOUR,
        markeredgecolor="black",
        markersize=6,
        linestyle="none",
        zorder=5,
        label=ANCHOR_LABEL,
    )
    h_ev, h_res, h_z = holdout
    if not np.isfinite(h_ev):
        return
    h_y = float(np.interp(h_ev, e, y1))
    ax.plot(
        [h_ev],
        [h_y],
        "D",
        markerfacecolor="none",
        markeredgecolor=_ANCHOR_COLOUR,
        markeredgewidth=1.6,
        markersize=8,
        linestyle="none",
        zorder=5,
        label=_holdout_label(h_z),
    )
    if np.isfinite(h_res):
        ax.plot(
            [h_ev],
            [h_y - h_res],
            "x",
            color=FLAG_COLOUR,
            markersize=7,
            linestyle="none",
            zorder=6,
            label="held-out anchor: value the others predict",
        )


def _draw_z(ax, e, z, style) -> int:
    """z inside +-limit in blue, beyond in red, off-scale ones as edge triangles."""
    t = MSKK_Z_LIMIT
    ax.axhline(0.0, color="#888888", linewidth=0.6)
    for s in (-t, t):
        ax.axhline(s, color=FLAG_COLOUR, linestyle="--", linewidth=0.9)
    finite = np.isfinite(z)
    big = float(np.max(np.abs(z[finite]))) if np.any(finite) else 0.0
    lim = max(1.3 * t, min(1.1 * big, RESIDUAL_AXIS_CAP * t))
    ok = finite & (np.abs(z) <= t)
    bad = finite & ~ok & (np.abs(z) <= lim)
    ax.plot(e[ok], z[ok], color=PALETTE[0], label=rf"$|z| \leq {t:g}$", **style)
    ax.plot(e[bad], z[bad], color=FLAG_COLOUR, label=rf"$|z| > {t:g}$", **style)
    off = finite & (np.abs(z) > lim)
    for sign, marker in ((1.0, "^"), (-1.0, "v")):
        sel = off & (np.sign(z) == sign)
        ax.plot(
            e[sel],
            np.full(int(sel.sum()), 0.97 * sign * lim),
            marker,
            color=FLAG_COLOUR,
            markersize=4,
            linestyle="none",
            clip_on=False,
        )
    ax.set_ylim(-lim, lim)
    ax.set_ylabel(r"$z$ [combined σ] (linear)")
    return int(off.sum())


def plot_mskk(
    path_stem,
    energy_ev,
    eps1_measured,
    sigma_eps1,
    eps1_mskk,
    sigma_mskk,
    anchors_ev: Sequence[float],
    anchors_eps1: Sequence[float],
    *,
    holdout_ev: float = np.nan,
    holdout_residual: float = np.nan,
    holdout_z: float = np.nan,
    regions: Sequence[tuple[float, float]] = (),
) -> Path:
    """Measured eps1 against its MSKK reconstruction from eps2, anchors marked, residuals.

    Parameters
    ----------
    path_stem : str or os.PathLike
        Output path without suffix.
    energy_ev : array
        Photon energy [eV] of the view (interior points of the analysed window).
    eps1_measured, sigma_eps1 : array
        Measured eps1 and its noise (dimensionless).
    eps1_mskk, sigma_mskk : array
        MSKK eps1 and its propagated uncertainty on the same axis.
    anchors_ev, anchors_eps1 : sequence of float
        The anchors the reconstruction is pinned at [eV] and the measured eps1 there.
    holdout_ev : float
        The anchor left out and predicted by the others [eV] (nan: none; nothing drawn).
    holdout_residual, holdout_z : float
        Measured minus predicted eps1 at the held-out anchor, and that over its combined
        sigma; the prediction is drawn as an x, |z| is quoted in the legend.
    regions : sequence of (float, float)
        Energy runs [eV] where the running rms of z exceeds 3; shaded on both panels.

    Returns
    -------
    pathlib.Path
        The PNG file (a PDF is written next to it).

    Notes
    -----
    z = (eps1_measured - eps1_MSKK) / sqrt(sigma_eps1^2 + sigma_MSKK^2), computed here from
    the arrays given (0 at the anchors, where the reconstruction is pinned).

    References
    ----------
    .. [1] K. F. Palmer, M. Z. Williams, B. A. Budde, Appl. Opt. 37, 2660 (1998) (from
       memory); see docs/references.md [Palmer1998].
    """
    e = real_array(energy_ev, "energy_ev")
    y1, s1 = real_array(eps1_measured, "eps1_measured"), real_array(sigma_eps1, "sigma_eps1")
    m, sm = real_array(eps1_mskk, "eps1_mskk"), real_array(sigma_mskk, "sigma_mskk")
    same_length(e, eps1_measured=y1, sigma_eps1=s1, eps1_mskk=m, sigma_mskk=sm)
    a_ev, a_y = real_array(anchors_ev, "anchors_ev"), real_array(anchors_eps1, "anchors_eps1")
    same_length(a_ev, anchors_eps1=a_y)
    with np.errstate(divide="ignore", invalid="ignore"):
        z = (y1 - m) / np.hypot(s1, sm)
    holdout = (float(holdout_ev), float(holdout_residual), float(holdout_z))
    with matplotlib.rc_context(STYLE):
        fig = new_figure(5.6)
        axes = list(fig.subplots(2, 1, sharex=True, height_ratios=(1.6, 1.0)))
        style = scatter_style(len(e), markersize=2.2)
        _draw_values(axes[0], e, y1, s1, m, sm, style)
        _draw_anchors(axes[0], a_ev, a_y, e, y1, holdout)
        off = _draw_z(axes[1], e, z, style)
        for ax in axes:
            for x in a_ev:
                ax.axvline(x, color=_ANCHOR_COLOUR, linestyle=":", linewidth=0.8, zorder=1)
        shade_spans(axes[0], regions, REGION_COLOUR, 0.3, label="MSKK off (rms z > 3)")
        shade_spans(axes[1], regions, REGION_COLOUR, 0.3)
        lo, hi = energy_limits(e)
        set_energy_axis(axes, lo, hi)
        axes[0].legend(loc="best")
        handles, labels = axes[1].get_legend_handles_labels()
        if off:
            labels.append(f"off scale ({off}; largest |z| {np.nanmax(np.abs(z)):.3g})")
            handles.append(Line2D([], [], color=FLAG_COLOUR, marker="^", linestyle="none"))
        axes[1].legend(handles, labels, loc="best", ncols=3 if off else 2)
        held = " and 1 held out" if np.isfinite(holdout[0]) else ""
        axes[0].set_title(
            f"Multiply subtractive KK: ε₁ from the measured ε₂, {len(a_ev)} anchors{held}",
            fontsize=9.5,
        )
        return save(fig, path_stem)
