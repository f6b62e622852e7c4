"""What happens to flagged points: ``keep``, ``downweight`` or ``replace``; never removal.

The choice is the shared ``flagged`` vocabulary of :mod:`kkcheck.options`
(:data:`~kkcheck.options.FlaggedChoice`, or a :class:`~kkcheck.options.FlagPolicy`), and a
down-weighted point has its sigma multiplied by :data:`~kkcheck.options.DOWNWEIGHT_FACTOR`.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence

import numpy as np

from ..errors import InputError
from ..noise import NoiseReport, estimate_noise, noise_per_point
from ..options import DOWNWEIGHT_FACTOR, FlaggedChoice, FlagPolicy, check_choice
from ..spectrum import Flag, Spectrum
from .outliers import Outlier

__all__ = ["apply_policy"]

_REPLACE_NEEDS_REPAIR = (
    "policy 'replace' needs the KK repair stage to predict the flagged values; "
    "pass predictor= (from the repair) or choose policy 'keep' or 'downweight'"
)


def _checked_policy(policy: FlaggedChoice | FlagPolicy, predictor) -> FlaggedChoice:
    """The policy's choice, or a one-line InputError (unknown, or replace without predictor)."""
    choice = policy.choice if isinstance(policy, FlagPolicy) else policy
    check_choice("policy", choice, FlaggedChoice)
    if choice == "replace" and predictor is None:
        raise InputError(_REPLACE_NEEDS_REPAIR)
    return choice


def _masks(m: int, outliers: Sequence[Outlier]) -> tuple[np.ndarray, np.ndarray]:
    """(spike mask, step mask) of a spectrum of ``m`` points."""
    spike = np.zeros(m, bool)
    step = np.zeros(m, bool)
    for o in outliers:
        if not 0 <= o.index < m:
            raise ValueError(f"outlier index {o.index} is outside the spectrum")
        if o.kind in ("step", "plateau"):
            step[o.index] = True
            if o.end_index is not None and 0 <= o.end_index < m:
                step[o.end_index] = True  # a plateau's return jump
        else:
            spike[o.index] = True
    return spike, step


def _downweighted(
    out: Spectrum, spike: np.ndarray, sigma_factor: float, noise: NoiseReport | None
) -> Spectrum:
    """``out`` with the eps sigmas of the spikes (NaN ones filled first) times sigma_factor."""
    s1 = np.array(out.sigma_eps1)
    s2 = np.array(out.sigma_eps2)
    if np.isnan(s1[spike]).any() or np.isnan(s2[spike]).any():
        n1, n2 = noise_per_point(out, noise if noise is not None else estimate_noise(out))
        s1 = np.where(np.isnan(s1) & spike, n1, s1)
        s2 = np.where(np.isnan(s2) & spike, n2, s2)
    s1[spike] *= sigma_factor
    s2[spike] *= sigma_factor
    return out.replace(sigma_eps1=s1, sigma_eps2=s2)


def apply_policy(
    spectrum: Spectrum,
    outliers: Sequence[Outlier],
    policy: FlaggedChoice | FlagPolicy = "keep",
    *,
    sigma_factor: float = DOWNWEIGHT_FACTOR,
    noise: NoiseReport | None = None,
    predictor: Callable[[Spectrum, np.ndarray], np.ndarray] | None = None,
) -> Spectrum:
    """Mark flagged points and apply the named policy; nothing is ever removed.

    Parameters
    ----------
    spectrum : Spectrum
    outliers : sequence of Outlier
        From :func:`kkcheck.clean.find_spikes` / :func:`kkcheck.clean.find_steps` on this
        spectrum.
    policy : {"keep", "downweight", "replace"} or FlagPolicy
        ``keep``: set Flag.SPIKE / Flag.STEP only. ``downweight``: flags, and the sigma of
        eps1 and eps2 at each spike multiplied by ``sigma_factor`` (default 10, i.e. the
        point keeps 1/100 of its weight in any least-squares use); a NaN sigma at a spike is
        first taken from ``noise`` (other points are left as they are). ``replace``: flags,
        and the values at spikes replaced by ``predictor(spectrum, mask)`` (the
        KK-consistent prediction of the repair stage), marked Flag.REPLACED. A
        :class:`~kkcheck.options.FlagPolicy` stands for its ``choice``.
    sigma_factor : float
        Sigma inflation for ``downweight``.
    noise : NoiseReport, optional
        Used to fill NaN sigmas before inflating (estimated here when not given).
    predictor : callable, optional
        ``predictor(spectrum, mask) -> complex eps`` for the points where boolean ``mask``
        is True (length ``mask.sum()``) or for all points (length ``len(spectrum)``).

    Returns
    -------
    Spectrum

    Raises
    ------
    InputError
        Unknown policy, or ``replace`` without a predictor (the repair stage must supply
        one).

    Notes
    -----
    A step marks only the first point after the jump and is never down-weighted or
    replaced point by point: a jump is a calibration problem of one side (see
    :func:`kkcheck.clean.level_steps`, and :func:`kkcheck.merge.merge` for scale/offset
    reconciliation), and hiding one point would not fix it.
    """
    choice = _checked_policy(policy, predictor)
    m = len(spectrum)
    spike, step = _masks(m, outliers)
    flags = np.array(spectrum.flags)
    flags[spike] |= int(Flag.SPIKE)
    flags[step] |= int(Flag.STEP)
    out = spectrum.replace(flags=flags)
    if choice == "keep" or not spike.any():
        return out
    if choice == "downweight":
        return _downweighted(out, spike, sigma_factor, noise)
    pred = np.asarray(predictor(out, spike.copy()), dtype=complex)
    if pred.shape == (m,):
        pred = pred[spike]
    if pred.shape != (int(spike.sum()),):
        raise ValueError("predictor must return one complex value per flagged point or per point")
    eps = np.array(out.eps)
    eps[spike] = pred
    flags[spike] |= int(Flag.REPLACED)
    return out.replace(eps=eps, flags=flags)
