"""The exact passivity certificate against independent dense evaluation of random models.

Sources: Sturm's theorem (Sturm 1829, docs/references.md [Sturm1829]) for the root count;
the independent check is plain complex evaluation of eps(w) (numpy), which shares no code with
the certificate's closed-form losses or its integer polynomial.
"""

import numpy as np
import pytest

from kkcheck.rational import PolePairModel, certify_passivity
from kkcheck.rational.exact import decide_passive, exact_numerator, positive_root_count


def _dense_min_rel(model: PolePairModel) -> float:
    """min over a dense grid of Im eps(w) / sum of |Im| of each complex term (numpy complex)."""
    a = model.poles
    grid = [np.geomspace(1e-5 * np.abs(a).min(), 1e5 * np.abs(a).max(), 4001)]
    for p in a:
        grid.append(abs(p.imag) + abs(p.real) * np.linspace(-60, 60, 481))
        grid.append(np.abs(p) * np.geomspace(0.5, 2.0, 241))
    w = np.concatenate(grid)
    w = w[w > 0][:, None]
    s = -1j * w
    terms = model.residues / (s - a) + np.conj(model.residues) / (s - np.conj(a))
    im = terms.imag
    if model.conductor_residue is not None:
        im = np.concatenate([im, (2 * model.conductor_residue / s).imag], axis=1)
    return float(np.min(im.sum(axis=1) / np.maximum(np.abs(im).sum(axis=1), 1e-300)))


def _random_model(rng: np.random.Generator) -> PolePairModel:
    """Broad and sharp pairs side by side, often individually passive, some nudged across."""
    n = int(rng.integers(1, 6))
    beta = 10 ** rng.uniform(-1, 1.5, n)
    q = 10 ** rng.uniform(-4, 0.3, n)  # damping / resonance: sharp (1e-4) to overdamped
    if n > 1 and rng.random() < 0.5:  # a sharp pole right next to a broad one
        beta[1] = beta[0] * (1 + 10 ** rng.uniform(-3, -0.5))
        q[1], q[0] = 10 ** rng.uniform(-4, -2.5), 10 ** rng.uniform(-1, 0)
    poles = -q * beta + 1j * beta
    res = []
    for a in poles:
        alpha, b = -a.real, a.imag
        cr = 10 ** rng.uniform(-1, 1.5)
        ci_max = cr * (alpha**2 - b**2) / (2 * alpha * b)  # per-pair bound (pair_is_passive)
        ci = ci_max - abs(ci_max) * 10 ** rng.uniform(-6, 0) * rng.choice([1, -0.05])
        res.append(complex(cr, ci))
    c0 = float(10 ** rng.uniform(-2, 1)) if rng.random() < 0.3 else None
    return PolePairModel(float(rng.uniform(1, 5)), poles, np.array(res), c0)


@pytest.mark.slow
def test_no_false_certificate_on_10000_random_models():
    rng = np.random.default_rng(20261202)
    certified = dense_passive = missed = 0
    worst = np.inf
    for _ in range(10_000):
        m = _random_model(rng)
        cert = certify_passivity(m)
        rel = _dense_min_rel(m)
        passive = rel >= -1e-12  # round-off of the complex sum, relative to its terms
        dense_passive += passive
        if cert.certified:
            certified += 1
            worst = min(worst, rel)
            assert passive, (m, cert, rel)
        elif passive and rel > 1e-6:
            missed += 1
    # the test must exercise both answers: many certified, many refused
    assert 2000 < certified < 9000, certified
    assert dense_passive - certified < 0.05 * dense_passive  # seldom over-cautious
    assert worst >= -1e-12


def test_sturm_count_matches_known_roots():
    # closed form: (u - 1)(u - 2)^2 (u + 3)(u^2 + 1) has 2 distinct positive roots
    p = np.polynomial.polynomial.polyfromroots([1, 2, 2, -3]).round().astype(int)
    p = np.polynomial.polynomial.polymul(p, [1, 0, 1]).round().astype(int)
    assert positive_root_count([int(x) for x in p]) == 2
    assert positive_root_count([int(x) for x in -p]) == 2
    assert positive_root_count([1, 0, 1]) == 0  # u^2 + 1
    assert positive_root_count([0, 0, 1, -1]) == 1  # u^2 (1 - u)


def test_exact_numerator_sign_matches_eps2():
    # one Lorentz oscillator, closed form eps2 = f w0^2 g w / ((w0^2 - w^2)^2 + g^2 w^2) > 0
    from kkcheck.rational import lorentz_pairs

    a, c = lorentz_pairs(2.0, 3.0, 0.4)
    m = PolePairModel(1.0, a, c)
    p = exact_numerator(m)
    u = 1.7**2
    val = sum(float(k) * u**i for i, k in enumerate(p))
    assert val > 0 and m.eps2(1.7) > 0
    assert decide_passive(m).passive


def test_sub_ulp_violation_refused():
    # one pair with Im c one ulp past its per-pair bound (pair_is_passive; derived,
    # docs/references.md [PolePairAlgebra]): the constant term of P is then negative, eps2 < 0
    # as w -> 0 by a margin far below float64 round-off; the exact count still refuses it
    alpha, beta, cr = 0.5, 2.0, 1.0
    ci = cr * (alpha**2 - beta**2) / (2 * alpha * beta)
    bad = PolePairModel(1.0, [complex(-alpha, beta)], [complex(cr, np.nextafter(ci, 1.0))])
    assert exact_numerator(bad)[0] < 0
    assert not certify_passivity(bad).certified
