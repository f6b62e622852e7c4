"""Notebook views of a :class:`~kkcheck.result.JobResult`: a table of the analysed points and
a short HTML card (what ``result.to_frame()`` and Jupyter's display use).

Only plain values are read from the result; pandas is imported when a frame is asked for.
"""

from __future__ import annotations

import html
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from .result import JobResult

__all__ = ["result_frame", "result_html"]


def result_frame(result: JobResult):
    """The analysed spectrum, its KK reconstruction, normalised residuals and the model.

    Returns
    -------
    pandas.DataFrame
        One row per analysed point, columns ``energy_ev, eps1, eps2, sigma_eps1, sigma_eps2,
        eps1_kk, eps2_kk, z1, z2, source, flags`` and, after a fit, ``eps1_model,
        eps2_model``. ``z`` is (data - KK reconstruction) / sigma as the test counted it.
    """
    import pandas as pd

    s, kk = result.analysed, result.kk
    names = np.array(s.source_names, dtype=object)
    cols = {
        "energy_ev": s.energy_ev,
        "eps1": s.eps.real,
        "eps2": s.eps.imag,
        "sigma_eps1": s.sigma_eps1,
        "sigma_eps2": s.sigma_eps2,
    }
    if kk.energy_ev.shape == s.energy_ev.shape:
        cols.update(eps1_kk=kk.eps1_model, eps2_kk=kk.eps2_model, z1=kk.resid1, z2=kk.resid2)
    cols.update(source=names[s.source] if len(s) else [], flags=s.flags)
    if result.fit is not None:
        m = result.fit.model.eps(s.energy_ev)
        cols.update(eps1_model=m.real, eps2_model=m.imag)
    return pd.DataFrame(cols)


def _row(key: str, value: str) -> str:
    return f"<tr><th style='text-align:left'>{html.escape(key)}</th><td>{value}</td></tr>"


def result_html(result: JobResult) -> str:
    """A small HTML table: sources, verdict, regions, model (Jupyter's rich display)."""
    kk = result.kk
    rows = [
        _row(
            "sources",
            html.escape(", ".join(f"{d.name} ({len(d)} points)" for d in result.datasets)),
        ),
        _row(
            "KK test",
            f"<b>{html.escape(kk.verdict)}</b> (chi2/dof {kk.chi2_dof:.3g}, "
            f"{len(kk.regions)} inconsistent region{'s' if len(kk.regions) != 1 else ''})",
        ),
    ]
    for r in kk.regions:
        rows.append(
            _row(
                "inconsistent region",
                html.escape(
                    f"{r.component} {r.from_ev:.4g}-{r.to_ev:.4g} eV, peak {r.severity:.1f} sigma"
                ),
            )
        )
    if result.fit is not None:
        f = result.fit
        cert = "certified passive" if f.passivity.certified else "NOT certified passive"
        rows.append(
            _row(
                "model",
                html.escape(
                    f"{f.n_pairs} pole pair{'s' if f.n_pairs != 1 else ''}, rms rel. error "
                    f"{f.rms_rel:.2%}, {cert}; valid only over "
                    f"{f.range_ev[0]:.4g}-{f.range_ev[1]:.4g} eV"
                ),
            )
        )
    for w in result.warnings:
        rows.append(_row("warning", html.escape(w)))
    if result.out_dir is not None:
        rows.append(_row("written to", html.escape(str(result.out_dir))))
    return "<table class='kkcheck-result'>" + "".join(rows) + "</table>"
