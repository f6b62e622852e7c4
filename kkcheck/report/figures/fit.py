"""Figures of the model: fit against the data, passivity over a wide axis, slab R/T.

Horizontal axis photon energy [eV] (see :mod:`.axes`); eps in the exp(-i w t) convention, so
a passive model has eps2 >= 0 at every energy.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib
import matplotlib.ticker as mticker
import numpy as np
from matplotlib.patches import Patch

from .axes import (
    add_wavelength_axis,
    energy_limits,
    num_label,
    plain_log_ticks,
    scatter_style,
    set_energy_axis,
    shade_spans,
    symlog_ticks,
    uses_log,
)
from .style import (
    DATA_COLOUR,
    FLAG_COLOUR,
    GAP_COLOUR,
    MODEL_COLOUR,
    OK_COLOUR,
    PALETTE,
    STYLE,
    complex_array,
    new_figure,
    real_array,
    same_length,
    save,
)

__all__ = ["plot_fit", "plot_passivity", "plot_slab"]


def _shade_outside(axes, lo: float, hi: float, fit_range_ev) -> bool:
    """Shade where the data lie outside the fitted range (tolerance: 0.1 % of range)."""
    flo, fhi = float(fit_range_ev[0]), float(fit_range_ev[1])
    spans = [(lo / 2, flo)] if lo < flo * (1 - 1e-3) else []
    spans += [(fhi, hi * 2)] if hi > fhi * (1 + 1e-3) else []
    extrap = False
    for ax in axes:
        extrap |= shade_spans(ax, spans, GAP_COLOUR, 0.2)
    return extrap


def _fit_title(e, rel, fit_range_ev) -> str:
    """Title with the rms and max relative error [%] inside the fitted range."""
    inside = np.isfinite(rel)
    where = ""
    if fit_range_ev is not None:
        inside &= (e >= float(fit_range_ev[0])) & (e <= float(fit_range_ev[1]))
        where = " in fitted range"
    if np.any(inside):
        return (
            f"Pole-pair model against data (relative error{where}: rms "
            f"{np.sqrt(np.mean(rel[inside] ** 2)):.3g} %, max {np.max(rel[inside]):.3g} %)"
        )
    return "Pole-pair model against data"


def _plot_k(ax, e, k_data, k_fit, style) -> None:
    """k of data and model on a log axis: small k is what a time-domain solver gets wrong."""
    pos_d, pos_f = k_data > 0, k_fit > 0
    ax.plot(e[pos_d], k_data[pos_d], color=DATA_COLOUR, alpha=0.7, **style)
    ax.plot(e[pos_f], k_fit[pos_f], color=MODEL_COLOUR, zorder=3)
    if np.any(pos_d) or np.any(pos_f):
        ax.set_yscale("log")
    ax.set_ylabel("k (log)")


def plot_fit(path_stem, energy_ev, eps_data, eps_fit, fit_range_ev=None) -> Path:
    """Rational-model fit against the data as eps1, eps2, n, k (log axis), relative error.

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
    e = real_array(energy_ev, "energy_ev")
    d = complex_array(eps_data, "eps_data")
    f = complex_array(eps_fit, "eps_fit")
    same_length(e, eps_data=d, eps_fit=f)
    with np.errstate(divide="ignore", invalid="ignore"):
        rel = 100.0 * np.abs(f - d) / np.abs(d)
    with matplotlib.rc_context(STYLE):
        fig = new_figure(10.0)
        axes = fig.subplots(5, 1, sharex=True, height_ratios=[2.0, 2.0, 1.6, 1.8, 1.4])
        style = scatter_style(len(e))
        nd, nf = np.sqrt(d), np.sqrt(f)  # principal root: k >= 0 where eps2 >= 0
        for ax, y, m, name in (
            (axes[0], d.real, f.real, r"$\varepsilon_1$"),
            (axes[1], d.imag, f.imag, r"$\varepsilon_2$"),
            (axes[2], nd.real, nf.real, "n"),
        ):
            ax.plot(e, y, color=DATA_COLOUR, alpha=0.7, label="data", **style)
            ax.plot(e, m, color=MODEL_COLOUR, label="model", zorder=3)
            ax.set_ylabel(name)
        axes[1].axhline(0.0, color="#888888", linewidth=0.6, zorder=0)
        _plot_k(axes[3], e, nd.imag, nf.imag, style)
        finite = np.isfinite(rel) & (rel > 0)
        axes[4].plot(e[finite], rel[finite], color=PALETTE[0], linewidth=1.1)
        if np.any(finite):
            axes[4].set_yscale("log")
            axes[4].yaxis.set_major_formatter(mticker.FuncFormatter(num_label))
        axes[4].set_ylabel("relative\nerror [%]")
        lo, hi = energy_limits(e)
        extrap = fit_range_ev is not None and _shade_outside(axes, lo, hi, fit_range_ev)
        set_energy_axis(list(axes), lo, hi)
        handles, labels = axes[0].get_legend_handles_labels()
        if extrap:
            handles.append(Patch(facecolor=GAP_COLOUR, alpha=0.2))
            labels.append("outside fitted range")
        axes[0].legend(handles, labels, loc="best")
        axes[0].set_title(_fit_title(e, rel, fit_range_ev))
        return save(fig, path_stem)


def _passivity_y_axis(ax, y, finite, linthresh: float, big: float) -> None:
    """Symmetric-log y axis with room below zero, so a negative excursion (or none) shows."""
    ax.set_yscale("symlog", linthresh=linthresh, linscale=0.5)
    ax.yaxis.set_major_formatter(mticker.FuncFormatter(num_label))
    most_negative = float(np.min(y[finite])) if np.any(finite) else 0.0
    bottom = -max(100.0 * linthresh, 10.0 * abs(min(most_negative, 0.0)))
    top = 3.0 * big
    ax.set_ylim(bottom, top)
    ax.yaxis.set_major_locator(mticker.FixedLocator(symlog_ticks(linthresh, bottom, top)))


def _passivity_x_axis(ax, e) -> None:
    lo, hi = energy_limits(e)
    ax.set_xscale("log" if uses_log(lo, hi) else "linear")
    ax.set_xlim(lo, hi)
    if uses_log(lo, hi):
        plain_log_ticks(ax.xaxis, lo, hi)
    ax.set_xlabel("Photon energy [eV]")


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
    e = real_array(energy_ev_wide, "energy_ev_wide")
    y = real_array(eps2_fit_wide, "eps2_fit_wide")
    same_length(e, eps2_fit_wide=y)
    order = np.argsort(e)
    e, y = e[order], y[order]
    finite = np.isfinite(y)
    big = float(np.max(np.abs(y[finite]))) if np.any(finite) else 1.0
    linthresh = max(big * 1e-6, 1e-15)
    neg = y < 0
    with matplotlib.rc_context(STYLE):
        fig = new_figure(3.8)
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
        _passivity_y_axis(ax, y, finite, linthresh, big)
        _passivity_x_axis(ax, e)
        ax.set_ylabel(r"$\varepsilon_2$ (symmetric log)")
        add_wavelength_axis(ax)
        if np.any(finite):
            i_min = int(np.nanargmin(np.where(finite, y, np.inf)))
            verdict = f"min $\\varepsilon_2$ = {y[i_min]:.3g} at {e[i_min]:.3g} eV" + (
                " — NOT passive" if np.any(neg) else " — no gain on this axis"
            )
            ax.set_title(f"Passivity: {verdict}", color=FLAG_COLOUR if np.any(neg) else OK_COLOUR)
        ax.legend(loc="best")
        return save(fig, path_stem)


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
    e = real_array(energy_ev, "energy_ev")
    rd, td = real_array(R_data, "R_data"), real_array(T_data, "T_data")
    rf, tf = real_array(R_fit, "R_fit"), real_array(T_fit, "T_fit")
    same_length(e, R_data=rd, T_data=td, R_fit=rf, T_fit=tf)
    with matplotlib.rc_context(STYLE):
        fig = new_figure(5.4)
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
        lo, hi = energy_limits(e)
        set_energy_axis(list(axes), lo, hi)
        worst = np.nanmax(np.abs(np.concatenate([dR, dT]))) if len(e) else float("nan")
        ax.set_title(
            f"Slab of thickness {float(thickness_nm):g} nm: max |model − data| = "
            f"{worst:.3g} % points"
        )
        return save(fig, path_stem)
