"""Regions where eps1 and eps2 disagree: runs of large normalised residuals of the KK test.

The rule (the same for every material): the running rms of the normalised residuals z over
``run_width`` consecutive counted points; every run of at least ``min_points`` consecutive
points where it exceeds ``z_threshold`` is a region (for pure Gaussian noise, a 5-point mean
of z^2 above 9 has probability ~1e-8 per point, from the chi-square distribution with 5
degrees of freedom).
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import TYPE_CHECKING

import numpy as np
from scipy.ndimage import uniform_filter1d

from ..jsonsafe import json_float

if TYPE_CHECKING:
    from .consistency import KKTestOptions

__all__ = ["Region", "find_regions"]


@dataclass(frozen=True)
class Region:
    """A contiguous energy range where eps1 and eps2 disagree.

    Attributes
    ----------
    from_ev, to_ev : float
        First and last point of the region [eV].
    component : str
        ``"eps1"`` or ``"eps2"``: the component whose residuals exceed the threshold.
    severity : float
        Peak |normalised residual| inside the region [dimensionless, in units of sigma].
    label : str
        ``"moderate"`` or ``"strong"`` (severity >= ``KKTestOptions.strong_severity``).
    deviation_rel : float
        Size of the inconsistency: the largest relative excess deviation of ``component``
        inside the region [fraction of max(|eps|, 1)] (:func:`kkcheck.kk.verdict.sized_region`),
        the smaller of ``deviation_all_rel`` and ``deviation_refit_rel``; NaN until the KK test
        sizes the region. The tolerance is decided on it.
    deviation_all_rel : float
        The size against the fit to all points (a lower bound: that fit is pulled towards the
        fault).
    deviation_refit_rel : float
        The size against the refit without the most severe regions (NaN when no refit was
        reported); it can be inflated where the refit extrapolates into left-out points.
    dn_max, dk_max : float
        Largest |n_data - n_model| and |k_data - k_model| inside the region (NaN until sized).
    exceeds_tolerance : bool
        True when ``deviation_rel`` is above the test's tolerance (only such regions make the
        verdict "inconsistent").
    origin : str
        How the region was found: ``"run"`` (a run of large residuals, the region rule),
        ``"core"`` (the worst part of a run that spread over much of the window) or
        ``"worst_part"`` (the worst energies when only the overall misfit was too large).
    """

    from_ev: float
    to_ev: float
    component: str
    severity: float
    label: str = "moderate"
    deviation_rel: float = float("nan")
    deviation_all_rel: float = float("nan")
    deviation_refit_rel: float = float("nan")
    dn_max: float = float("nan")
    dk_max: float = float("nan")
    exceeds_tolerance: bool = True
    origin: str = "run"

    def to_dict(self) -> dict:
        """The region as summary.json holds it: from_ev, to_ev, component, severity, label,
        deviation_percent (100 x deviation_rel), deviation_all_percent,
        deviation_refit_percent (None without a refit), dn_max, dk_max, exceeds_tolerance,
        origin."""
        return {
            "from_ev": json_float(self.from_ev),
            "to_ev": json_float(self.to_ev),
            "component": self.component,
            "severity": json_float(self.severity),
            "label": self.label,
            "deviation_percent": json_float(100.0 * self.deviation_rel),
            "deviation_all_percent": json_float(100.0 * self.deviation_all_rel),
            "deviation_refit_percent": json_float(100.0 * self.deviation_refit_rel),
            "dn_max": json_float(self.dn_max),
            "dk_max": json_float(self.dk_max),
            "exceeds_tolerance": bool(self.exceeds_tolerance),
            "origin": self.origin,
        }


def find_regions(
    energy_ev,
    z,
    counted,
    component: str,
    options: KKTestOptions,
) -> list[Region]:
    """Regions where the running rms of ``z`` over counted points exceeds the threshold.

    Parameters
    ----------
    energy_ev : array_like
        Energies [eV], non-decreasing.
    z : array_like
        Normalised residuals.
    counted : array_like of bool
        Points taken into account (others are skipped, not zeroed).
    component : str
        Label stored in each region.
    options : KKTestOptions
        Threshold, window and minimum run length.

    Notes
    -----
    rms_i = sqrt(mean_{|j-i| <= W/2} z_j^2) over counted points (mirrored at the ends, so an
    end point is not counted twice); a region is a maximal run of >= ``min_points``
    consecutive counted points with rms_i > ``z_threshold``, after joining neighbouring runs
    separated by at most max(``run_width``, a quarter of their combined length) points; its
    severity is max |z_j| over the run.
    """
    e = np.asarray(energy_ev, float)
    idx = np.nonzero(np.asarray(counted, bool))[0]
    if idx.size == 0:
        return []
    zz = np.asarray(z, float)[idx]
    ms = uniform_filter1d(zz * zz, size=max(1, options.run_width), mode="mirror")
    rms = np.sqrt(np.maximum(ms, 0.0))  # running sums can round to tiny negatives
    over = rms > options.z_threshold
    # close short gaps: two runs separated by at most max(run_width, a quarter of their
    # combined length) points are one fault whose residual crosses zero inside it (or has a
    # flagged point in it)
    d = np.diff(np.r_[0, over.astype(int), 0])
    starts, ends = np.flatnonzero(d == 1), np.flatnonzero(d == -1)  # runs [start, end)
    for r in range(len(starts) - 1):
        gap = starts[r + 1] - ends[r]
        joined = (ends[r] - starts[r]) + (ends[r + 1] - starts[r + 1])
        if gap <= max(options.run_width, joined // 4):
            over[ends[r] : starts[r + 1]] = True
    out = []
    k = 0
    n = over.size
    while k < n:
        if not over[k]:
            k += 1
            continue
        j = k
        while j + 1 < n and over[j + 1]:
            j += 1
        if j - k + 1 >= options.min_points:
            sev = float(np.max(np.abs(zz[k : j + 1])))
            label = "strong" if sev >= options.strong_severity else "moderate"
            out.append(Region(float(e[idx[k]]), float(e[idx[j]]), component, sev, label))
        k = j + 1
    return out
