"""Order selection for the pole-pair fit: fewest entries meeting a target, or the BIC.

References
----------
.. [1] G. Schwarz, "Estimating the dimension of a model," Ann. Statist. 6(2), 461-464 (1978)
   (Bayesian information criterion; from memory); see docs/references.md [Schwarz1978].
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .model import PolePairModel, parameter_vector

__all__ = ["OrderRow", "fit_metrics", "meets_target", "choose_by_bic", "noise_floor_chi2"]


@dataclass(frozen=True)
class OrderRow:
    """One row of the order trade-off table.

    Attributes
    ----------
    n_start : int
        Search step: the band start has this many entries; the pole-adding starts have the
        previous step's converged entries plus one pair (see ``start``).
    n_pairs : int
        Entries in the fitted model (pairs plus real poles, conductor not counted).
    n_params : int
        Real parameters: eps_inf, 2 per pair (residue) + 2 per pair (pole), 1+1 per real pole,
        1 for the conductor residue.
    rms_rel, max_rel : float
        RMS and largest relative error |eps_model - eps| / |eps| on the data.
    chi2_dof : float or None
        sum((d eps1/sigma1)^2 + (d eps2/sigma2)^2) / (2N - n_params) when sigma was given.
    bic : float
        2N ln(RSS_w / 2N) + n_params ln(2N), RSS_w the weighted residual sum of squares.
    passive_raw : bool
        Whether the unconstrained fit was already certified passive.
    start : str
        Start that won this step: ``"band"`` (poles spread over the data band) or the site of
        the pair added to the previous step's poles (``"residual"``, ``"above"``, ``"below"``;
        :func:`~kkcheck.rational.vfit.poles_plus_pair`), with ", polished" when the
        variable-projection polish (:func:`~kkcheck.rational.vfit.polish_poles`) improved it and
        ", widened above the band" when the kept fit is its refit by
        :func:`~kkcheck.rational.vfit.broaden_above_band`.

    rms_rel_free : float
        RMS relative error of the unconstrained fit with the same poles (NaN when not known);
        the other errors are those of the passive-by-construction fit the search keeps.
    certified : bool
        Whether the kept fit of this row is certified passive.
    """

    n_start: int
    n_pairs: int
    n_params: int
    rms_rel: float
    max_rel: float
    chi2_dof: float | None
    bic: float
    passive_raw: bool
    start: str = "band"
    rms_rel_free: float = float("nan")
    certified: bool = False


def fit_metrics(model: PolePairModel, energy_ev, eps, w1, w2, have_sigma: bool):
    """Return (rms_rel, max_rel, chi2_dof or None, bic, n_params) of ``model`` on the data."""
    e = model.eps(energy_ev)
    rel = np.abs(e - eps) / np.abs(eps)
    n_params = (
        parameter_vector(model).size
        + 2 * int(np.sum(model.poles.imag != 0))
        + int(np.sum(model.poles.imag == 0))
    )
    r = np.concatenate([(e.real - eps.real) * w1, (e.imag - eps.imag) * w2])
    rss = float(r @ r)
    m = r.size
    dof = max(m - n_params, 1)
    chi2 = rss / dof if have_sigma else None
    bic = m * np.log(max(rss, 1e-300) / m) + n_params * np.log(m)
    return float(np.sqrt(np.mean(rel**2))), float(rel.max()), chi2, float(bic), n_params


def noise_floor_chi2(n_data: int, n_params: int) -> float:
    """Accepted chi2/dof at the noise floor: 1 + 3 sqrt(2/dof) (three standard deviations).

    Notes
    -----
    For Gaussian residuals chi2/dof has mean 1 and standard deviation sqrt(2/dof) (common
    practice, no source).
    """
    dof = max(2 * n_data - n_params, 1)
    return 1.0 + 3.0 * np.sqrt(2.0 / dof)


def meets_target(
    row: OrderRow, n_data: int, tol_rel: float | None, chi2_target: float | None = None
) -> bool:
    """True when ``row`` meets rms_rel <= tol_rel or, without tol_rel, the noise floor.

    The noise floor is ``chi2_target`` when given, else :func:`noise_floor_chi2`.
    """
    if tol_rel is not None:
        return row.rms_rel <= tol_rel
    if row.chi2_dof is not None:
        floor = noise_floor_chi2(n_data, row.n_params)
        return row.chi2_dof <= (floor if chi2_target is None else max(floor, chi2_target))
    return False


def choose_by_bic(rows) -> int:
    """Index of the row with the smallest BIC (Schwarz 1978)."""
    return int(np.argmin([r.bic for r in rows]))


def choose_by_diminishing_returns(rows, rel: float = 0.1) -> int:
    """Index of the fewest-entry row whose misfit is within ``rel`` of the best row's.

    Used when no order reaches the target: the data then hold structure that no rational
    model of this size takes up (typically a KK fault or an instrument step), chi2 is
    dominated by it, and BIC keeps adding pairs for fractions of a percent. The misfit is
    chi2/dof when known, else rms_rel. Common practice (an "elbow" rule), no source.
    """
    score = [r.chi2_dof if r.chi2_dof is not None else r.rms_rel for r in rows]
    best = min(score)
    ok = [i for i, v in enumerate(score) if v <= (1.0 + rel) * best]
    return min(ok, key=lambda i: (rows[i].n_pairs, score[i]))
