"""Find spikes, steps and the noise level in a merged spectrum; flag, never delete.

Every detector works per source (the points of one file, in energy order) and per component
in the quantity the source was written in: ``n, k`` for a source read as n,k and
``eps1, eps2`` for one read as eps, because that is where a single bad reading or a detector
changeover shows up as a clean one- or two-point excursion or a jump.

Public surface
--------------
find_spikes, Outlier (:mod:`.outliers`)
    Hampel identifier on leave-one-out local polynomial residuals; :class:`Outlier` records
    (energy, source, component, kind, size).
find_steps, level_steps, level_steps_if_better, StepCorrection (:mod:`.steps`)
    Jumps the local trend does not explain (two opposite ones bounding a local fault are
    one ``"plateau"``, never levelled); the shorter side of a source shifted to meet the
    other, kept on trial only when a score (the KK misfit) drops.
component_rounding, rounding_margin, near_zero, PRECISION_UNITS (:mod:`.precision`)
    Printed precision in n,k or eps1,eps2 units, the margin a spike or step must exceed,
    and the zero bounds (k printed as 0) that levelling never lifts.
smooth, SmoothResult (:mod:`.smooth`)
    LOWESS (any grid) or Savitzky–Golay (uniform grids only); raw values kept beside.
apply_policy (:mod:`.policy`)
    What happens to flagged points: ``keep``, ``downweight`` or ``replace``.
clean, CleanResult (:mod:`.core`)
    The chain: noise, spikes, steps, sigma filling, policy, with notes of everything done.
estimate_noise, noise_per_point, neighbour_noise_sigma, NoiseRegion, NoiseReport, NORMAL_MAD
    Re-exported from :mod:`kkcheck.noise` (the noise module below every stage);
    DOWNWEIGHT_FACTOR from :mod:`kkcheck.options`.

Binning of large spectra for the dense KK fit lives in :mod:`kkcheck.kk.binning`.

References
----------
.. [1] F. R. Hampel, "The influence curve and its role in robust estimation,"
   J. Am. Stat. Assoc. 69(346), 383-393 (1974) (pages from memory).
.. [2] R. K. Pearson, "Outliers in process modeling and identification," IEEE Trans. Control
   Syst. Technol. 10(1), 55-63 (2002) (the Hampel identifier as a data-cleaning filter;
   from memory).
.. [3] W. S. Cleveland, "Robust locally weighted regression and smoothing scatterplots,"
   J. Am. Stat. Assoc. 74(368), 829-836 (1979).
.. [4] A. Savitzky, M. J. E. Golay, "Smoothing and differentiation of data by simplified least
   squares procedures," Anal. Chem. 36(8), 1627-1639 (1964).
"""

from ..noise import (
    NORMAL_MAD,
    NoiseRegion,
    NoiseReport,
    estimate_noise,
    neighbour_noise_sigma,
    noise_per_point,
)
from ..options import DOWNWEIGHT_FACTOR
from .core import CleanResult, clean
from .outliers import Outlier, find_spikes
from .policy import apply_policy
from .precision import PRECISION_UNITS, component_rounding, near_zero, rounding_margin
from .smooth import SmoothResult, smooth
from .steps import StepCorrection, find_steps, level_steps, level_steps_if_better

__all__ = [
    "PRECISION_UNITS",
    "component_rounding",
    "near_zero",
    "rounding_margin",
    "StepCorrection",
    "level_steps",
    "level_steps_if_better",
    "NORMAL_MAD",
    "DOWNWEIGHT_FACTOR",
    "Outlier",
    "NoiseRegion",
    "NoiseReport",
    "SmoothResult",
    "CleanResult",
    "neighbour_noise_sigma",
    "estimate_noise",
    "noise_per_point",
    "find_spikes",
    "find_steps",
    "smooth",
    "apply_policy",
    "clean",
]
