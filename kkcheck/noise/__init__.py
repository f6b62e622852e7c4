"""Noise of tabulated optical constants: the one noise package below every stage.

One MAD-to-sigma constant, one noise floor and one minimum point count, used by the merge,
the clean stage, the KK test, the repair and the fit; and the noise model of a table.

Public surface
--------------
NORMAL_MAD, NOISE_FLOOR_REL, NOISE_FLOOR_ABS, MIN_POINTS, noise_floor
    The shared constants and the sigma floor max(rel |v|, abs) (:mod:`.basic`).
neighbour_noise_sigma, running_noise_sigma, local_noise
    White-noise level of one curve from neighbour-chord or cubic residuals (:mod:`.basic`).
estimate_noise, noise_per_point, NoiseRegion, NoiseReport
    Noise per source, component and energy region (the clean stage's report) (:mod:`.basic`).
spectrum_noise, NoiseEstimate, SourceNoise, scatter_sigma, resolution_sigma
    The per-point noise model the KK test weighs by: rounding of the printed digits, stated
    uncertainties, random scatter and the basis resolution, each reported per source
    (:mod:`.model`).

Every per-source estimate works in the quantity the source was written in: ``n, k`` for a
source read as n,k and ``eps1, eps2`` for one read as eps (noise uniform in n,k is not uniform
in eps), and is propagated to eps with :func:`kkcheck.units.sigma_nk_to_eps`.
"""

from .basic import (
    _MIN_CURVE_POINTS,
    MIN_POINTS,
    NOISE_FLOOR_ABS,
    NOISE_FLOOR_REL,
    NORMAL_MAD,
    NoiseRegion,
    NoiseReport,
    _component_names,
    _components,
    _pseudo_residuals,
    _running,
    _source_points,
    estimate_noise,
    local_noise,
    neighbour_noise_sigma,
    noise_floor,
    noise_per_point,
    running_noise_sigma,
)
from .model import NoiseEstimate, SourceNoise, resolution_sigma, scatter_sigma, spectrum_noise

__all__ = [
    "NORMAL_MAD",
    "NOISE_FLOOR_REL",
    "NOISE_FLOOR_ABS",
    "MIN_POINTS",
    "noise_floor",
    "neighbour_noise_sigma",
    "running_noise_sigma",
    "NoiseRegion",
    "NoiseReport",
    "estimate_noise",
    "noise_per_point",
    "NoiseEstimate",
    "SourceNoise",
    "local_noise",
    "scatter_sigma",
    "resolution_sigma",
    "spectrum_noise",
]

# names the clean stage shares (kept importable from kkcheck.noise)
_shared = (
    _MIN_CURVE_POINTS,
    _component_names,
    _components,
    _pseudo_residuals,
    _running,
    _source_points,
)
