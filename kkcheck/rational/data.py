"""The data a pole-pair fit sees: which points, with which weights.

A pole-pair model is KK consistent by construction: it cannot follow data the KK test found
inconsistent, and trying adds spurious narrow poles. So points inside the KK test's
inconsistent regions, flagged points still in the data (per the job's flag policy) and gap
fills (the KK model's guess, not measurements) get DOWNWEIGHT_FACTOR times their sigma (1/100
of their weight). The fitter needs a strictly increasing axis: the first point at each
duplicate energy is used (:func:`kkcheck.spectrum.first_of_each_energy`).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from ..noise import noise_floor
from ..options import DOWNWEIGHT_FACTOR, FlagPolicy
from ..spectrum import Flag, first_of_each_energy

__all__ = ["FitPoints", "fit_points"]


@dataclass(frozen=True)
class FitPoints:
    """Points and per-point sigmas for :func:`kkcheck.rational.fit_pole_pairs`.

    Attributes
    ----------
    energy_ev : numpy.ndarray
        Strictly increasing photon energy [eV].
    eps : numpy.ndarray
        Complex permittivity.
    sigma_eps1, sigma_eps2 : numpy.ndarray
        Sigma per point [eps units] after down-weighting and the noise floor.
    downweighted : numpy.ndarray of bool
        Points that got DOWNWEIGHT_FACTOR times their sigma.
    """

    energy_ev: np.ndarray
    eps: np.ndarray
    sigma_eps1: np.ndarray
    sigma_eps2: np.ndarray
    downweighted: np.ndarray


def fit_points(repaired, regions: Sequence, policy: FlagPolicy) -> FitPoints:
    """The fit's view of the repaired data.

    Parameters
    ----------
    repaired : kkcheck.repair.RepairResult
        Energies, eps, band and flags of the repaired spectrum.
    regions : sequence of kkcheck.kk.regions.Region
        The KK test's inconsistent regions (``from_ev``, ``to_ev``).
    policy : FlagPolicy
        Which flag bits are down-weighted.
    """
    e = np.asarray(repaired.energy_ev, float)
    eps = np.asarray(repaired.eps)
    flags = np.asarray(repaired.flags)
    bad = (flags & policy.fit_downweighted_bits) != 0
    for g in regions:
        bad |= (e >= g.from_ev) & (e <= g.to_ev)
    bad &= (flags & int(Flag.REPLACED)) == 0
    bad |= (flags & int(Flag.FILLED)) != 0
    s1 = np.where(bad, DOWNWEIGHT_FACTOR * repaired.sigma_eps1, repaired.sigma_eps1)
    s2 = np.where(bad, DOWNWEIGHT_FACTOR * repaired.sigma_eps2, repaired.sigma_eps2)
    # The repair's band is exactly 0 where the nonnegative basis pins eps2 at 0 (a filled
    # transparent gap); the fit weights by 1/sigma, so it is floored at the KK test's noise
    # floor, the one every stage uses (kkcheck.noise.noise_floor: max of relative and absolute).
    floor = noise_floor(eps)
    s1 = np.maximum(np.nan_to_num(np.asarray(s1, float), nan=np.inf), floor)
    s2 = np.maximum(np.nan_to_num(np.asarray(s2, float), nan=np.inf), floor)
    keep = first_of_each_energy(e)
    return FitPoints(e[keep], eps[keep], s1[keep], s2[keep], bad[keep])
