"""The clean stage: noise, spikes, steps, sigma filling and the flagged-point policy."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from ..noise import NoiseReport, _component_names, _source_points, estimate_noise, spectrum_noise
from ..options import DOWNWEIGHT_FACTOR, FlaggedChoice, FlagPolicy
from ..spectrum import Spectrum
from .outliers import Outlier, find_spikes
from .policy import _checked_policy, apply_policy
from .steps import find_steps

__all__ = ["CleanResult", "clean"]


@dataclass(frozen=True)
class CleanResult:
    """Outcome of :func:`clean`.

    Attributes
    ----------
    spectrum : Spectrum
        The input spectrum with SPIKE/STEP flags set, sigma filled from the noise estimate
        where it was NaN, and the policy applied. No point is removed.
    outliers : tuple of Outlier
        Every flagged point, sorted by energy.
    noise : NoiseReport
        Noise level per source, component and region.
    policy : str
        ``"keep"``, ``"downweight"`` or ``"replace"``.
    notes : tuple of str
        Everything done, in words, for the report.
    """

    spectrum: Spectrum
    outliers: tuple[Outlier, ...]
    noise: NoiseReport
    policy: str
    notes: tuple[str, ...]


def _filled_sigma(spectrum: Spectrum) -> tuple[Spectrum, list[str]]:
    """``spectrum`` with NaN sigmas taken from the per-point noise estimate, and a note.

    The estimate is the KK test's (:func:`kkcheck.noise.spectrum_noise`: cubic through four
    neighbours, running median), which curvature biases far less than the chord residuals
    that rank noise per region in :func:`kkcheck.noise.estimate_noise`.
    """
    local = spectrum_noise(spectrum)
    nan1 = np.isnan(spectrum.sigma_eps1)
    nan2 = np.isnan(spectrum.sigma_eps2)
    notes = []
    if nan1.any() or nan2.any():
        notes.append(
            f"sigma of {int(max(nan1.sum(), nan2.sum()))} point(s) not given; taken from the "
            "noise estimate"
        )
    filled = spectrum.replace(
        sigma_eps1=np.where(nan1, local.sigma_eps1, spectrum.sigma_eps1),
        sigma_eps2=np.where(nan2, local.sigma_eps2, spectrum.sigma_eps2),
    )
    return filled, notes


def _policy_notes(n_spikes: int, n_steps: int, policy: str, sigma_factor: float) -> list[str]:
    """What the policy did to the spikes, and why steps are only flagged."""
    notes = []
    if n_spikes and policy == "downweight":
        notes.append(f"spikes down-weighted: sigma x {sigma_factor:g}")
    elif n_spikes and policy == "replace":
        notes.append("spikes replaced by the supplied prediction and flagged 'replaced'")
    if n_steps:
        notes.append(
            "steps are flagged only (one side of each jump is miscalibrated; down-weighting a "
            "point would not fix it)"
        )
    return notes


def _noise_notes(spectrum: Spectrum, noise: NoiseReport) -> list[str]:
    """One line per source: the median noise of each of its components."""
    notes = []
    for s, name, _idx in _source_points(spectrum):
        levels = ", ".join(f"{c} {noise.sigma(name, c):.3g}" for c in _component_names(spectrum, s))
        notes.append(f"noise of {name}: {levels}")
    return notes


def clean(
    spectrum: Spectrum,
    *,
    policy: FlaggedChoice | FlagPolicy = "keep",
    spike_threshold: float = 4.0,
    step_threshold: float = 8.0,
    region_points: int = 200,
    sigma_factor: float = DOWNWEIGHT_FACTOR,
    predictor: Callable[[Spectrum, np.ndarray], np.ndarray] | None = None,
) -> CleanResult:
    """Estimate noise, find spikes and steps, fill unknown sigmas and apply a policy.

    Parameters
    ----------
    spectrum : Spectrum
    policy : {"keep", "downweight", "replace"} or FlagPolicy
        See :func:`kkcheck.clean.apply_policy`.
    spike_threshold, step_threshold : float
        See :func:`kkcheck.clean.find_spikes` and :func:`kkcheck.clean.find_steps`.
    region_points : int
        See :func:`kkcheck.noise.estimate_noise`.
    sigma_factor : float
        See :func:`kkcheck.clean.apply_policy`.
    predictor : callable, optional
        Needed for ``policy="replace"``.

    Returns
    -------
    CleanResult

    Notes
    -----
    Order: noise (:func:`kkcheck.noise.estimate_noise`), spikes (``find_spikes``), steps
    (``find_steps``, with the spikes left out of its fits), NaN sigmas filled from the
    local noise estimate (:func:`kkcheck.noise.spectrum_noise`), then ``apply_policy``. No
    point is removed.

    References
    ----------
    .. [1] F. R. Hampel, "The influence curve and its role in robust estimation,"
       J. Am. Stat. Assoc. 69(346), 383-393 (1974) (pages from memory).
    """
    choice = _checked_policy(policy, predictor)
    noise = estimate_noise(spectrum, region_points=region_points)
    spikes = find_spikes(spectrum, threshold=spike_threshold)
    steps = find_steps(spectrum, threshold=step_threshold, ignore=spikes)
    outliers = tuple(sorted(spikes + steps, key=lambda o: (o.energy_ev, o.kind, o.component)))
    plateaus = [o for o in steps if o.kind == "plateau"]
    notes = [
        f"{len(spikes)} spike(s) and {len(steps) - len(plateaus)} step(s) flagged; no point removed"
    ]
    notes += [
        f"plateau in {o.component} of {o.source} over {o.energy_ev:.4g}-{o.end_energy_ev:.4g} eV "
        f"(jump {o.value - o.expected:+.3g}, back at its end): a local fault, never levelled"
        for o in plateaus
    ]
    filled, fill_notes = _filled_sigma(spectrum)
    notes += fill_notes
    out = apply_policy(
        filled, outliers, choice, sigma_factor=sigma_factor, noise=noise, predictor=predictor
    )
    notes += _policy_notes(len(spikes), len(steps), choice, sigma_factor)
    notes += _noise_notes(spectrum, noise)
    return CleanResult(out, outliers, noise, choice, tuple(notes))
