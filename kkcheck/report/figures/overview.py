"""One overview figure of a job for interactive use (``JobResult.plot()``).

eps1 and eps2 of the analysed data with the KK-consistent reconstruction, the inconsistent
regions shaded and, after a fit, the pole-pair model; eps2 on a log axis when it spans more than
two decades (weak absorption is invisible on a linear one). Drawn on a plain
:class:`matplotlib.figure.Figure` (no pyplot state) and returned, so a notebook displays it.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from .axes import wants_log_values
from .style import DATA_COLOUR, MODEL_COLOUR, REGION_COLOUR, STYLE, new_figure

if TYPE_CHECKING:
    from matplotlib.figure import Figure

    from ...result import JobResult

__all__ = ["overview_figure"]


def overview_figure(result: JobResult, ax=None) -> Figure:
    """Data, KK reconstruction, regions and model of ``result``.

    Parameters
    ----------
    result : JobResult
    ax : sequence of two matplotlib Axes, optional
        Draw into these (eps1, eps2) instead of a new figure.

    Returns
    -------
    matplotlib.figure.Figure
    """
    import matplotlib as mpl

    s, kk = result.analysed, result.kk
    e = s.energy_ev
    with mpl.rc_context(STYLE):
        if ax is None:
            fig = new_figure(5.0)
            axes = fig.subplots(2, 1, sharex=True)
        else:
            axes = list(ax)
            fig = axes[0].figure
        model = result.fit.model.eps(e) if result.fit is not None else None
        for a, part, kk_part, name in (
            (axes[0], s.eps.real, kk.eps1_model, "eps1"),
            (axes[1], s.eps.imag, kk.eps2_model, "eps2"),
        ):
            a.plot(e, part, ".", color=DATA_COLOUR, ms=2.5, label="data")
            if kk_part.shape == e.shape:
                a.plot(e, kk_part, "-", color="#0072B2", lw=1.0, label="KK reconstruction")
            if model is not None:
                y = model.real if name == "eps1" else model.imag
                a.plot(e, y, "--", color=MODEL_COLOUR, lw=1.0, label="pole-pair model")
            for r in kk.regions:
                if r.component == name:
                    a.axvspan(r.from_ev, r.to_ev, color=REGION_COLOUR, alpha=0.25, lw=0)
            a.set_ylabel(name)
        if wants_log_values(s.eps.imag):
            axes[1].set_yscale("log")
            axes[1].set_ylabel("eps2 (log scale)")
        axes[1].set_xlabel("photon energy [eV]")
        axes[0].legend(loc="best")
        axes[0].set_title(
            f"KK test: {kk.verdict} (chi2/dof {kk.chi2_dof:.3g}); shaded: inconsistent regions"
        )
    return fig
