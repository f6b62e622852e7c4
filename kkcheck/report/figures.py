"""Report figures: one function per figure, plain values in, PNG and PDF files out.

Every function draws on its own :class:`matplotlib.figure.Figure` (never ``pyplot``, so no
global figure registry is touched, and the caller's backend is left alone: saving by file
format uses matplotlib's Agg and PDF renderers directly), writes ``<stem>.png`` at
:data:`FIGURE_DPI` and ``<stem>.pdf`` next to it, and returns the PNG path. Style settings
are applied inside :func:`matplotlib.rc_context` and restored on return.

Conventions (see DESIGN.md): the horizontal axis is photon energy [eV]; plots whose energy
range spans more than one decade use a logarithmic axis; the top axis of energy plots shows
the vacuum wavelength [nm] = 1239.841984 / E[eV]. eps = eps1 + i eps2 in the exp(-i w t)
convention, so a passive medium has eps2 >= 0.

Public functions
----------------
plot_sources, plot_kk, plot_residuals, plot_repaired, plot_fit, plot_passivity, plot_slab

Colours come from the Okabe-Ito palette, which stays distinguishable under the common forms
of colour blindness.

References
----------
.. [1] M. Okabe, K. Ito, "Color Universal Design (CUD): how to make figures and presentations
   that are friendly to colorblind people," J*Fly (2008); palette as tabulated in B. Wong,
   "Points of view: Color blindness," Nat. Methods 8, 441 (2011).
"""

from __future__ import annotations

import os
from collections.abc import Sequence
from pathlib import Path

import matplotlib
import matplotlib.ticker as mticker
import matplotlib.transforms as mtransforms
import numpy as np
from matplotlib.figure import Figure
from matplotlib.lines import Line2D
from matplotlib.patches import Patch

from ..units import HC_EV_NM

__all__ = [
    "FIGURE_DPI",
    "plot_sources",
    "plot_kk",
    "plot_residuals",
    "plot_repaired",
    "plot_fit",
    "plot_passivity",
    "plot_slab",
]

#: Resolution of the PNG files [dots per inch]; PNG size in pixels = figure size [in] * dpi.
FIGURE_DPI = 130

#: Okabe-Ito palette (Wong 2011), in the order sources are coloured.
PALETTE = (
    "#0072B2",  # blue
    "#E69F00",  # orange
    "#009E73",  # bluish green
    "#CC79A7",  # reddish purple
    "#56B4E9",  # sky blue
    "#D55E00",  # vermillion
    "#F0E442",  # yellow
    "#000000",  # black
)
DATA_COLOUR = "#222222"
MODEL_COLOUR = "#D55E00"
FLAG_COLOUR = "#C00000"
REGION_COLOUR = "#E69F00"
GAP_COLOUR = "#9A9A9A"
OK_COLOUR = "#007A4D"

_STYLE = {
    "font.size": 9.0,
    "axes.titlesize": 10.0,
    "axes.labelsize": 9.0,
    "legend.fontsize": 8.0,
    "xtick.labelsize": 8.0,
    "ytick.labelsize": 8.0,
    "axes.grid": True,
    "grid.alpha": 0.25,
    "grid.linewidth": 0.6,
    "lines.linewidth": 1.4,
    "lines.markersize": 3.0,
    "legend.frameon": True,
    "legend.framealpha": 0.85,
    "legend.edgecolor": "#CCCCCC",
    "pdf.fonttype": 42,  # embed TrueType so text stays text in the PDF
    "svg.fonttype": "none",
}

_WIDTH_IN = 7.0  # fits one column of an A4/Letter page at 100 %


# ---------------------------------------------------------------------------------------------
# helpers
# ---------------------------------------------------------------------------------------------


def _stem(path_stem) -> Path:
    """``path_stem`` without a trailing .png/.pdf, parent directory created."""
    p = Path(os.fspath(path_stem))
    if p.suffix.lower() in (".png", ".pdf"):
        p = p.with_suffix("")
    p.parent.mkdir(parents=True, exist_ok=True)
    return p


def _new_figure(height_in: float, width_in: float = _WIDTH_IN) -> Figure:
    return Figure(figsize=(width_in, height_in), dpi=FIGURE_DPI, layout="constrained")


def _save(fig: Figure, path_stem) -> Path:
    stem = _stem(path_stem)
    png = Path(str(stem) + ".png")
    pdf = Path(str(stem) + ".pdf")
    # No bbox_inches="tight": the PNG keeps exactly figsize * dpi pixels; the constrained
    # layout engine keeps labels inside the canvas.
    fig.savefig(png, dpi=FIGURE_DPI, format="png", metadata={"Software": None})
    # no creation date: the same data give byte-identical files (diffable example reports)
    fig.savefig(pdf, format="pdf", metadata={"Creator": "kkcheck", "CreationDate": None})
    return png


def _arr(x, name: str) -> np.ndarray:
    a = np.asarray(x, dtype=float)
    if a.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {a.shape}")
    return a


def _carr(x, name: str) -> np.ndarray:
    a = np.asarray(x)
    if a.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {a.shape}")
    return a.astype(complex)


def _same_length(ref: np.ndarray, **others) -> None:
    for name, a in others.items():
        if a is not None and len(a) != len(ref):
            raise ValueError(f"{name} has {len(a)} points, the energy axis has {len(ref)}")


def _energy_limits(*arrays) -> tuple[float, float]:
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


def _uses_log(lo: float, hi: float) -> bool:
    return lo > 0 and hi / lo > 10.0


def _set_energy_axis(axes, lo: float, hi: float, *, wavelength_axis: bool = True) -> None:
    """Shared x scaling for a column of panels; wavelength [nm] on top of the first."""
    log = _uses_log(lo, hi)
    for ax in axes:
        if log:
            ax.set_xscale("log")
            ax.set_xlim(lo / 1.08, hi * 1.08)
            _plain_log_ticks(ax.xaxis, lo, hi)
        else:
            pad = 0.02 * (hi - lo)
            ax.set_xlim(max(lo - pad, lo / 2), hi + pad)
    axes[-1].set_xlabel("Photon energy [eV]")
    for ax in axes[:-1]:
        ax.tick_params(labelbottom=False)
    if wavelength_axis:
        _add_wavelength_axis(axes[0])


def _plain_log_ticks(axis, lo: float, hi: float) -> None:
    """Log-axis ticks labelled as plain numbers (0.5, 1, 2, 5, ...) instead of 10^x."""
    decades = np.log10(hi / lo) if lo > 0 and hi > lo else 1.0
    subs = (1.0, 2.0, 5.0) if decades <= 2.5 else (1.0,)
    axis.set_major_locator(mticker.LogLocator(base=10.0, subs=subs))
    axis.set_major_formatter(mticker.FuncFormatter(_num_label))
    axis.set_minor_formatter(mticker.NullFormatter())


def _num_label(v: float, _pos=None) -> str:
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


def _symlog_ticks(linthresh: float, bottom: float, top: float) -> list[float]:
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


def _ev_nm(x):
    x = np.asarray(x, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        return np.where(x > 0, HC_EV_NM / np.where(x > 0, x, 1.0), np.inf)


def _add_wavelength_axis(ax) -> None:
    sec = ax.secondary_xaxis("top", functions=(_ev_nm, _ev_nm))
    if ax.get_xscale() == "log":
        lo, hi = sorted(float(v) for v in _ev_nm(np.array(ax.get_xlim())))
        _plain_log_ticks(sec.xaxis, lo, hi)
    sec.set_xlabel("Wavelength [nm]")
    sec.tick_params(labelsize=8)
    sec.grid(False)


def _shade_spans(ax, spans, colour, alpha, label=None, hatch=None) -> bool:
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


def _component_panels(component: str | None) -> tuple[int, ...]:
    """Which panels (0 = eps1, 1 = eps2) a flag/region on ``component`` belongs to."""
    c = (component or "").strip().lower()
    if c in ("eps1", "e1", "n", "real", "re"):
        return (0,)
    if c in ("eps2", "e2", "k", "imag", "im"):
        return (1,)
    return (0, 1)


def _severity_alpha(severity) -> float:
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


def _verdict_colour(verdict: str) -> str:
    v = (verdict or "").strip().lower()
    if v == "consistent" or v.startswith(("pass", "ok", "consistent")):
        return OK_COLOUR
    if v.startswith(("inconsistent", "fail")):
        return FLAG_COLOUR
    return DATA_COLOUR


def _linestyle_for(n_points: int) -> dict:
    """Markers on sparse data, plain lines on dense data."""
    if n_points <= 60:
        return {"marker": "o", "markersize": 3.0, "linewidth": 1.0}
    return {"marker": None, "linewidth": 1.3}


# ---------------------------------------------------------------------------------------------
# figures
# ---------------------------------------------------------------------------------------------


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
    with matplotlib.rc_context(_STYLE):
        fig = _new_figure(5.6)
        ax1, ax2 = fig.subplots(2, 1, sharex=True)
        by_name = {}
        all_e = []
        for i, src in enumerate(sources):
            e = _arr(src["energy_ev"], "energy_ev")
            y1 = _arr(src["eps1"], "eps1")
            y2 = _arr(src["eps2"], "eps2")
            _same_length(e, eps1=y1, eps2=y2)
            order = np.argsort(e)
            e, y1, y2 = e[order], y1[order], y2[order]
            by_name[str(src["name"])] = (e, y1, y2)
            all_e.append(e)
            colour = PALETTE[i % len(PALETTE)]
            style = _linestyle_for(len(e))
            label = str(src["name"])
            ax1.plot(e, y1, color=colour, label=label, **style)
            ax2.plot(e, y2, color=colour, label=label, **style)

        gap_drawn = False
        for ax in (ax1, ax2):
            gap_drawn |= _shade_spans(ax, gaps_ev, GAP_COLOUR, 0.25, hatch="///")

        kinds_seen = set()
        panels = (ax1, ax2)
        for o in outliers:
            e0 = float(o["energy_ev"])
            kind = str(o.get("kind", "")).lower()
            src = by_name.get(str(o.get("source", "")))
            for p in _component_panels(o.get("component")):
                ax = panels[p]
                if kind == "step":
                    ax.axvline(e0, color=FLAG_COLOUR, linestyle="--", linewidth=1.0, zorder=4)
                    kinds_seen.add("step")
                    continue
                if src is not None and src[0].size:
                    e, y1, y2 = src
                    y = np.interp(e0, e, y1 if p == 0 else y2)
                    trans = ax.transData
                else:  # unknown source: mark on the lower edge of the panel
                    y = 0.03
                    trans = mtransforms.blended_transform_factory(ax.transData, ax.transAxes)
                if kind == "spike":
                    ax.plot(
                        [e0],
                        [y],
                        "x",
                        color=FLAG_COLOUR,
                        markersize=7,
                        mew=1.8,
                        transform=trans,
                        zorder=5,
                    )
                    kinds_seen.add("spike")
                else:
                    ax.plot(
                        [e0],
                        [y],
                        "v",
                        color=FLAG_COLOUR,
                        markersize=6,
                        mfc="none",
                        transform=trans,
                        zorder=5,
                    )
                    kinds_seen.add("other")

        ax1.set_ylabel(r"$\varepsilon_1$ (real part)")
        ax2.set_ylabel(r"$\varepsilon_2$ (imaginary part)")
        ax2.axhline(0.0, color="#888888", linewidth=0.6, zorder=1)
        lo, hi = _energy_limits(*all_e)
        _set_energy_axis([ax1, ax2], lo, hi)

        handles, labels = ax1.get_legend_handles_labels()
        if "spike" in kinds_seen:
            handles.append(Line2D([], [], color=FLAG_COLOUR, marker="x", linestyle="none", mew=1.8))
            labels.append("spike")
        if "step" in kinds_seen:
            handles.append(Line2D([], [], color=FLAG_COLOUR, linestyle="--"))
            labels.append("step")
        if "other" in kinds_seen:
            handles.append(
                Line2D([], [], color=FLAG_COLOUR, marker="v", mfc="none", linestyle="none")
            )
            labels.append("other flag")
        if gap_drawn:
            handles.append(Patch(facecolor=GAP_COLOUR, alpha=0.25, hatch="///"))
            labels.append("gap (no data)")
        ax1.legend(handles, labels, loc="best", ncols=2 if len(labels) > 4 else 1)
        ax1.set_title(f"Input sources ({len(sources)}) with flagged points")
        return _save(fig, path_stem)


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
    e = _arr(energy_ev, "energy_ev")
    y1 = _arr(eps1, "eps1")
    y2 = _arr(eps2, "eps2")
    m1 = None if eps1_model is None else _arr(eps1_model, "eps1_model")
    m2 = None if eps2_model is None else _arr(eps2_model, "eps2_model")
    _same_length(e, eps1=y1, eps2=y2, eps1_model=m1, eps2_model=m2)
    with matplotlib.rc_context(_STYLE):
        fig = _new_figure(5.6)
        axes = fig.subplots(2, 1, sharex=True)
        style = {"marker": "o", "markersize": 2.5, "linestyle": "none"}
        if len(e) > 400:
            style = {"marker": ".", "markersize": 2.0, "linestyle": "none"}
        for ax, y, m, name in ((axes[0], y1, m1, "1"), (axes[1], y2, m2, "2")):
            ax.plot(e, y, color=DATA_COLOUR, alpha=0.7, label="data", **style)
            if m is not None:
                ax.plot(e, m, color=MODEL_COLOUR, label="KK reconstruction", zorder=3)
            ax.set_ylabel(rf"$\varepsilon_{name}$")
        axes[1].axhline(0.0, color="#888888", linewidth=0.6, zorder=1)
        shaded = _shade_regions(axes, regions)
        lo, hi = _energy_limits(e)
        _set_energy_axis(list(axes), lo, hi)
        handles, labels = axes[0].get_legend_handles_labels()
        if shaded:
            handles.append(Patch(facecolor=REGION_COLOUR, alpha=0.35))
            labels.append("flagged region")
        axes[0].legend(handles, labels, loc="best")
        v = str(verdict) if verdict else "no verdict"
        axes[0].set_title(f"Kramers–Kronig test: {v}", color=_verdict_colour(v), fontweight="bold")
        return _save(fig, path_stem)


def _shade_regions(axes, regions) -> bool:
    shaded = False
    for r in regions or ():
        lo, hi = float(r["from_ev"]), float(r["to_ev"])
        if hi <= lo:  # a one-point region: widen to be visible
            hi = lo * 1.01 if lo > 0 else lo + 1e-3
        for p in _component_panels(r.get("component")):
            axes[p].axvspan(
                lo,
                hi,
                facecolor=REGION_COLOUR,
                alpha=_severity_alpha(r.get("severity")),
                linewidth=0,
                zorder=0,
            )
            shaded = True
    return shaded


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
    e = _arr(energy_ev, "energy_ev")
    r1 = None if resid1 is None else _arr(resid1, "resid1")
    r2 = None if resid2 is None else _arr(resid2, "resid2")
    _same_length(e, resid1=r1, resid2=r2)
    threshold = float(threshold)
    if not threshold > 0:
        raise ValueError("threshold must be positive")
    with matplotlib.rc_context(_STYLE):
        fig = _new_figure(5.0)
        axes = fig.subplots(2, 1, sharex=True)
        style = {"marker": "o", "markersize": 2.2, "linestyle": "none"}
        if len(e) > 400:
            style = {"marker": ".", "markersize": 2.0, "linestyle": "none"}
        for ax, r, name in ((axes[0], r1, "1"), (axes[1], r2, "2")):
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
                    ax.set_yscale("symlog", linthresh=threshold, linscale=1.0)
                    ax.yaxis.set_major_formatter(mticker.FuncFormatter(_num_label))
                    lo_r, hi_r = float(np.nanmin(r)), float(np.nanmax(r))
                    ticks = [-threshold, 0.0, threshold]
                    k0 = int(np.floor(np.log10(threshold))) + 1
                    for k in range(k0, int(np.ceil(np.log10(big))) + 1):
                        ticks += [10.0**k] if hi_r >= 10.0 ** (k - 1) else []
                        ticks += [-(10.0**k)] if lo_r <= -(10.0 ** (k - 1)) else []
                    ax.yaxis.set_major_locator(mticker.FixedLocator(sorted(ticks)))
                else:
                    lim = max(1.3 * threshold, 1.1 * big)
                    ax.set_ylim(-lim, lim)
            ax.set_ylabel(rf"$\Delta\varepsilon_{name}/\sigma$")
        _shade_regions(axes, regions)
        lo, hi = _energy_limits(e)
        _set_energy_axis(list(axes), lo, hi)
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
        if regions:
            handles.append(Patch(facecolor=REGION_COLOUR, alpha=0.35))
            labels.append("flagged region")
        axes[0].legend(handles, labels, loc="best", ncols=2)
        axes[0].set_title("Normalised residuals of the Kramers–Kronig test")
        return _save(fig, path_stem)


def plot_repaired(
    path_stem,
    energy_ev,
    eps,
    sigma1=None,
    sigma2=None,
    changed_mask=None,
    raw_energy_ev=None,
    raw_eps=None,
) -> Path:
    """The repaired spectrum with its +-1 sigma band, the raw data, and changed points.

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
        True where the repair replaced or filled a point; drawn as red circles.
    raw_energy_ev, raw_eps : array or None
        The merged data before repair [eV], complex; drawn as grey dots.

    Returns
    -------
    pathlib.Path
        The PNG file.
    """
    e = _arr(energy_ev, "energy_ev")
    z = _carr(eps, "eps")
    s1 = None if sigma1 is None else _arr(sigma1, "sigma1")
    s2 = None if sigma2 is None else _arr(sigma2, "sigma2")
    mask = None if changed_mask is None else np.asarray(changed_mask, dtype=bool)
    _same_length(e, eps=z, sigma1=s1, sigma2=s2, changed_mask=mask)
    re_ = None if raw_energy_ev is None else _arr(raw_energy_ev, "raw_energy_ev")
    rz = None if raw_eps is None else _carr(raw_eps, "raw_eps")
    if (re_ is None) != (rz is None):
        raise ValueError("raw_energy_ev and raw_eps must be given together")
    if re_ is not None:
        _same_length(re_, raw_eps=rz)
    with matplotlib.rc_context(_STYLE):
        fig = _new_figure(5.6)
        axes = fig.subplots(2, 1, sharex=True)
        n_changed = int(mask.sum()) if mask is not None else 0
        for ax, y, s, ry, name in (
            (axes[0], z.real, s1, None if rz is None else rz.real, "1"),
            (axes[1], z.imag, s2, None if rz is None else rz.imag, "2"),
        ):
            if ry is not None:
                ax.plot(
                    re_,
                    ry,
                    ".",
                    color="#8A8A8A",
                    markersize=3,
                    label="data before repair",
                    zorder=2,
                )
            if s is not None:
                ax.fill_between(
                    e,
                    y - s,
                    y + s,
                    color=PALETTE[0],
                    alpha=0.25,
                    linewidth=0,
                    label=r"$\pm 1\sigma$",
                    zorder=1,
                )
            ax.plot(e, y, color=PALETTE[0], label="repaired", zorder=3)
            if n_changed:
                ax.plot(
                    e[mask],
                    y[mask],
                    "o",
                    mfc="none",
                    mec=FLAG_COLOUR,
                    mew=1.1,
                    markersize=4.5,
                    label=f"changed ({n_changed})",
                    zorder=4,
                )
            ax.set_ylabel(rf"$\varepsilon_{name}$")
        axes[1].axhline(0.0, color="#888888", linewidth=0.6, zorder=0)
        lo, hi = _energy_limits(e, re_)
        _set_energy_axis(list(axes), lo, hi)
        axes[0].legend(loc="best")
        axes[0].set_title("Repaired (KK-consistent) spectrum with uncertainty")
        return _save(fig, path_stem)


def plot_fit(path_stem, energy_ev, eps_data, eps_fit, fit_range_ev=None) -> Path:
    """Rational-model fit against the data, with the relative error below.

    Parameters
    ----------
    path_stem : str or os.PathLike
        Output path without suffix.
    energy_ev : array
        Photon energy [eV].
    eps_data, eps_fit : complex array
        Data and model dielectric function on ``energy_ev``.
    fit_range_ev : (lo, hi) or None
        Energy range [eV] the model was fitted over; points outside it are shaded as
        extrapolation.

    Returns
    -------
    pathlib.Path
        The PNG file.

    Notes
    -----
    Relative error = |eps_fit - eps_data| / |eps_data| (complex modulus), in percent.
    """
    e = _arr(energy_ev, "energy_ev")
    d = _carr(eps_data, "eps_data")
    f = _carr(eps_fit, "eps_fit")
    _same_length(e, eps_data=d, eps_fit=f)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = 100.0 * np.abs(f - d) / np.abs(d)
    with matplotlib.rc_context(_STYLE):
        fig = _new_figure(6.4)
        axes = fig.subplots(3, 1, sharex=True, height_ratios=[2.0, 2.0, 1.4])
        style = {"marker": "o", "markersize": 2.5, "linestyle": "none"}
        if len(e) > 400:
            style = {"marker": ".", "markersize": 2.0, "linestyle": "none"}
        for ax, y, m, name in (
            (axes[0], d.real, f.real, "1"),
            (axes[1], d.imag, f.imag, "2"),
        ):
            ax.plot(e, y, color=DATA_COLOUR, alpha=0.7, label="data", **style)
            ax.plot(e, m, color=MODEL_COLOUR, label="model", zorder=3)
            ax.set_ylabel(rf"$\varepsilon_{name}$")
        axes[1].axhline(0.0, color="#888888", linewidth=0.6, zorder=0)
        finite = np.isfinite(rel) & (rel > 0)
        axes[2].plot(e[finite], rel[finite], color=PALETTE[0], linewidth=1.1)
        if np.any(finite):
            axes[2].set_yscale("log")
            axes[2].yaxis.set_major_formatter(mticker.FuncFormatter(_num_label))
        axes[2].set_ylabel("relative\nerror [%]")
        lo, hi = _energy_limits(e)
        extrap = False
        if fit_range_ev is not None:
            flo, fhi = float(fit_range_ev[0]), float(fit_range_ev[1])
            # shade only where data lie outside the fitted range (tolerance: 0.1 % of range)
            spans = [(lo / 2, flo)] if lo < flo * (1 - 1e-3) else []
            spans += [(fhi, hi * 2)] if hi > fhi * (1 + 1e-3) else []
            for ax in axes:
                extrap |= _shade_spans(ax, spans, GAP_COLOUR, 0.2)
        _set_energy_axis(list(axes), lo, hi)
        handles, labels = axes[0].get_legend_handles_labels()
        if extrap:
            handles.append(Patch(facecolor=GAP_COLOUR, alpha=0.2))
            labels.append("outside fitted range")
        axes[0].legend(handles, labels, loc="best")
        inside = np.isfinite(rel)
        where = ""
        if fit_range_ev is not None:
            inside &= (e >= float(fit_range_ev[0])) & (e <= float(fit_range_ev[1]))
            where = " in fitted range"
        if np.any(inside):
            title = (
                f"Pole-pair model against data (relative error{where}: rms "
                f"{np.sqrt(np.mean(rel[inside] ** 2)):.3g} %, max {np.max(rel[inside]):.3g} %)"
            )
        else:
            title = "Pole-pair model against data"
        axes[0].set_title(title)
        return _save(fig, path_stem)


def plot_passivity(path_stem, energy_ev_wide, eps2_fit_wide, fit_range_ev=None) -> Path:
    """eps2 of the fitted model over a wide energy range, so any gain (eps2 < 0) shows.

    The vertical axis is symmetric-log: linear within +-``linthresh`` (1e-4 of the largest
    |eps2|) and logarithmic outside, so tiny negative excursions far from the data are as
    visible as the main absorption. Negative parts are filled red.

    Parameters
    ----------
    path_stem : str or os.PathLike
        Output path without suffix.
    energy_ev_wide : array
        Photon energy [eV], typically logarithmically spaced from 1e-3 to 1e3 eV.
    eps2_fit_wide : array
        eps2 of the model on that axis (dimensionless).
    fit_range_ev : (lo, hi) or None
        Energy range [eV] the model was fitted over; shaded.

    Returns
    -------
    pathlib.Path
        The PNG file.
    """
    e = _arr(energy_ev_wide, "energy_ev_wide")
    y = _arr(eps2_fit_wide, "eps2_fit_wide")
    _same_length(e, eps2_fit_wide=y)
    order = np.argsort(e)
    e, y = e[order], y[order]
    finite = np.isfinite(y)
    big = float(np.max(np.abs(y[finite]))) if np.any(finite) else 1.0
    linthresh = max(big * 1e-6, 1e-15)
    neg = y < 0
    with matplotlib.rc_context(_STYLE):
        fig = _new_figure(3.8)
        ax = fig.subplots(1, 1)
        if fit_range_ev is not None:
            ax.axvspan(
                float(fit_range_ev[0]),
                float(fit_range_ev[1]),
                facecolor=PALETTE[4],
                alpha=0.2,
                linewidth=0,
                label="fitted range",
                zorder=0,
            )
        ax.axhline(0.0, color="#555555", linewidth=0.8, zorder=1)
        ax.plot(e, y, color=PALETTE[0], label=r"$\varepsilon_2$ of the model", zorder=3)
        if np.any(neg):
            ax.fill_between(
                e,
                y,
                0.0,
                where=neg,
                color=FLAG_COLOUR,
                alpha=0.5,
                linewidth=0,
                label=r"$\varepsilon_2 < 0$ (gain)",
                zorder=2,
                interpolate=True,
            )
        ax.set_yscale("symlog", linthresh=linthresh, linscale=0.5)
        ax.yaxis.set_major_formatter(mticker.FuncFormatter(_num_label))
        # keep room below zero so a negative excursion (or its absence) is plainly visible
        most_negative = float(np.min(y[finite])) if np.any(finite) else 0.0
        bottom = -max(100.0 * linthresh, 10.0 * abs(min(most_negative, 0.0)))
        top = 3.0 * big
        ax.set_ylim(bottom, top)
        ax.yaxis.set_major_locator(mticker.FixedLocator(_symlog_ticks(linthresh, bottom, top)))
        lo, hi = _energy_limits(e)
        ax.set_xscale("log" if _uses_log(lo, hi) else "linear")
        ax.set_xlim(lo, hi)
        if _uses_log(lo, hi):
            _plain_log_ticks(ax.xaxis, lo, hi)
        ax.set_xlabel("Photon energy [eV]")
        ax.set_ylabel(r"$\varepsilon_2$ (symmetric log)")
        _add_wavelength_axis(ax)
        if np.any(finite):
            i_min = int(np.nanargmin(np.where(finite, y, np.inf)))
            verdict = f"min $\\varepsilon_2$ = {y[i_min]:.3g} at {e[i_min]:.3g} eV" + (
                " — NOT passive" if np.any(neg) else " — no gain on this axis"
            )
            ax.set_title(
                f"Passivity: {verdict}",
                color=FLAG_COLOUR if np.any(neg) else OK_COLOUR,
            )
        ax.legend(loc="best")
        return _save(fig, path_stem)


def plot_slab(path_stem, energy_ev, R_data, T_data, R_fit, T_fit, thickness_nm: float) -> Path:
    """Reflectance and transmittance of a slab computed from the data and from the model.

    Parameters
    ----------
    path_stem : str or os.PathLike
        Output path without suffix.
    energy_ev : array
        Photon energy [eV].
    R_data, T_data : array
        Reflectance and transmittance (fractions 0..1) computed with the data's eps.
    R_fit, T_fit : array
        The same computed with the model's eps.
    thickness_nm : float
        Slab thickness [nm], shown in the title.

    Returns
    -------
    pathlib.Path
        The PNG file.
    """
    e = _arr(energy_ev, "energy_ev")
    rd, td = _arr(R_data, "R_data"), _arr(T_data, "T_data")
    rf, tf = _arr(R_fit, "R_fit"), _arr(T_fit, "T_fit")
    _same_length(e, R_data=rd, T_data=td, R_fit=rf, T_fit=tf)
    with matplotlib.rc_context(_STYLE):
        fig = _new_figure(5.4)
        axes = fig.subplots(2, 1, sharex=True, height_ratios=[2.2, 1.2])
        ax = axes[0]
        ax.plot(e, rd, color=PALETTE[0], label="R from data")
        ax.plot(e, rf, color=PALETTE[0], linestyle="--", label="R from model")
        ax.plot(e, td, color=PALETTE[1], label="T from data")
        ax.plot(e, tf, color=PALETTE[1], linestyle="--", label="T from model")
        ax.set_ylabel("R, T (fraction)")
        ax.legend(loc="best", ncols=2)
        dR = 100.0 * (rf - rd)
        dT = 100.0 * (tf - td)
        axes[1].axhline(0.0, color="#888888", linewidth=0.6)
        axes[1].plot(e, dR, color=PALETTE[0], label=r"$\Delta R$")
        axes[1].plot(e, dT, color=PALETTE[1], label=r"$\Delta T$")
        axes[1].set_ylabel("model − data\n[% points]")
        axes[1].legend(loc="best", ncols=2)
        lo, hi = _energy_limits(e)
        _set_energy_axis(list(axes), lo, hi)
        worst = np.nanmax(np.abs(np.concatenate([dR, dT]))) if len(e) else float("nan")
        ax.set_title(
            f"Slab of thickness {float(thickness_nm):g} nm: max |model − data| = "
            f"{worst:.3g} % points"
        )
        return _save(fig, path_stem)
