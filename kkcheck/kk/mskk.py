"""The MSKK view of the KK test: eps1 rebuilt from the measured eps2, pinned at anchors.

Next to the basis-fit verdict (:mod:`kkcheck.kk.consistency`) this module reports what the
trade's method says: multiply subtractive KK (Palmer et al. 1998; Ahrenkiel 1971 for one
anchor) of the measured eps2, with

* the absorption outside the window taken from the basis fit (its KK partner is
  ``model.eps(w).real - eps_inf - KK_window[model eps2]``), so truncation is modelled and the
  correction polynomial through the anchors only has to absorb eps_inf and what the model
  missed;
* anchors chosen by :func:`choose_view_anchors` (a stated rule) or given (``anchors_ev``),
  one of them held out and predicted from the others (a validation);
* residuals z = (eps1_measured - eps1_MSKK) / sqrt(sigma_eps1^2 + sigma_MSKK^2), with
  sigma_MSKK propagated from the eps2 noise and the anchors' eps1 noise (linear in both);
* a one-sentence statement of where MSKK and the basis fit agree or differ.

The uncertainty of the model's out-of-window absorption is not propagated (a note says so);
the window end points are left out (the PL partner has a log singularity there).

References
----------
.. [1] K. F. Palmer, M. Z. Williams, B. A. Budde, "Multiply subtractive Kramers–Kronig
   analysis of optical data," Appl. Opt. 37, 2660 (1998) (from memory); see
   docs/references.md [Palmer1998] and [SubtractiveCheck].
.. [2] R. K. Ahrenkiel, J. Opt. Soc. Am. 61, 1651 (1971) (from memory); see
   docs/references.md [Ahrenkiel1971].
.. [3] A. B. Kuzmenko, Rev. Sci. Instrum. 76, 083108 (2005) (the basis fit that models the
   outside absorption); see docs/references.md [Kuzmenko2005].
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..jsonsafe import json_float, json_floats
from ..spectrum import Flag, Spectrum, first_of_each_energy, readonly_array
from .kernels import pl_kk_matrix
from .transform import eps2_to_eps1

__all__ = ["MSKKView", "mskk_view", "choose_view_anchors", "EDGE_FRACTION", "N_VIEW_ANCHORS"]

#: Fraction of the w^2 span kept free of anchors at each end of the window.
EDGE_FRACTION = 0.1
#: Anchors the rule chooses (the middle one is held out: the correction is linear in w^2).
N_VIEW_ANCHORS = 3
_Z_LIMIT = 3.0
_ROW_BLOCK = 512


@dataclass(frozen=True)
class MSKKView:
    """MSKK reconstruction of eps1 beside the basis-fit verdict (:func:`mskk_view`).

    Attributes
    ----------
    energy_ev : numpy.ndarray
        Interior points of the analysed spectrum (window ends left out) [eV].
    eps1_measured, sigma_eps1 : numpy.ndarray
        Measured eps1 and its noise (as the KK test used it).
    eps1_mskk, sigma_mskk : numpy.ndarray
        MSKK eps1 and its propagated uncertainty (eps2 noise and anchor eps1 noise).
    z : numpy.ndarray
        (eps1_measured - eps1_mskk) / sqrt(sigma_eps1^2 + sigma_mskk^2); 0 at the anchors.
    anchors_ev, anchors_eps1 : tuple of float
        Anchors used (energy [eV], measured eps1 there).
    rule : str
        How the anchors were chosen.
    holdout_ev, holdout_residual, holdout_z : float
        The held-out anchor, measured minus MSKK eps1 there, and that over its sigma (nan
        when fewer than two anchors were available).
    rms_z, max_abs_z, fraction_above : float
        Statistics of z over the non-anchor points (fraction with |z| > 3).
    regions_ev : tuple of (float, float)
        Runs where the running rms of z exceeds 3 (the rule of :mod:`kkcheck.kk.regions`).
    statement : str
        Where MSKK and the basis fit agree or differ.
    notes : tuple of str
        Cautions.
    """

    energy_ev: np.ndarray
    eps1_measured: np.ndarray
    sigma_eps1: np.ndarray
    eps1_mskk: np.ndarray
    sigma_mskk: np.ndarray
    z: np.ndarray
    anchors_ev: tuple[float, ...]
    anchors_eps1: tuple[float, ...]
    rule: str
    holdout_ev: float
    holdout_residual: float
    holdout_z: float
    rms_z: float
    max_abs_z: float
    fraction_above: float
    regions_ev: tuple[tuple[float, float], ...]
    statement: str
    notes: tuple[str, ...] = ()

    def __post_init__(self):
        for f in ("energy_ev", "eps1_measured", "sigma_eps1", "eps1_mskk", "sigma_mskk", "z"):
            object.__setattr__(self, f, readonly_array(getattr(self, f)))

    def to_dict(self) -> dict:
        """The ``mskk`` block of summary.json."""
        return {
            "method": "mskk-with-basis-fit-outside-absorption",
            "anchors_ev": json_floats(self.anchors_ev),
            "anchors_eps1": json_floats(self.anchors_eps1),
            "anchor_rule": self.rule,
            "held_out": {
                "energy_ev": json_float(self.holdout_ev),
                "residual": json_float(self.holdout_residual),
                "z": json_float(self.holdout_z),
            },
            "rms_z": json_float(self.rms_z),
            "max_abs_z": json_float(self.max_abs_z),
            "fraction_above_3": json_float(self.fraction_above),
            "regions_ev": [json_floats(r) for r in self.regions_ev],
            "statement": self.statement,
            "notes": list(self.notes),
        }


def choose_view_anchors(energy_ev, sigma_eps1, usable, n_anchors: int = N_VIEW_ANCHORS):
    """Indices of anchors by the stated rule; the window is split evenly in w^2.

    Rule (project practice, no source): the correction is a polynomial in w^2, so anchors are
    spread in w^2 (like the Chebyshev spread of :func:`kkcheck.kk.subtractive.choose_anchors`);
    leave :data:`EDGE_FRACTION` of the w^2 span free at each end; split the rest into
    ``n_anchors`` equal parts; in each, take the usable point with the smallest sigma_eps1
    (eps1 best determined), the middle one on ties. Parts without a usable point get no
    anchor.
    """
    e = np.asarray(energy_ev, float)
    s = np.asarray(sigma_eps1, float)
    le = e**2
    lo = le[0] + EDGE_FRACTION * (le[-1] - le[0])
    hi = le[-1] - EDGE_FRACTION * (le[-1] - le[0])
    edges = np.linspace(lo, hi, n_anchors + 1)
    out = []
    for a, b in zip(edges[:-1], edges[1:], strict=True):
        cand = np.flatnonzero(usable & (le >= a) & (le <= b))
        if cand.size:
            best = cand[s[cand] <= s[cand].min() * (1 + 1e-9)]
            out.append(int(best[best.size // 2]))
    return np.unique(np.asarray(out, dtype=int))


def _lagrange_basis(nodes: np.ndarray, w: np.ndarray) -> np.ndarray:
    """(K, Q) Lagrange basis in w^2 through the nodes (columns sum to the interpolant)."""
    p2, w2 = nodes**2, w**2
    out = np.ones((w.size, nodes.size))
    for j in range(nodes.size):
        for k in range(nodes.size):
            if k != j:
                out[:, j] *= (w2 - p2[k]) / (p2[j] - p2[k])
    return out


def _outside_partner(model, x: np.ndarray, w: np.ndarray) -> np.ndarray:
    """KK partner of the model's absorption outside [x_0, x_M] at w (eps_inf removed)."""
    inside = eps2_to_eps1(x, model.eps(x).imag, w, method="exact")
    return model.eps(w).real - model.eps_inf - inside


def _eps2_noise_var(x, s2, w, lag_w, anchors) -> np.ndarray:
    """Variance of the MSKK eps1 from independent eps2 noise: rows of A - L A_anchors."""
    a_anc = pl_kk_matrix(x, anchors)
    var = np.empty(w.size)
    for s in range(0, w.size, _ROW_BLOCK):
        m = pl_kk_matrix(x, w[s : s + _ROW_BLOCK]) - lag_w[s : s + _ROW_BLOCK] @ a_anc
        var[s : s + _ROW_BLOCK] = (m * m) @ (s2 * s2)
    return var


def _reconstruct(x, y1, y2, s1, s2, model, w, anchors_idx):
    """MSKK eps1 at w, and its sigma, from anchors at x[anchors_idx]."""
    a = x[anchors_idx]
    plain = eps2_to_eps1(x, y2, w, method="exact") + _outside_partner(model, x, w)
    plain_a = eps2_to_eps1(x, y2, a, method="exact") + _outside_partner(model, x, a)
    lag = _lagrange_basis(a, w)
    eps1 = plain + lag @ (y1[anchors_idx] - plain_a)
    var = _eps2_noise_var(x, s2, w, lag, a) + (lag**2) @ (s1[anchors_idx] ** 2)
    return eps1, np.sqrt(var)


def _usable(spectrum: Spectrum, keep: np.ndarray, kk) -> np.ndarray:
    bad = int(Flag.SPIKE) | int(Flag.STEP) | int(Flag.KK_REGION)
    ok = (spectrum.flags[keep] & bad) == 0
    e = spectrum.energy_ev[keep]
    for r in kk.regions:
        ok &= ~((e >= r.from_ev) & (e <= r.to_ev))
    ok[[0, -1]] = False
    return ok


def _given_anchors(x, anchors_ev) -> np.ndarray:
    a = np.atleast_1d(np.asarray(anchors_ev, float))
    if np.any(a <= x[0]) or np.any(a >= x[-1]):
        raise InputError(
            f"expected MSKK anchors inside the analysed window ({x[0]:g}, {x[-1]:g}) eV"
        )
    idx = np.unique(np.clip(np.searchsorted(x, a), 1, x.size - 2))
    near = [i if abs(x[i] - v) <= abs(x[i - 1] - v) else i - 1 for i, v in zip(idx, a[: idx.size])]
    return np.unique(np.clip(near, 1, x.size - 2))


def mskk_view(spectrum: Spectrum, kk, anchors_ev=None) -> MSKKView:
    """MSKK eps1 from the measured eps2 of ``spectrum``, with the basis fit ``kk`` outside.

    Parameters
    ----------
    spectrum : Spectrum
        The spectrum the KK test analysed (same points as ``kk.energy_ev``).
    kk : KKTestResult
        The basis-fit test: its model supplies the outside absorption, its sigmas the noise.
    anchors_ev : sequence of float, optional
        Anchor energies [eV] (each snapped to the nearest point); default: the rule of
        :func:`choose_view_anchors`.

    Returns
    -------
    MSKKView

    Notes
    -----
    eps1_MSKK(w) = T(w) + O(w) + sum_j L_j(w^2) [eps1(w_j) - T(w_j) - O(w_j)], T the PL KK
    partner of the measured eps2 on the window, O the partner of the model's outside
    absorption, L_j the Lagrange basis in w^2 through the anchors (Palmer et al. 1998, in
    the form of docs/references.md [QSubtractive]). The middle anchor is held out and
    predicted by the others; the view itself uses all the others.

    References
    ----------
    .. [1] K. F. Palmer, M. Z. Williams, B. A. Budde, Appl. Opt. 37, 2660 (1998) (from
       memory); see docs/references.md [Palmer1998].
    """
    keep = first_of_each_energy(spectrum.energy_ev)
    x = spectrum.energy_ev[keep]
    y1, y2 = spectrum.eps.real[keep], spectrum.eps.imag[keep]
    s1, s2 = kk.sigma_eps1[keep], kk.sigma_eps2[keep]
    if x.size < 8:
        raise InputError("the MSKK view needs at least 8 distinct energies")
    usable = _usable(spectrum, keep, kk)
    if anchors_ev:
        idx = _given_anchors(x, anchors_ev)
        rule = "given (anchors_ev), each at the nearest point"
    else:
        idx = choose_view_anchors(x, s1, usable)
        rule = (
            f"{N_VIEW_ANCHORS} equal parts of the window in w^2 without its outer "
            f"{100 * EDGE_FRACTION:.0f}% at each end; in each, the unflagged point outside "
            "the KK regions with the smallest sigma_eps1"
        )
    if idx.size == 0:
        raise InputError("no usable MSKK anchor inside the window")
    hold, used = _split_holdout(idx)
    w = x[1:-1]
    eps1, sig = _reconstruct(x, y1, y2, s1, s2, kk.model, w, used)
    z = (y1[1:-1] - eps1) / np.hypot(s1[1:-1], sig)
    h_res, h_z = _holdout_check(x, y1, y2, s1, s2, kk.model, hold, used)
    return _view(spectrum, kk, x, y1, s1, eps1, sig, z, used, hold, rule, h_res, h_z)


def _split_holdout(idx: np.ndarray) -> tuple[int | None, np.ndarray]:
    if idx.size < 2:
        return None, idx
    j = (idx.size - 1) // 2 if idx.size > 2 else 1
    return int(idx[j]), np.delete(idx, j)


def _holdout_check(x, y1, y2, s1, s2, model, hold, used) -> tuple[float, float]:
    if hold is None:
        return np.nan, np.nan
    pred, sig = _reconstruct(x, y1, y2, s1, s2, model, x[hold : hold + 1], used)
    res = float(y1[hold] - pred[0])
    return res, res / float(np.hypot(s1[hold], sig[0]))


def _runs(e: np.ndarray, z: np.ndarray, counted: np.ndarray) -> list[tuple[float, float]]:
    from .consistency import KKTestOptions
    from .regions import find_regions

    regs = find_regions(e, z, counted, "eps1", KKTestOptions())
    return [(r.from_ev, r.to_ev) for r in regs]


def _statement(kk, runs, holdout_z: float) -> str:
    fit_bad = [r for r in kk.regions if r.component == "eps1"]
    where = "; ".join(f"{a:.3g}-{b:.3g} eV" for a, b in runs)
    fwhere = "; ".join(f"{r.from_ev:.3g}-{r.to_ev:.3g} eV" for r in fit_bad)
    held = (
        f" The held-out anchor is predicted within {abs(holdout_z):.1f} sigma."
        if np.isfinite(holdout_z)
        else ""
    )
    if not runs and not fit_bad:
        return (
            "MSKK and the basis fit agree: eps1 follows from the measured eps2 within the "
            "propagated uncertainty." + held
        )
    if runs and fit_bad:
        return f"Both methods find eps1 off: MSKK at {where}, the basis fit at {fwhere}." + held
    if runs:
        return (
            f"They differ: MSKK finds eps1 off at {where} where the basis fit does not "
            "(MSKK trusts the measured eps2 point by point and the anchors; noise or a "
            "fault in eps2 shows up here)." + held
        )
    return (
        f"They differ: the basis fit finds eps1 off at {fwhere} but MSKK does not "
        "(the anchors' polynomial can absorb a smooth fault)." + held
    )


def _view(spectrum, kk, x, y1, s1, eps1, sig, z, used, hold, rule, h_res, h_z) -> MSKKView:
    w = x[1:-1]
    counted = np.ones(w.size, bool)
    counted[np.isin(np.arange(1, x.size - 1), used)] = False
    zc = z[counted]
    runs = _runs(w, np.where(counted, z, 0.0), counted)
    notes = [
        "the uncertainty of the basis fit's outside absorption is not propagated",
        "window end points left out (log singularity of the PL partner)",
    ]
    if hold is None:
        notes.append("fewer than two anchors: nothing held out")
    return MSKKView(
        energy_ev=w,
        eps1_measured=y1[1:-1],
        sigma_eps1=s1[1:-1],
        eps1_mskk=eps1,
        sigma_mskk=sig,
        z=z,
        anchors_ev=tuple(float(v) for v in x[used]),
        anchors_eps1=tuple(float(v) for v in y1[used]),
        rule=rule,
        holdout_ev=float(x[hold]) if hold is not None else np.nan,
        holdout_residual=h_res,
        holdout_z=h_z,
        rms_z=float(np.sqrt(np.mean(zc**2))) if zc.size else np.nan,
        max_abs_z=float(np.max(np.abs(zc))) if zc.size else np.nan,
        fraction_above=float(np.mean(np.abs(zc) > _Z_LIMIT)) if zc.size else np.nan,
        regions_ev=tuple(runs),
        statement=_statement(kk, runs, h_z),
        notes=tuple(notes),
    )
