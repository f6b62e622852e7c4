"""Numbers -> physics: axis to photon energy, values to eps, checks, order and duplicates.

* **Axis.** Values must be > 0 and give a finite positive photon energy; further axis columns
  must give the same energies within a relative 1e-6; not every axis value may be equal.
* **Both n,k and eps1,eps2 present:** eps1,eps2 are used, and n,k must agree with them within
  a relative 1e-3 of ``|eps|`` (rounding in the file).
* **Negative n.** An n column negative on half its rows or more is an error; a few negative n
  are kept with a RuntimeWarning.
* **Uncertainties** must be >= 0; given for n,k they propagate to eps to first order.
* **Order.** When the axis was not already ascending *in the file's own unit*, a note says
  it was descending or unsorted.
* **Duplicate energies.** Rows with the same energy whose values are identical are collapsed
  to the first of them; rows whose values differ are averaged (in the quantity the file gave)
  with uncertainties combined as sqrt(sum sigma_i^2)/m and a note naming the lines.
"""

from __future__ import annotations

import warnings

import numpy as np

from ..errors import InputError
from ..units import TYPICAL_ENERGY_EV, eps_to_nk, nk_to_eps, sigma_nk_to_eps, to_energy_ev
from .cells import Parsed
from .layout import Layout

__all__ = [
    "MIN_POINTS",
    "check_axis",
    "values_to_eps",
    "order_note",
    "collapse",
    "first_of_runs",
    "lines_text",
    "axis_plausibility",
    "check_magnitude",
]

#: Fewest distinct axis values a table must have.
MIN_POINTS = 3
_AXIS_WORD = {
    "energy_ev": "photon energy",
    "wavelength_nm": "wavelength",
    "wavelength_um": "wavelength",
    "wavenumber_cm-1": "wavenumber",
    "frequency_thz": "frequency",
    "angular_frequency_rad_s": "angular frequency",
    "wavelength_angstrom": "wavelength",
    "energy_mev": "photon energy",
    "frequency_hz": "frequency",
}
#: Photon energies [eV] no optical-constant table can hold: 1e-20 eV is a period of ~5 days,
#: 1e7 eV is beyond pair production (common practice, no source).
ABSURD_ENERGY_EV = (1e-20, 1e7)
#: Largest |eps| accepted above 0.1 eV; below, (100 eV / E)^2, the Drude bound
#: |eps| <~ (hbar omega_p / E)^2 with hbar omega_p <= 100 eV, well above any metal's ~15 eV
#: (Drude free-electron model, e.g. Ashcroft & Mermin, Solid State Physics, 1976, ch. 1;
#: from memory).
MAX_ABS_EPS = 1e6
#: Axis units that differ only by a factor (a typo of unit shows as the whole table shifted).
_SAME_KIND = {
    "wavelength_nm": ("wavelength_um", "wavelength_angstrom"),
    "wavelength_um": ("wavelength_nm",),
    "wavelength_angstrom": ("wavelength_nm",),
    "energy_ev": ("energy_mev",),
    "energy_mev": ("energy_ev",),
    "frequency_thz": ("frequency_hz",),
    "frequency_hz": ("frequency_thz",),
    "wavenumber_cm-1": (),
    "angular_frequency_rad_s": (),
}
_NK_EPS_RTOL = 1e-3
_AXIS_RTOL = 1e-6


def _first(mask: np.ndarray) -> int:
    return int(np.flatnonzero(mask)[0])


def lines_text(lines, limit: int = 6) -> str:
    """Line numbers as text, the first ``limit`` of them and how many more."""
    lines = [str(int(x)) for x in lines]
    if len(lines) > limit:
        return ", ".join(lines[:limit]) + f" and {len(lines) - limit} more"
    return ", ".join(lines)


def check_axis(p: Parsed, lay: Layout, shown: str) -> np.ndarray:
    """Photon energy [eV] of every row, file order, after the axis checks."""
    word = _AXIS_WORD[lay.axis]
    x = p.axis_values
    bad = x <= 0
    if bad.any():
        i = _first(bad)
        raise InputError(
            f"non-positive {word} {x[i]:g} in column {lay.axis_col + 1}; expected values > 0",
            shown,
            int(p.lines[i]),
        )
    with np.errstate(over="ignore", divide="ignore"):
        energy = to_energy_ev(x, lay.axis)
    bad = ~np.isfinite(energy) | (energy <= 0)
    if bad.any():
        i = _first(bad)
        raise InputError(
            f"{word} {x[i]:g} gives no finite positive photon energy; expected a usable value",
            shown,
            int(p.lines[i]),
        )
    lo, hi = ABSURD_ENERGY_EV
    bad = (energy < lo) | (energy > hi)
    if bad.any():
        i = _first(bad)
        raise InputError(
            f"{word} {x[i]:g} in column {lay.axis_col + 1} gives {energy[i]:.3g} eV, outside "
            f"any optical measurement ({lo:g} to {hi:g} eV); check the value and the "
            "column's unit",
            shown,
            int(p.lines[i]),
        )
    for (col, unit), values in zip(lay.extra_axes, p.extra_axes, strict=True):
        with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
            other = to_energy_ev(values, unit)
            off = ~(np.abs(other - energy) <= _AXIS_RTOL * energy)
        if off.any():
            i = _first(off)
            raise InputError(
                f"axis columns {lay.axis_col + 1} ({lay.names[lay.axis_col]}) and {col + 1} "
                f"({lay.names[col]}) disagree; expected the same photon energy",
                shown,
                int(p.lines[i]),
            )
    if energy.size >= 2 and np.all(energy == energy[0]):
        raise InputError(
            f"all {energy.size} axis values are equal ({x[0]:g}); expected at least "
            f"{MIN_POINTS} distinct values",
            shown,
            int(p.lines[0]),
        )
    return energy


def _check_negative_n(p: Parsed, lay: Layout, shown: str) -> None:
    """Refuse an n column that is mostly negative; warn about a few negative n.

    N = n + i k with n >= 0 in either time convention (exp(+iwt) tables flip the sign of k,
    not of n), so a negative n is a sign or column error: squared, it turns eps2 negative and
    the KK test then reports the whole spectrum inconsistent by orders of magnitude.
    """
    n = p.v1 if lay.quantity == "nk" else (p.nk_check[0] if p.nk_check is not None else None)
    if n is None:
        return
    neg = n < 0
    if not neg.any():
        return
    i = _first(neg)
    if np.mean(neg) >= 0.5:
        raise InputError(
            f"negative refractive index n = {n[i]:g} ({int(neg.sum())} of {n.size} rows); "
            "expected n >= 0 (N = n + i k; an exp(+iwt) table changes the sign of k, not n)",
            shown,
            int(p.lines[i]),
        )
    # stacklevel 3: this function <- values_to_eps <- read_table
    warnings.warn(
        f"{shown}: negative refractive index n on {int(neg.sum())} row(s) (lines "
        f"{lines_text(p.lines[neg])}); kept as measured, but (n + i k)^2 then has eps2 < 0 "
        "there",
        RuntimeWarning,
        stacklevel=3,
    )


def values_to_eps(p: Parsed, lay: Layout, shown: str):
    """(eps, sigma_eps1, sigma_eps2) of every row as written (file order, file convention).

    Notes
    -----
    Values given as n,k become eps = (n + i k)^2; their uncertainties propagate to first
    order (:func:`kkcheck.units.sigma_nk_to_eps`).
    """
    _check_negative_n(p, lay, shown)
    with np.errstate(over="ignore", invalid="ignore"):
        if lay.quantity == "nk":
            eps = nk_to_eps(p.v1, p.v2)
        else:
            eps = p.v1 + 1j * p.v2
        bad = ~np.isfinite(eps)
    if bad.any():
        i = _first(bad)
        raise InputError(
            "values too large: eps1 or eps2 is not a finite number; expected moderate values",
            shown,
            int(p.lines[i]),
        )
    if p.nk_check is not None:
        with np.errstate(over="ignore", invalid="ignore"):
            other = nk_to_eps(*p.nk_check)
            off = ~(np.abs(other - eps) <= _NK_EPS_RTOL * np.maximum(np.abs(eps), 1e-12))
        if off.any():
            i = _first(off)
            raise InputError(
                "columns n,k and eps1,eps2 disagree ((n+ik)^2 != eps1+i eps2 within 1e-3); "
                "expected one pair, or both describing the same data",
                shown,
                int(p.lines[i]),
            )
    if p.s1 is None:
        return eps, None, None
    s1, s2 = _sigmas_to_eps(p, lay, eps, shown)
    return eps, s1, s2


def _sigmas_to_eps(p: Parsed, lay: Layout, eps: np.ndarray, shown: str):
    """Uncertainties of eps1, eps2 from the uncertainty columns (checked >= 0)."""
    for s in (p.s1, p.s2):
        bad = s < 0
        if bad.any():
            i = _first(bad)
            raise InputError(
                f"negative uncertainty {s[i]:g}; expected a standard uncertainty >= 0",
                shown,
                int(p.lines[i]),
            )
    if lay.sigma_kind == "eps":
        return p.s1.copy(), p.s2.copy()
    n, k = (p.v1, p.v2) if lay.quantity == "nk" else eps_to_nk(eps)
    with np.errstate(over="ignore", invalid="ignore"):
        s1, s2 = sigma_nk_to_eps(n, k, p.s1, p.s2)
        bad = np.isinf(s1) | np.isinf(s2)
    if bad.any():
        i = _first(bad)
        raise InputError(
            "uncertainty too large to propagate to eps; expected moderate values",
            shown,
            int(p.lines[i]),
        )
    return s1, s2


def order_note(x: np.ndarray, lines: np.ndarray) -> str | None:
    """A note when axis values ``x`` (file order, file unit) were not ascending."""
    d = np.diff(x)
    if np.all(d >= 0):
        return None
    if np.all(d <= 0):
        return "sorted: axis was descending in the file"
    i = _first(d < 0) + 1
    return f"sorted: axis was not monotonic in the file (line {lines[i]} goes back)"


def first_of_runs(sorted_values: np.ndarray) -> np.ndarray:
    """Index of the first element of each run of equal values in a sorted array.

    The same as ``np.unique(x, return_index=True)[1]`` on sorted finite ``x``, without
    sorting again (1e6 rows).
    """
    new = np.empty(sorted_values.size, dtype=bool)
    new[:1] = True
    np.not_equal(sorted_values[1:], sorted_values[:-1], out=new[1:])
    return np.flatnonzero(new)


def collapse(energy, eps, s1, s2, lines, raw_values, lay: Layout, conj: bool):
    """Apply the duplicate rule to energy-sorted arrays; return arrays and notes.

    ``raw_values`` holds the numbers as written (columns v1, v2[, s1, s2]). Differing rows are
    averaged on them, uncertainties combined as sqrt(sum s_i^2)/m in the file's own
    quantity, and the average converted to eps like a single row (conjugated when ``conj``).
    """
    start = first_of_runs(energy)
    counts = np.diff(np.append(start, energy.size))
    uniq = energy[start]
    if uniq.size == energy.size:
        return energy, eps, s1, s2, lines, []
    same_groups, avg_groups = [], []
    keep_eps = eps[start].copy()
    keep_s1 = None if s1 is None else s1[start].copy()
    keep_s2 = None if s2 is None else s2[start].copy()
    for g, (a, m) in enumerate(zip(start, counts, strict=True)):
        if m == 1:
            continue
        sl = slice(a, a + m)
        block = raw_values[sl]
        if np.all((block == block[0]) | (np.isnan(block) & np.isnan(block[0]))):
            same_groups.append(lines[sl])
            continue
        avg_groups.append(lines[sl])
        v1, v2 = block[:, 0].mean(), block[:, 1].mean()
        avg = complex(nk_to_eps(v1, v2)) if lay.quantity == "nk" else complex(v1, v2)
        keep_eps[g] = np.conj(avg) if conj else avg
        if keep_s1 is not None:
            t1, t2 = (np.sqrt(np.sum(block[:, c] ** 2)) / m for c in (2, 3))
            if lay.sigma_kind == "nk":
                n, k = (v1, v2) if lay.quantity == "nk" else eps_to_nk(avg)
                t1, t2 = sigma_nk_to_eps(n, k, t1, t2)
            keep_s1[g], keep_s2[g] = t1, t2
    notes = _duplicate_notes(same_groups, avg_groups)
    return uniq, keep_eps, keep_s1, keep_s2, lines[start], notes


def _duplicate_notes(same_groups: list, avg_groups: list) -> list[str]:
    """Provenance notes for collapsed (identical) and averaged (differing) duplicate groups."""
    notes = []
    if same_groups:
        n_drop = sum(len(g) - 1 for g in same_groups)
        desc = "; ".join(lines_text(g) for g in same_groups[:5])
        more = f"; and {len(same_groups) - 5} more groups" if len(same_groups) > 5 else ""
        notes.append(
            f"duplicates: {n_drop} row(s) repeating an earlier row at the same axis value were "
            f"collapsed to the first (lines {desc}{more})"
        )
    if avg_groups:
        desc = "; ".join(lines_text(g) for g in avg_groups[:5])
        more = f"; and {len(avg_groups) - 5} more groups" if len(avg_groups) > 5 else ""
        notes.append(
            f"duplicates: rows at the same axis value with different values were averaged "
            f"(lines {desc}{more})"
        )
    return notes


def axis_plausibility(energy: np.ndarray, p: Parsed, lay: Layout, shown: str) -> list[str]:
    """Notes (and a RuntimeWarning) when most energies lie outside the axis unit's usual range.

    :data:`kkcheck.units.TYPICAL_ENERGY_EV` gives the range per unit. A wavelength column
    headed nm over values 0.3-1.7 (micrometres) gives 730-4100 eV: read, but the note and the
    warning say what to check, and name a unit of the same kind that would fit.
    """
    lo, hi = TYPICAL_ENERGY_EV[lay.axis]
    outside = (energy < lo) | (energy > hi)
    if np.mean(outside) <= 0.5:
        return []
    x = p.axis_values
    fits = []
    for other in _SAME_KIND.get(lay.axis, ()):
        e2 = to_energy_ev(x, other)
        a, b = TYPICAL_ENERGY_EV[other]
        if np.mean((e2 < a) | (e2 > b)) <= 0.5:
            fits.append(other)
    hint = f" (in {fits[0]} they would give {_range_ev(to_energy_ev(x, fits[0]))})" if fits else ""
    text = (
        f"plausibility: the axis is read as {lay.axis}, but its values {x.min():g} to "
        f"{x.max():g} give {_range_ev(energy)}, outside the usual {lo:g} to {hi:g} eV of "
        f"{lay.axis} tables; check the column's unit{hint}"
    )
    # stacklevel 3: this function <- read_table <- its caller
    warnings.warn(f"{shown}: {text}", RuntimeWarning, stacklevel=3)
    return [text]


def _range_ev(e: np.ndarray) -> str:
    return f"{float(np.min(e)):.3g} to {float(np.max(e)):.3g} eV"


def check_magnitude(eps: np.ndarray, energy: np.ndarray, lines: np.ndarray, shown: str) -> None:
    """Refuse |eps| beyond any material: :data:`MAX_ABS_EPS`, or (100 eV / E)^2 below 0.1 eV.

    One mistyped exponent (an eps2 of 1e150) would otherwise set the noise scale of its
    neighbours and let the KK test call anything consistent.
    """
    bound = np.maximum(MAX_ABS_EPS, (100.0 / energy) ** 2)
    bad = np.abs(eps) > bound
    if bad.any():
        i = _first(bad)
        raise InputError(
            f"|eps| = {abs(eps[i]):.3g} at {energy[i]:.4g} eV is beyond any material (expected "
            f"|eps| <= {bound[i]:.3g} there); check this row for a typo or a misplaced exponent",
            shown,
            int(lines[i]),
        )
