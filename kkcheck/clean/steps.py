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
from .precision import component_rounding, near_zero, rounding_margin

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
    g-window+1 .. g+window. Returns (J, variance factor of J, mean square residual,
    sum_j |c_j| with J = sum_j c_j y_j) per gap (index g); NaN where either side has fewer
    than 3 usable points.
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
    ainv_e = np.linalg.solve(A, np.broadcast_to(e, (n, deg + 2))[..., None])[..., 0]
    var = ainv_e[:, -1]
    csum = np.abs(W * np.einsum("nmi,ni->nm", V, ainv_e)).sum(1)
    res = y[idc] - np.einsum("nmi,ni->nm", V, coef)
    ms = (W * res * res).sum(1) / np.maximum(nl + nr - deg - 2, 1)
    nan = np.full(n, np.nan)
    return (
        np.where(good, coef[:, -1], nan),
        np.where(good, var, nan),
        np.where(good, ms, nan),
        np.where(good, csum, nan),
    )


def _step_gaps(
    x: np.ndarray,
    y: np.ndarray,
    w: np.ndarray,
    rounding: np.ndarray,
    *,
    threshold: float,
    window: int,
    noise_window: int,
    max_misfit: float,
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """Gaps of one component holding a step: (gap indices g, jumps J per gap, |J|/sd(J)).

    A gap g (between points g and g+1) holds a step when |J|/sd(J) exceeds ``threshold``,
    |J| exceeds the printed precision (:func:`kkcheck.clean.precision.rounding_margin` of
    the points in the fit), the cubic-plus-jump model fits within ``max_misfit`` noise
    sigmas (rms), and |J|/sd(J) is the largest within +-``window`` gaps. ``rounding`` (the
    printed-precision standard uncertainty per point, zeros when unknown) floors the noise.
    """
    sigma = np.maximum(running_noise_sigma(x, y, noise_window), rounding)
    jump, var, ms, csum = _jump_fit(x, y, w, window)
    u_near = _running(np.nanmax, np.append(rounding, rounding[-1]), window)[1:]
    printed = np.abs(jump) > rounding_margin(u_near, csum)
    z = jump / (sigma * np.sqrt(var))
    fit_ok = np.sqrt(ms) < max_misfit * sigma
    az = np.where(np.isfinite(z) & fit_ok & printed, np.abs(z), 0.0)
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
        the jump [component units], ``size`` the jump in sigmas; or ``kind == "plateau"``
        for two neighbouring opposite jumps (see Notes).

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

    Printed precision: the noise level s is floored at the rounding standard uncertainty u
    of the points (q / sqrt(12) for a last printed digit of unit q, from the Spectrum's
    rounding fields, taken back to n and k for an n,k source), and |J| must exceed
    max(3 q, (q/2) sum_j |c_j|), with J = sum_j c_j y_j the least-squares jump
    (:func:`kkcheck.clean.precision.rounding_margin`): the worst that rounding alone can do
    to J. A smooth curve printed with few digits is a staircase whose risers are one unit
    of the last digit; they are not steps, however small the scatter between them (the
    chord noise of a staircase is nearly zero, which once gave 1e6-1e8 sigma "steps").

    Plateaus: two neighbouring jumps of one component with opposite signs, the second
    undoing the first to within :data:`PLATEAU_RETURN` of the larger, bound a run of
    points lifted or lowered against both sides: a local fault, not a calibration offset of
    one side. They are returned as one ``"plateau"`` record (energy range, jump into it)
    and never levelled (:func:`level_steps` only shifts ``"step"`` records), because
    shifting one outer side to meet the plateau would move the values that were right.
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
        roundings = component_rounding(spectrum, s, idx)
        for (comp, y), u in zip(_components(spectrum, s, idx), roundings, strict=True):
            w = np.array([0.0 if (int(i), comp) in skip else 1.0 for i in idx])
            gaps, jump, az = _step_gaps(
                x,
                y,
                w,
                u,
                threshold=threshold,
                window=window,
                noise_window=noise_window,
                max_misfit=max_misfit,
            )
            found = [
                Outlier(
                    energy_ev=float(x[g + 1]),
                    source=name,
                    component=comp,
                    kind="step",
                    index=int(idx[g + 1]),
                    value=float(y[g + 1]),
                    expected=float(y[g + 1] - jump[g]),
                    size=float(az[g]),
                )
                for g in gaps
            ]
            out += _paired_plateaus(found, spectrum.energy_ev, idx)
    return tuple(sorted(out, key=lambda o: (o.energy_ev, o.component)))


#: Two neighbouring opposite jumps bound a plateau when the second undoes the first to
#: within this fraction of the larger one (common practice, no source).
PLATEAU_RETURN = 0.5


def _paired_plateaus(steps: list[Outlier], energy_ev: np.ndarray, idx: np.ndarray):
    """``steps`` (one source and component, in energy order) with each pair of neighbouring
    opposite jumps of similar size replaced by one ``"plateau"`` record.

    The pair (a, b) is a plateau when the jumps have opposite signs and |J_a + J_b| <=
    :data:`PLATEAU_RETURN` max(|J_a|, |J_b|): the values leave a level and come back to it.
    """
    out: list[Outlier] = []
    i = 0
    while i < len(steps):
        a = steps[i]
        b = steps[i + 1] if i + 1 < len(steps) else None
        if b is not None:
            ja, jb = a.value - a.expected, b.value - b.expected
            if ja * jb < 0 and abs(ja + jb) <= PLATEAU_RETURN * max(abs(ja), abs(jb)):
                last = idx[int(np.searchsorted(idx, b.index)) - 1]
                out.append(
                    dataclasses.replace(
                        a,
                        kind="plateau",
                        size=min(a.size, b.size),
                        end_energy_ev=float(energy_ev[last]),
                        end_index=int(b.index),
                    )
                )
                i += 2
                continue
        out.append(a)
        i += 1
    return out


# --------------------------------------------------------------------------- levelling


def _kept_side(spectrum: Spectrum, below: np.ndarray, above: np.ndarray) -> tuple[bool, str]:
    """(keep the lower-energy side?, why): the side with more points is kept."""
    keep_below = below.size >= above.size
    kept = below if keep_below else above
    n_ov = int(np.count_nonzero((spectrum.flags[kept] & int(Flag.OVERLAP)) != 0))
    if n_ov:
        return keep_below, f"holds more points and all {n_ov} in overlap with other sources"
    return keep_below, "holds more points (no overlap decides)"


def _refusal(
    spectrum: Spectrum, s: int, shift: np.ndarray, kept: np.ndarray, component: str
) -> str | None:
    """Why the points ``shift`` of source ``s`` must not be moved, or None when they may.

    Refused: the side to shift lies in overlap with other sources (there the merge checked
    it against them: it agrees, or its disagreement is the merge's to report), or, for k or
    eps2, it holds zero bounds (:func:`kkcheck.clean.precision.near_zero`) that the shift
    would lift off zero.
    """
    ov = (spectrum.flags & int(Flag.OVERLAP)) != 0
    n_ov = int(np.count_nonzero(ov[shift]))
    if n_ov:
        kept_ov = int(np.count_nonzero(ov[kept]))
        return (
            f"not levelled: the shorter side has {n_ov} point(s) in overlap with other "
            f"sources (the longer side {kept_ov}); shifting it would move values checked "
            "against another source, shifting the longer side would move more values"
        )
    zero = near_zero(spectrum, s, shift, component)
    if zero.any():
        return (
            f"not levelled: the shorter side holds {int(zero.sum())} {component} value(s) "
            "printed as 0 or within one unit of their last digit of 0 (below a band gap, "
            "a bound); levelling would lift them off zero"
        )
    return None


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
    (the constrained model spreads the misfit), hiding any genuine fault. Only the shorter
    side (fewer points; on a tie the higher-energy side) is shifted, additively by the jump
    in the component that jumped (n or k for sources written as n,k, then eps is
    recomputed), so that the fewest values move. A step is not levelled, and its record
    says why (``applied`` False), when the shorter side

    * has points in overlap with other sources (Flag.OVERLAP): there the merge checked the
      source against the others, and shifting the longer side instead would move more
      values than the step explains;
    * for a step in k or eps2, holds values printed as 0 or within one unit of their last
      digit of 0 (:func:`kkcheck.clean.precision.near_zero`): below a band gap k is a bound,
      and no level shift may lift it off zero.

    Steps in n or eps1 never change k or eps2. Plateaus (kind ``"plateau"``, two opposite
    jumps bounding a local fault) are never levelled. Shifts of several steps commute,
    since each moves a whole side.
    Common practice for detector changeovers, no published source.
    """
    eps = np.array(spectrum.eps)
    names = {n: i for i, n in enumerate(spectrum.source_names)}
    records = []
    for st in sorted((o for o in steps if o.kind == "step"), key=lambda o: o.energy_ev):
        s = names[st.source]
        idx = np.flatnonzero(spectrum.source == s)
        pos = int(np.searchsorted(idx, st.index))
        below, above = idx[:pos], idx[pos:]
        keep_below, reason = _kept_side(spectrum, below, above)
        (shift, kept), sign = ((above, below), -1.0) if keep_below else ((below, above), 1.0)
        jump = st.value - st.expected
        refused = _refusal(spectrum, s, shift, kept, st.component)
        if refused is None:
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
                reason=refused or f"the {'lower' if keep_below else 'higher'}-energy side {reason}",
                applied=refused is None,
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
    tried = 0
    for st in order:
        trial, (rec,) = level_steps(current, [st])
        if not rec.applied:  # refused by the levelling rules: nothing to try
            records.append(rec)
            continue
        if tried >= max_trials:
            records.append(
                dataclasses.replace(rec, applied=False, reason=f"not tried (> {max_trials} steps)")
            )
            continue
        tried += 1
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
