"""Figures of the data: the sources as read, and the repaired spectrum.

Horizontal axis photon energy [eV] (see :mod:`.axes`); eps in the exp(-i w t) convention.
"""

from __future__ import annotations

from collections.abc import Sequence
from pathlib import Path

import matplotlib
import matplotlib.transforms as mtransforms
import numpy as np
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from .axes import (
    component_panels,
    energy_limits,
    eps2_log_axis,
    linestyle_for,
    set_energy_axis,
    shade_spans,
)
from .style import (
    FLAG_COLOUR,
    GAP_COLOUR,
    PALETTE,
    STYLE,
    complex_array,
    new_figure,
    real_array,
    same_length,
    save,
)

__all__ = ["plot_sources", "plot_repaired", "CHANGE_MARKERS"]


def _draw_sources(ax1, ax2, sources) -> tuple[dict, list]:
    """Each source's eps1 and eps2 in its palette colour; (by name, energy arrays)."""
    by_name = {}
    all_e = []
    for i, src in enumerate(sources):
        e = real_array(src["energy_ev"], "energy_ev")
        y1 = real_array(src["eps1"], "eps1")
        y2 = real_array(src["eps2"], "eps2")
        same_length(e, eps1=y1, eps2=y2)
        order = np.argsort(e)
        e, y1, y2 = e[order], y1[order], y2[order]
        by_name[str(src["name"])] = (e, y1, y2)
        all_e.append(e)
        colour = PALETTE[i % len(PALETTE)]
        style = linestyle_for(len(e))
        label = str(src["name"])
        ax1.plot(e, y1, color=colour, label=label, **style)
        ax2.plot(e, y2, color=colour, label=label, **style)
    return by_name, all_e


def _draw_point_flag(ax, p: int, e0: float, kind: str, src) -> str:
    """A spike (x) or other flag (open triangle) on the source's value; returns its kind."""
    if src is not None and src[0].size:
        e, y1, y2 = src
        y = np.interp(e0, e, y1 if p == 0 else y2)
        trans = ax.transData
    else:  # unknown source: mark on the lower edge of the panel
        y = 0.03
        trans = mtransforms.blended_transform_factory(ax.transData, ax.transAxes)
    if kind == "spike":
        ax.plot([e0], [y], "x", color=FLAG_COLOUR, markersize=7, mew=1.8, transform=trans, zorder=5)
        return "spike"
    ax.plot([e0], [y], "v", color=FLAG_COLOUR, markersize=6, mfc="none", transform=trans, zorder=5)
    return "other"


def _draw_flags(panels, outliers, by_name) -> set:
    """Every flag on its component's panel; returns the kinds drawn."""
    kinds_seen = set()
    for o in outliers:
        e0 = float(o["energy_ev"])
        kind = str(o.get("kind", "")).lower()
        src = by_name.get(str(o.get("source", "")))
        for p in component_panels(o.get("component")):
            ax = panels[p]
            if kind == "step":
                ax.axvline(e0, color=FLAG_COLOUR, linestyle="--", linewidth=1.0, zorder=4)
                kinds_seen.add("step")
                continue
            kinds_seen.add(_draw_point_flag(ax, p, e0, kind, src))
    return kinds_seen


def _flag_legend(handles: list, labels: list, kinds_seen: set, gap_drawn: bool) -> None:
    """Append legend entries for the flag kinds drawn and for the gaps."""
    if "spike" in kinds_seen:
        handles.append(Line2D([], [], color=FLAG_COLOUR, marker="x", linestyle="none", mew=1.8))
        labels.append("spike")
    if "step" in kinds_seen:
        handles.append(Line2D([], [], color=FLAG_COLOUR, linestyle="--"))
        labels.append("step")
    if "other" in kinds_seen:
        handles.append(Line2D([], [], color=FLAG_COLOUR, marker="v", mfc="none", linestyle="none"))
        labels.append("other flag")
    if gap_drawn:
        handles.append(Patch(facecolor=GAP_COLOUR, alpha=0.25, hatch="///"))
        labels.append("gap (no data)")


def plot_sources(
    path_stem,
    sources: Sequence[dict],
    outliers: Sequence[dict] = (),
    gaps_ev: Sequence[Sequence[float]] = (),
) -> Path:
    """Every source's eps1 and eps2 overlaid, with its flags and the gaps between sources.

    Parameters
    ----------
    path_stem : str or os.PathLike
        Output path without suffix; ``.png`` and ``.pdf`` are written.
    sources : list of dict
        One dict per source with keys ``name`` (str), ``energy_ev`` (array [eV]), ``eps1`` and
        ``eps2`` (arrays, dimensionless), all arrays of equal length.
    outliers : list of dict
        Flags with keys ``energy_ev`` [eV], ``source`` (a source name), ``component``
        (``"eps1"``, ``"eps2"`` or anything else for both) and ``kind``. ``"spike"`` is drawn
        as an x on the source's value, ``"step"`` as a dashed vertical line, other kinds as a
        triangle.
    gaps_ev : list of (lo, hi)
        Energy intervals [eV] that no source covers; shaded grey.

    Returns
    -------
    pathlib.Path
        The PNG file.
    """
    if not sources:
        raise ValueError("plot_sources needs at least one source")
    with matplotlib.rc_context(STYLE):
        fig = new_figure(5.6)
        ax1, ax2 = fig.subplots(2, 1, sharex=True)
        by_name, all_e = _draw_sources(ax1, ax2, sources)
        gap_drawn = False
        for ax in (ax1, ax2):
            gap_drawn |= shade_spans(ax, gaps_ev, GAP_COLOUR, 0.25, hatch="///")
        kinds_seen = _draw_flags((ax1, ax2), outliers, by_name)
        ax1.set_ylabel(r"$\varepsilon_1$ (real part)")
        ax2.set_ylabel(r"$\varepsilon_2$ (imaginary part)")
        if not eps2_log_axis(ax2, np.concatenate([v[2] for v in by_name.values()])):
            ax2.axhline(0.0, color="#888888", linewidth=0.6, zorder=1)
        lo, hi = energy_limits(*all_e)
        set_energy_axis([ax1, ax2], lo, hi)
        handles, labels = ax1.get_legend_handles_labels()
        _flag_legend(handles, labels, kinds_seen, gap_drawn)
        ax1.legend(handles, labels, loc="best", ncols=2 if len(labels) > 4 else 1)
        ax1.set_title(f"Input sources ({len(sources)}) with flagged points")
        return save(fig, path_stem)


#: Markers of the repair's kinds of change (label, marker, face colour, edge colour).
CHANGE_MARKERS = {
    "replaced": ("replaced by the KK prediction", "o", "none", FLAG_COLOUR),
    "filled": ("filled inside a gap (no data)", "s", "none", PALETTE[2]),
}


def _draw_repaired_panel(ax, e, y, s, raw_e, raw_y, kinds: dict, name: str) -> None:
    """One panel: measured data (grey dots), the +-1 sigma band, the repair, the changes.

    ``kinds`` maps ``"replaced"``/``"filled"`` to a boolean mask on ``e``; each kind has its
    own marker and legend entry, with its number of points.
    """
    if raw_y is not None:
        ax.plot(
            raw_e, raw_y, ".", color="#8A8A8A", markersize=3, label="measured (merged)", zorder=2
        )
    if s is not None:
        ax.fill_between(
            e,
            y - s,
            y + s,
            color=PALETTE[0],
            alpha=0.25,
            linewidth=0,
            label=r"repair $\pm 1\sigma$",
            zorder=1,
        )
    ax.plot(e, y, color=PALETTE[0], label="repaired", zorder=3)
    for kind, mask in kinds.items():
        n = int(mask.sum())
        if not n:
            continue
        label, marker, face, edge = CHANGE_MARKERS[kind]
        ax.plot(
            e[mask],
            y[mask],
            marker,
            mfc=face,
            mec=edge,
            mew=1.1,
            markersize=4.5,
            linestyle="none",
            label=f"{label} ({n} points)",
            zorder=4,
        )
    ax.set_ylabel(rf"$\varepsilon_{name}$")


def _draw_band_panel(ax, e, s1, s2) -> None:
    """The +-1 sigma half-width of eps1 and eps2 (log axis when it spans a factor 3)."""
    for s, name, colour in ((s1, "1", PALETTE[0]), (s2, "2", PALETTE[1])):
        if s is not None:
            ax.plot(e, s, color=colour, label=rf"$\sigma(\varepsilon_{name})$")
    pos = np.concatenate([a[np.isfinite(a) & (a > 0)] for a in (s1, s2) if a is not None])
    if pos.size and pos.max() > 3 * pos.min():
        ax.set_yscale("log")
    ax.set_ylabel(r"band half-width $\sigma$")
    ax.legend(loc="best", ncols=2)


def plot_repaired(
    path_stem,
    energy_ev,
    eps,
    sigma1=None,
    sigma2=None,
    changed_mask=None,
    raw_energy_ev=None,
    raw_eps=None,
    *,
    filled_mask=None,
) -> Path:
    """The repaired spectrum with its +-1 sigma band, the measured data, and the changes.

    Replaced points (red circles) and points filled inside a gap (green squares) have their
    own markers and legend entries, each with its number of points (a point counts once
    whether one or both of eps1, eps2 changed). With a sigma, a bottom panel shows the band's
    half-width on a log axis, since at full scale the band is usually thinner than the line.
    eps2 goes on a log axis when it spans more than :data:`.axes.LOG_SPAN`.

    Parameters
    ----------
    path_stem : str or os.PathLike
        Output path without suffix.
    energy_ev : array
        Photon energy [eV] of the repaired grid.
    eps : complex array
        Repaired dielectric function eps1 + i eps2.
    sigma1, sigma2 : array or None
        Standard uncertainty of eps1 and eps2 of the repair (dimensionless).
    changed_mask : bool array or None
        True where the repair replaced a measured value (or, without ``filled_mask``, any
        changed point: all are then drawn as "replaced").
    raw_energy_ev, raw_eps : array or None
        The merged data before repair [eV], complex; drawn as grey dots.
    filled_mask : bool array or None
        True where the repair added a point inside a gap; drawn as squares.

    Returns
    -------
    pathlib.Path
        The PNG file.
    """
    e = real_array(energy_ev, "energy_ev")
    z = complex_array(eps, "eps")
    s1 = None if sigma1 is None else real_array(sigma1, "sigma1")
    s2 = None if sigma2 is None else real_array(sigma2, "sigma2")
    mask = None if changed_mask is None else np.asarray(changed_mask, dtype=bool)
    filled = None if filled_mask is None else np.asarray(filled_mask, dtype=bool)
    same_length(e, eps=z, sigma1=s1, sigma2=s2, changed_mask=mask, filled_mask=filled)
    re_ = None if raw_energy_ev is None else real_array(raw_energy_ev, "raw_energy_ev")
    rz = None if raw_eps is None else complex_array(raw_eps, "raw_eps")
    if (re_ is None) != (rz is None):
        raise ValueError("raw_energy_ev and raw_eps must be given together")
    if re_ is not None:
        same_length(re_, raw_eps=rz)
    kinds = {}
    if mask is not None:
        kinds["replaced"] = mask & ~filled if filled is not None else mask
    if filled is not None:
        kinds["filled"] = filled
    band = s1 is not None or s2 is not None
    with matplotlib.rc_context(STYLE):
        fig = new_figure(7.0 if band else 5.6)
        axes = list(
            fig.subplots(
                3 if band else 2, 1, sharex=True, height_ratios=(1.0, 1.0, 0.6) if band else None
            )
        )
        for ax, y, s, ry, name in (
            (axes[0], z.real, s1, None if rz is None else rz.real, "1"),
            (axes[1], z.imag, s2, None if rz is None else rz.imag, "2"),
        ):
            _draw_repaired_panel(ax, e, y, s, re_, ry, kinds, name)
        if not eps2_log_axis(axes[1], z.imag):
            axes[1].axhline(0.0, color="#888888", linewidth=0.6, zorder=0)
        if band:
            _draw_band_panel(axes[2], e, s1, s2)
        lo, hi = energy_limits(e, re_)
        set_energy_axis(axes, lo, hi)
        axes[0].legend(loc="best")
        axes[0].set_title("Repaired (KK-consistent) spectrum with uncertainty")
        return save(fig, path_stem)
