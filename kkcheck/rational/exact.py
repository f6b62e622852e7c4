"""Exact (integer-arithmetic) passivity decision for a pole-pair model: Sturm's theorem on P(u).

For a model with stable poles, eps2(w) = w P(u) / Q(u) with u = w^2 and Q(u) > 0 for u > 0, so
eps2 >= 0 on the whole axis 0 < w < inf exactly when P(u) >= 0 on u > 0. Every float is a
dyadic rational, so the model's parameters (as stored, float64) scale to integers by one power
of two, P gets integer coefficients, and the number of distinct roots of P on (0, inf) is
counted exactly by a Sturm sequence in integer arithmetic (primitive pseudo-remainders). No
rounding happens anywhere, so the decision holds for the stored parameters without a tolerance.

References
----------
.. [1] C. Sturm, "Memoire sur la resolution des equations numeriques," Bulletin des Sciences
   de Ferussac 11, 419-425 (1829) (from memory); see docs/references.md [Sturm1829].
.. [2] G. E. Collins, "Subresultants and reduced polynomial remainder sequences," J. ACM 14(1),
   128-142 (1967) (primitive remainder sequences; from memory); see docs/references.md
   [Collins1967].
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

__all__ = [
    "ExactDecision",
    "exact_numerator",
    "positive_root_count",
    "decide_passive",
    "float_margin",
]


@dataclass(frozen=True)
class ExactDecision:
    """Outcome of :func:`decide_passive`.

    Attributes
    ----------
    passive : bool
        True when P(u) > 0 for every u > 0 (or P is identically zero: lossless), decided in
        exact integer arithmetic for the model's float64 parameters.
    positive_roots : int
        Distinct roots of P on (0, inf) (Sturm count); a root of even multiplicity (eps2
        touching zero) also counts, so such a model is not certified.
    lossless : bool
        P is identically zero (eps2 = 0 everywhere).
    degree : int
        Degree of P in u = w^2.
    """

    passive: bool
    positive_roots: int
    lossless: bool
    degree: int


def _ints(values) -> tuple[list[int], int]:
    """Integers m_i and exponent e with values[i] = m_i * 2**e exactly (floats are dyadic)."""
    fr = [float(v).as_integer_ratio() for v in values]
    e = min((-(d.bit_length() - 1) for _, d in fr), default=0)
    return [n * (1 << (-(d.bit_length() - 1) - e)) for n, d in fr], e


def _mul(p: list[int], q: list[int]) -> list[int]:
    out = [0] * (len(p) + len(q) - 1)
    for i, a in enumerate(p):
        if a:
            for j, b in enumerate(q):
                out[i + j] += a * b
    return out


def _add(p: list[int], q: list[int]) -> list[int]:
    if len(p) < len(q):
        p, q = q, p
    out = list(p)
    for i, b in enumerate(q):
        out[i] += b
    return out


def _trim(p: list[int]) -> list[int]:
    while len(p) > 1 and p[-1] == 0:
        p = p[:-1]
    return p


def exact_numerator(model) -> list[int]:
    """Integer coefficients (lowest degree first) of P(u), eps2 = w P(w^2) / Q(w^2) up to scale.

    Notes
    -----
    All energies (poles, residues, conductor residue) are written as integers times 2**e with
    one common e; eps2 is unchanged when every energy is scaled by the same factor, so P of the
    scaled integers has the signs of the true P. Per pair a = -al + i be, residue c:
    N = (2 al b0 - b1 w0^2) + b1 u, D = u^2 + (4 al^2 - 2 w0^2) u + w0^4 with b1 = 2 Re c,
    b0 = 2 (al Re c - be Im c), w0^2 = al^2 + be^2 (the loss in
    :class:`~kkcheck.rational.model.PolePairModel`); real pole: N = 2 c, D = al^2 + u;
    conductor: N = 2 c_0, D = u. P = sum_p N_p prod_{q != p} D_q.
    """
    vals = []
    for a, c in zip(model.poles, model.residues, strict=True):
        vals += [-a.real, a.imag, c.real, c.imag]
    if model.conductor_residue is not None:
        vals.append(model.conductor_residue)
    ints, _ = _ints(vals)
    facs = []
    k = 0
    for a in model.poles:
        al, be, cr, ci = ints[k : k + 4]
        k += 4
        if a.imag != 0:
            w02 = al * al + be * be
            b1, b0 = 2 * cr, 2 * (al * cr - be * ci)
            facs.append(([2 * al * b0 - b1 * w02, b1], [w02 * w02, 4 * al * al - 2 * w02, 1]))
        else:
            facs.append(([2 * cr], [al * al, 1]))
    if model.conductor_residue is not None:
        facs.append(([2 * ints[k]], [0, 1]))
    total = [0]
    for p, (num, _) in enumerate(facs):
        term = num
        for q, (_, den) in enumerate(facs):
            if q != p:
                term = _mul(term, den)
        total = _add(total, term)
    return _trim(total)


def _primitive(p: list[int]) -> list[int]:
    g = math.gcd(*p)
    return [a // g for a in p] if g > 1 else p


def _prem_neg(a: list[int], b: list[int]) -> list[int]:
    """-(|lc(b)|^(deg a - deg b + 1) a mod b): the Sturm remainder up to a positive factor."""
    r = list(a)
    lb = b[-1]
    db = len(b) - 1
    scale = abs(lb)
    sgn = 1 if lb > 0 else -1
    while len(r) - 1 >= db and any(r):
        lr = r[-1]
        shift = len(r) - 1 - db
        r = [x * scale for x in r]
        f = lr * sgn  # r*|lb| - f*x^shift*b has zero leading term, since |lb| = sgn*lb
        for i, y in enumerate(b):
            r[i + shift] -= f * y
        r = _trim(r[:-1]) if len(r) > 1 else [0]
    return [-x for x in r]


def _sign_changes(signs) -> int:
    s = [x for x in signs if x != 0]
    return sum(1 for u, v in zip(s, s[1:], strict=False) if u != v)


def positive_root_count(p: list[int]) -> int:
    """Distinct real roots of the integer polynomial ``p`` (lowest first) on (0, inf).

    Factors of u are removed first (u = 0 is not in the interval); the count is
    V(0) - V(inf) of the Sturm sequence, V the number of sign changes.
    """
    p = _trim(list(p))
    while len(p) > 1 and p[0] == 0:
        p = p[1:]
    if len(p) <= 1:
        return 0
    if all(a >= 0 for a in p) or all(a <= 0 for a in p):
        return 0  # Descartes: no sign change in the coefficients, no positive root
    seq = [_primitive(p), _primitive([i * a for i, a in enumerate(p)][1:])]
    while len(seq[-1]) > 1:
        r = _trim(_prem_neg(seq[-2], seq[-1]))
        if not any(r):
            break
        seq.append(_primitive(r))
    at0 = [(q[0] > 0) - (q[0] < 0) for q in seq]
    atinf = [(q[-1] > 0) - (q[-1] < 0) for q in seq]
    return _sign_changes(at0) - _sign_changes(atinf)


def decide_passive(model) -> ExactDecision:
    """Exact decision of eps2 >= 0 on 0 < w < inf for a model with stable poles.

    Returns passive only when P has no root on (0, inf) and is positive there (its leading
    coefficient decides the sign once there is no root), or is identically zero. Stability
    (Re a < 0, needed for Q > 0) is the caller's check.
    """
    p = exact_numerator(model)
    deg = len(p) - 1
    if not any(p):
        return ExactDecision(True, 0, True, 0)
    roots = positive_root_count(p)
    lead = next(a for a in reversed(p) if a != 0)
    return ExactDecision(roots == 0 and lead > 0, roots, False, deg)


def float_margin(model, energies_ev) -> tuple[float, float, float]:
    """(min eps2, its energy [eV], min eps2 / sum_p |eps2_p|) over ``energies_ev`` in float64."""
    w = np.asarray(energies_ev, float)
    terms = model.eps2_terms(w)
    val = terms.sum(axis=-1)
    rel = val / np.maximum(np.abs(terms).sum(axis=-1), 1e-300)
    i = int(np.argmin(val))
    return float(val[i]), float(w[i]), float(rel.min())
