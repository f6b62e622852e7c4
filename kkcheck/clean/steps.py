"""Steps: jumps between neighbouring points of one source, and levelling them.

A detector or grating changeover shifts one side of a source by a few percent. The detector
fits a local cubic plus a jump at every gap; the levelling shifts one whole side of the
source to meet the other, and :func:`level_steps_if_better` keeps a shift only when a
caller's score (the KK misfit) drops.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Protocol, TypeVar

import numpy as np

from ..jsonsafe import json_float
from ..noise import _components, _running, _source_points, running_noise_sigma
from ..spectrum import Flag, Spectrum
from ..units import eps_to_nk, nk_to_eps
from .outliers import Outlier

__all__ = ["StepCorrection", "find_steps", "level_steps", "level_steps_if_better"]


@dataclass(frozen=True)
class StepCorrection:
    """One detector-changeover step and the level shift applied to remove it.

    Attributes
    ----------
    energy_ev : float
        First point after the jump [eV].
    source : str
        Source the step belongs to.
    component : str
        ``"eps1"``, ``"eps2"``, ``"n"`` or ``"k"``: the quantity that jumped.
    jump : float
        Size of the jump, value after minus trend before [component units].
    relative : float
        ``jump`` over the component's value at the step [dimensionless].
    kept : str
        ``"below"`` or ``"above"``: the side of the step (in energy) left as measured; the
        other side of that source was shifted by the jump.
    points : int
        Number of points shifted.
    reason : str
        Why that side was kept (and, when not applied, why not).
    applied : bool
        False when the caller decided to leave the step as measured (the pipeline does so
        when levelling it does not make the data more KK consistent).
    """

    energy_ev: float
    source: str
    component: str
    jump: float
    relative: float
    kept: str
    points: int
    reason: str
    applied: bool = True

    def to_dict(self) -> dict:
        """The ``step_corrections[*]`` item of summary.json (NaN and infinities become null).

        ``points_shifted`` is 0 for a step left as measured.
        """
        return {
            "energy_ev": json_float(self.energy_ev),
            "source": self.source,
            "component": self.component,
            "jump": json_float(self.jump),
            "relative": json_float(self.relative),
            "kept_side": self.kept,
            "points_shifted": self.points if self.applied else 0,
            "applied": self.applied,
            "reason": self.reason,
        }


# --------------------------------------------------------------------------- detector


def _jump_fit(x, y, w, window: int, deg: int = 3):
    """Fit y = poly_deg(x) + J H(x - x_m) over the ``window`` points each side of every gap.

    For the gap between points g and g+1 (x_m their mid-point) the model is a polynomial of
    degree ``deg`` plus a jump J at x_m, fitted by weighted least squares to points
    g-window+1 .. g+window. Returns (J, variance factor of J, mean square residual) per gap
    (index g); NaN where either side has fewer than 3 usable points.
    """
    n = x.size
    offsets = np.arange(-window + 1, window + 1)
    idx = np.arange(n)[:, None] + offsets[None, :]
    ok = (idx >= 0) & (idx < n)
    idc = np.clip(idx, 0, n - 1)
    W = np.where(ok, w[idc], 0.0)
    xm = np.append(0.5 * (x[:-1] + x[1:]), x[-1])
    scale = np.where(ok, np.abs(x[idc] - xm[:, None]), 0.0).max(1)
    scale = np.where(scale > 0, scale, 1.0)[:, None]
    X = (x[idc] - xm[:, None]) / scale
    H = (offsets > 0).astype(float)[None, :] * np.ones((n, 1))
    V = np.stack([X**p for p in range(deg + 1)] + [H], axis=2)
    A = np.einsum("nm,nmi,nmj->nij", W, V, V)
    b = np.einsum("nm,nmi,nm->ni", W, V, y[idc])
    nl = ((W > 0) & (H == 0)).sum(1)
    nr = ((W > 0) & (H == 1)).sum(1)
    good = (nl >= 3) & (nr >= 3)
    with np.errstate(all="ignore"):
        good &= np.abs(np.linalg.det(A)) > 1e-12
    A[~good] = np.eye(deg + 2)
    b[~good] = 0.0
    coef = np.linalg.solve(A, b[..., None])[..., 0]
    e = np.zeros(deg + 2)
    e[-1] = 1.0
    var = np.linalg.solve(A, np.broadcast_to(e, (n, deg + 2))[..., None])[..., -1, 0]
    res = y[idc] - np.einsum("nmi,ni->nm", V, coef)
    ms = (W * res * res).sum(1) / np.maximum(nl + nr - deg - 2, 1)
    nan = np.full(n, np.nan)
    return np.where(good, coef[:, -1], nan), np.where(good, var, nan), np.where(good, ms, nan)


def _step_gaps(
    x: np.ndarray,
    y: np.ndarray,
    w: np.ndarray,
    *,
    threshold: float,
    window: int,
    noise_window: int,
    max_misfit: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Gaps of one component holding a step: (gap indices g, jumps J per gap, |J|/sd(J)).

    A gap g (between points g and g+1) holds a step when |J|/sd(J) exceeds ``threshold``,
    the cubic-plus-jump model fits within ``max_misfit`` noise sigmas (rms), and |J|/sd(J)
    is the largest within +-``window`` gaps.
    """
    sigma = running_noise_sigma(x, y, noise_window)
    jump, var, ms = _jump_fit(x, y, w, window)
    z = jump / (sigma * np.sqrt(var))
    fit_ok = np.sqrt(ms) < max_misfit * sigma
    az = np.where(np.isfinite(z) & fit_ok, np.abs(z), 0.0)
    az[-1] = 0.0
    peak = az >= _running(np.nanmax, az, window)
    return np.flatnonzero(peak & (az > threshold)), jump, az


def find_steps(
    spectrum: Spectrum,
    *,
    threshold: float = 8.0,
    window: int = 10,
    noise_window: int = 25,
    max_misfit: float = 2.5,
    ignore: Sequence[Outlier] = (),
) -> tuple[Outlier, ...]:
    """Flag jumps between neighbouring points of one source that the local trend does not explain.

    Parameters
    ----------
    spectrum : Spectrum
        Searched per source and component.
    threshold : float
        Minimum |jump| / sd(jump) (default 8).
    window : int
        Points on each side of the gap in the fit (default 10); a step needs this many
        clean points on both sides.
    noise_window : int
        Half-width of the running noise estimate, in points (default 25).
    max_misfit : float
        Both one-sided fits must describe their points to within this many noise sigmas
        (rms); otherwise the change is a feature (a peak, an edge), not a step
        (default 2.5).
    ignore : sequence of Outlier
        Points left out of the fits (pass the spikes found first).

    Returns
    -------
    tuple of Outlier
        ``kind == "step"``, ``index`` the first point after the jump, ``value - expected``
        the jump [component units], ``size`` the jump in sigmas.

    Notes
    -----
    At the gap between points g and g+1 (mid-point x_m) a cubic plus a jump,
    y = a0 + a1 u + a2 u^2 + a3 u^3 + J H(x - x_m), u = (x - x_m)/scale, H the unit step, is
    fitted by least squares to the ``window`` points on each side. The cubic absorbs the
    local trend (curvature included), so J is the part of the change between the two
    neighbours that the trend does not explain; var(J) = s^2 [(A^T A)^-1]_JJ with s the
    local white-noise level (1.4826 x running MAD of neighbour-chord residuals, Hampel
    1974). A step is reported where |J|/sd(J) > threshold, the model's rms residual is
    below max_misfit * s (the points on both sides follow a smooth trend plus one jump,
    not a peak or an edge) and |J|/sd(J) is the largest within +-window gaps. Typical
    cause: a detector or grating changeover, which shifts one side by a few percent.
    On clean noisy spectra (the materials of :func:`kkcheck.clean.find_spikes`, plus a
    narrow phonon) the largest |J|/sd(J) seen was 7.3, hence the default threshold of 8.

    References
    ----------
    .. [1] F. R. Hampel, "The influence curve and its role in robust estimation,"
       J. Am. Stat. Assoc. 69(346), 383-393 (1974) (robust noise scale; pages from memory).
    """
    if threshold <= 0 or window < 4:
        raise ValueError("threshold must be > 0 and window >= 4")
    skip = {(o.index, o.component) for o in ignore}
    out: list[Outlier] = []
    for s, name, idx in _source_points(spectrum):
        if idx.size < 2 * window:
            continue
        x = spectrum.energy_ev[idx]
        for comp, y in _components(spectrum, s, idx):
            w = np.array([0.0 if (int(i), comp) in skip else 1.0 for i in idx])
            gaps, jump, az = _step_gaps(
                x,
                y,
                w,
                threshold=threshold,
                window=window,
                noise_window=noise_window,
                max_misfit=max_misfit,
            )
            for g in gaps:
                j = g + 1
                out.append(
                    Outlier(
                        energy_ev=float(x[j]),
                        source=name,
                        component=comp,
                        kind="step",
                        index=int(idx[j]),
                        value=float(y[j]),
                        expected=float(y[j] - jump[g]),
                        size=float(az[g]),
                    )
                )
    return tuple(sorted(out, key=lambda o: (o.energy_ev, o.component)))


# --------------------------------------------------------------------------- levelling


def _kept_side(spectrum: Spectrum, below: np.ndarray, above: np.ndarray) -> tuple[bool, str]:
    """(keep the lower-energy side?, why): more overlap points decide, else more points."""
    ov = (spectrum.flags & int(Flag.OVERLAP)) != 0
    nb, na = int(np.count_nonzero(ov[below])), int(np.count_nonzero(ov[above]))
    if nb != na:
        return nb > na, "holds more points in overlap with other sources"
    return below.size >= above.size, "holds more points (no overlap decides)"


def _shifted(vals: np.ndarray, component: str, shift: float) -> np.ndarray:
    """Complex eps ``vals`` with ``shift`` added to ``component`` (eps1, eps2, n or k)."""
    if component == "eps1":
        return vals + shift
    if component == "eps2":
        return vals + 1j * shift
    n, k = eps_to_nk(vals)
    if component == "n":
        n = n + shift
    else:
        k = k + shift
    return nk_to_eps(n, k)


def level_steps(
    spectrum: Spectrum, steps: Sequence[Outlier]
) -> tuple[Spectrum, tuple[StepCorrection, ...]]:
    """Remove detected steps by shifting one side of each source to meet the other.

    Parameters
    ----------
    spectrum : Spectrum
        The spectrum the steps were found in (merge output, flags set).
    steps : sequence of Outlier
        Outliers of kind ``"step"`` (from :func:`find_steps` or :func:`kkcheck.clean.clean`);
        others are ignored.

    Returns
    -------
    Spectrum
        A copy with the shifted values; the STEP flag stays on the first point after each
        jump, so the report still shows it.
    tuple of StepCorrection
        One record per step, in energy order, with the shift applied.

    Notes
    -----
    A changeover step is an instrument artefact: one side of the source is offset against
    the other, and left in place it makes eps1 and eps2 KK inconsistent over a wide range
    (the constrained model spreads the misfit), hiding any genuine fault. The side kept as
    measured is the one holding more of the source's points in overlap with other sources
    (Flag.OVERLAP: there the merge checked the source against the others); with no overlap
    on either side, the side with more points. The other side is shifted additively by the
    jump in the component that jumped (n or k for sources written as n,k, then eps is
    recomputed). Shifts of several steps commute, since each moves a whole side.
    Common practice for detector changeovers, no published source.
    """
    eps = np.array(spectrum.eps)
    names = {n: i for i, n in enumerate(spectrum.source_names)}
    records = []
    for st in sorted((o for o in steps if o.kind == "step"), key=lambda o: o.energy_ev):
        idx = np.flatnonzero(spectrum.source == names[st.source])
        pos = int(np.searchsorted(idx, st.index))
        below, above = idx[:pos], idx[pos:]
        keep_below, reason = _kept_side(spectrum, below, above)
        shift, sign = (above, -1.0) if keep_below else (below, 1.0)
        jump = st.value - st.expected
        eps[shift] = _shifted(eps[shift], st.component, sign * jump)
        records.append(
            StepCorrection(
                energy_ev=float(st.energy_ev),
                source=st.source,
                component=st.component,
                jump=float(jump),
                relative=float(jump / st.value) if st.value else float("nan"),
                kept="below" if keep_below else "above",
                points=int(shift.size),
                reason=f"the {'lower' if keep_below else 'higher'}-energy side {reason}",
            )
        )
    return spectrum.replace(eps=eps), tuple(records)


# --------------------------------------------------------------------------- acceptance


class _Scored(Protocol):
    chi2_dof: float


T = TypeVar("T", bound=_Scored)


def level_steps_if_better(
    spectrum: Spectrum,
    steps: Sequence[Outlier],
    test: Callable[[Spectrum], T],
    *,
    max_trials: int = 5,
) -> tuple[Spectrum, tuple[StepCorrection, ...], T]:
    """Level each step on trial and keep the shift only when ``test(...).chi2_dof`` drops.

    Parameters
    ----------
    spectrum : Spectrum
        The spectrum the steps were found in (flags set).
    steps : sequence of Outlier
        Outliers of kind ``"step"`` (as for :func:`level_steps`).
    test : callable
        ``test(spectrum)`` returns an object with a ``chi2_dof`` attribute (the pipeline
        passes the KK test of the binned spectrum); lower is better.
    max_trials : int
        At most this many steps are tried (default 5); the rest are recorded as not tried.

    Returns
    -------
    Spectrum
        ``spectrum`` with the accepted shifts applied.
    tuple of StepCorrection
        One record per step, sorted by energy; ``applied`` is False (with the reason) for
        a step left as measured.
    T
        The result of ``test`` on the returned spectrum.

    Notes
    -----
    A step found by :func:`find_steps` is an instrument artefact when one side of the source
    is offset; but on sparse data a sharp feature can look like a jump, and shifting half a
    source then creates the inconsistency it meant to remove. So the steps are tried one at
    a time, largest relative jump |value - expected| / |value| first, each on the spectrum
    left by the steps accepted before it, and a shift is kept only when the score falls
    strictly below the current one. ``test`` is called once on ``spectrum`` and once per
    step tried. Common practice (accept a correction only if it improves the fit), no
    published source.
    """
    current = spectrum
    score = test(current)
    records = []
    order = sorted(steps, key=lambda o: -abs(o.value - o.expected) / max(abs(o.value), 1e-300))
    for i, st in enumerate(order):
        trial, (rec,) = level_steps(current, [st])
        if i >= max_trials:
            records.append(
                dataclasses.replace(
                    rec, applied=False, reason=f"not tried (> {max_trials} steps)"
                )
            )
            continue
        trial_score = test(trial)
        if trial_score.chi2_dof < score.chi2_dof:
            current, score = trial, trial_score
            records.append(rec)
        else:
            records.append(
                dataclasses.replace(
                    rec,
                    applied=False,
                    reason=f"left as measured: levelling it did not lower the KK chi2/dof "
                    f"({trial_score.chi2_dof:.3g} vs {score.chi2_dof:.3g}), so it may be a "
                    "real feature",
                )
            )
    records.sort(key=lambda r: r.energy_ev)
    return current, tuple(records), score
