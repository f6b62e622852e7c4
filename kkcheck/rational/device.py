"""Fits aimed at the user's film: weights by what changes its R and T, order by its R/T error.

A small rms error in eps says little about a device: a thick transparent film's transmission
hangs on k values far below eps's noise, and its fringes on n to a few 1e-3. Given the film
(:class:`kkcheck.slab.FilmSpec`), :func:`device_weights` sets the eps sigmas from the change
of R and T they cause, and :func:`device_search` keeps the fewest entries whose R and T, on a
grid that resolves the fringes (:func:`kkcheck.slab.compare_film`), stay within the tolerance
of those computed from the data.

References
----------
.. [1] M. Born, E. Wolf, *Principles of Optics*, 7th ed., Cambridge University Press (1999),
   section 1.6 (Airy formulas; section number from memory); see docs/references.md
   [BornWolf1999].
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..slab import FilmSpec, compare_film
from ..units import HC_EV_NM
from .search import (
    Candidate,
    FitData,
    SearchOutcome,
    _evaluate,
    _steps,
)

__all__ = ["DeviceOutcome", "device_weights", "device_search", "SAFETY"]

#: Sigma = tolerance / SAFETY of the first-order R/T change: an eps error of one sigma moves
#: R or T by a third of the tolerance (our choice).
SAFETY = 3.0


@dataclass(frozen=True)
class DeviceOutcome:
    """How close the chosen model's film is to the data's film.

    Attributes
    ----------
    geometry : str
    thickness_nm : float
    tolerance : float
        Largest accepted |dR| and |dT| [dimensionless].
    reached : bool
        Whether the chosen model meets the tolerance.
    max_abs_dR, max_abs_dT : float
        Largest |R_model - R_data|, |T_model - T_data| on the fringe-resolving grid.
    at_dT_ev : float
        Photon energy of the largest |dT| [eV].
    pairs_tried : tuple of (int, float)
        (entries, max(|dR|, |dT|)) of each search step's best candidate.
    """

    geometry: str
    thickness_nm: float
    tolerance: float
    reached: bool
    max_abs_dR: float
    max_abs_dT: float
    at_dT_ev: float
    pairs_tried: tuple

    def to_dict(self) -> dict:
        """JSON-safe dict for summary.json and model.json."""
        from ..jsonsafe import json_float

        return {
            "geometry": self.geometry,
            "thickness_nm": json_float(self.thickness_nm),
            "slab_tolerance": json_float(self.tolerance),
            "reached": bool(self.reached),
            "max_abs_dR": json_float(self.max_abs_dR),
            "max_abs_dT": json_float(self.max_abs_dT),
            "at_dT_ev": json_float(self.at_dT_ev),
            "pairs_tried": [[int(n), json_float(d)] for n, d in self.pairs_tried],
        }


def device_weights(energy_ev, eps, film: FilmSpec, tolerance: float):
    """(sigma_eps1, sigma_eps2): the eps errors that move the film's R or T by tolerance/3.

    Notes
    -----
    For a film of index n + i k and thickness d at wavelength lambda, the transmitted
    intensity goes as tau = exp(-4 pi k d / lambda) and the fringe phase as 4 pi n d / lambda
    (Born & Wolf [1]_), so dT ~ T 4 pi d dk / lambda and the fringe shift moves T by up to
    T 4 pi d dn / lambda. With d eps = 2 n dN: sigma = 2 n tol lambda / (4 pi d max(T, tol))
    / SAFETY for both eps1 and eps2 (first order; an opaque film, T < tol, is weighed as if
    T = tol, where R still depends on n and k). T is that of the data's film.
    """
    from ..slab import device_rt

    w = np.asarray(energy_ev, float)
    n = np.sqrt(np.asarray(eps, complex))
    lam = HC_EV_NM / w
    t = device_rt(n, film, lam).T
    s = 2 * np.abs(n) * tolerance * lam / (4 * np.pi * film.thickness_nm)
    s = s / np.maximum(t, tolerance) / SAFETY
    return s, s.copy()


def _deviation(table, model, film: FilmSpec):
    c = compare_film(table[0], table[1], model, film)
    return max(c.max_dR, c.max_dT), c


def device_search(
    data: FitData, table, film: FilmSpec, tolerance: float, max_pairs: int
) -> tuple[SearchOutcome, DeviceOutcome]:
    """The fewest entries whose passive fit keeps the film's R and T within ``tolerance``.

    Parameters
    ----------
    data : FitData
        The points with the device weights (:func:`device_weights`).
    table : tuple of (energy_ev, eps)
        The data R and T are computed from (interpolated between rows by
        :func:`kkcheck.slab.interpolate_index`).
    film : FilmSpec
    tolerance : float
        Largest accepted |dR| and |dT|.
    max_pairs : int

    Returns
    -------
    (SearchOutcome, DeviceOutcome)
        Every start of a step is made passive (:func:`~kkcheck.rational.search._evaluate`)
        and tried; the first certified one within the tolerance is chosen. When no step up
        to ``max_pairs`` reaches it, the certified candidate with the smallest deviation is
        chosen and a note says so.
    """
    found: list[Candidate] = []
    tried_dev: list[tuple[int, float]] = []
    best = (np.inf, None, None)  # (deviation, index into found, comparison)
    for n, starts in _steps(data, max_pairs):
        step_best = (np.inf, None, None)
        for start in starts:
            cand = _evaluate(data, n, start)
            if not cand.row.certified:
                continue
            dev, comp = _deviation(table, cand.model, film)
            if dev < step_best[0]:
                step_best = (dev, cand, comp)
        if step_best[1] is None:
            found.append(_evaluate(data, n, starts[0]))
            continue
        found.append(step_best[1])
        tried_dev.append((step_best[1].model.n_pairs, step_best[0]))
        if step_best[0] < best[0]:
            best = (step_best[0], len(found) - 1, step_best[2])
        if step_best[0] <= tolerance:
            break
    if best[1] is None:
        note = "no certified passive candidate: the device tolerance could not be checked"
        return SearchOutcome(tuple(found), len(found) - 1, (note,)), None
    dev, idx, comp = best
    notes = ()
    if dev > tolerance:
        notes = (
            f"no order up to {max_pairs} entries keeps the film's R and T within "
            f"{tolerance:g} of the data's; the best, {found[idx].model.n_pairs} entries, "
            f"reaches {dev:.3g}",
        )
    out = DeviceOutcome(
        film.geometry, film.thickness_nm, float(tolerance), bool(dev <= tolerance),
        comp.max_dR, comp.max_dT, comp.at_dT_ev, tuple(tried_dev),
    )  # fmt: skip
    return SearchOutcome(tuple(found), idx, notes), out
