"""Singly and multiply subtractive KK against a computed check table.

The SSKK form is Ahrenkiel's (J. Opt. Soc. Am. 61, 1651 (1971), from memory), the MSKK form
Palmer, Williams & Budde's (Appl. Opt. 37, 2660 (1998), from memory); the check case and its
error table were computed by quadrature in the project (docs/references.md
[SubtractiveCheck]), not taken from a paper.
"""

import numpy as np
import pytest

from kkcheck.errors import InputError
from kkcheck.kk.subtractive import (
    choose_anchors,
    subtractive_eps1,
    subtractive_from_data,
    subtractive_result,
)
from kkcheck.kk.transform import eps2_to_eps1

W_TAB = np.array([0.9, 1.5, 1.8, 2.2])


def _model(w):
    # check case of docs/references.md [SubtractiveCheck]: strong oscillator at 4 eV lies
    # outside [0.6, 2.5]
    w = np.asarray(w, dtype=float)
    return 1.0 + 2.0 / (1.0 - w**2 - 0.1j * w) + 48.0 / (16.0 - w**2 - 0.5j * w)


# Window discretisation: PL eps2 on a uniform grid over [0.6, 2.5] with h = 2.4e-4; the PL
# error near the 1 eV peak is h^2 max|eps2''| / 8 ~ 6e-8 * 2e3 ~ 1e-4, far below the 1e-2
# tolerance used against the 3-decimal [V] values.
X = np.linspace(0.6, 2.5, 8001)
E2 = _model(X).imag


def test_plain_truncated_kk_error_table():
    # computed table (quadrature): plain KK error = (1 + partner) - true eps1 (eps_inf = 1)
    err = 1.0 + eps2_to_eps1(X, E2, W_TAB) - _model(W_TAB).real
    np.testing.assert_allclose(err, [-2.918, -3.283, -3.578, -4.227], atol=1e-2)


def test_sskk_error_table():
    # computed table (quadrature): SSKK (Ahrenkiel 1971) with the anchor 1.2 eV
    got = subtractive_eps1(X, E2, [1.2], [_model(1.2).real], W_TAB)
    np.testing.assert_allclose(got - _model(W_TAB).real, [0.157, -0.208, -0.503, -1.151], atol=1e-2)


def test_mskk_error_table_and_improvement():
    # computed table (quadrature): MSKK (Palmer et al. 1998) with anchors 1.2 and 2.0 eV; and
    # the shape given with it:
    # MSKK error below 0.13 where the plain KK error exceeds 2.9
    anchors = np.array([2.0, 1.2])  # unsorted on purpose
    got = subtractive_eps1(X, E2, anchors, _model(anchors).real, W_TAB)
    err = got - _model(W_TAB).real
    np.testing.assert_allclose(err, [-0.034, 0.038, 0.043, -0.121], atol=1e-2)
    plain = 1.0 + eps2_to_eps1(X, E2, W_TAB) - _model(W_TAB).real
    assert np.all(np.abs(plain) > 2.9)
    assert np.all(np.abs(err) < 0.13)


def test_anchors_are_reproduced_and_result_fields():
    # the subtractive relation interpolates the anchors exactly (Palmer et al. 1998 formula)
    anchors = np.array([1.0, 1.7, 2.3])
    vals = _model(anchors).real
    r = subtractive_result(X, E2, anchors, vals, anchors)
    np.testing.assert_allclose(r.eps1, vals, atol=1e-10)
    np.testing.assert_allclose(r.anchor_corrections, vals - r.plain_eps1_minus_inf, atol=1e-10)


def test_mskk_equals_explicit_subtractive_integral():
    # implementation identity ("unified framework" paper, docs/references.md [QSubtractive];
    # computed): the Lagrange-polynomial form equals
    # the Q = 2 subtractive integral, evaluated here by scipy quad (QAWC) segment by segment
    # on the same PL eps2 (a coarse 97-node grid: the identity holds for any PL function)
    from scipy import integrate

    x = np.linspace(0.6, 2.5, 97)  # anchors and w fall between nodes
    y = _model(x).imag
    a1, a2, w = 1.2, 2.0, 1.65
    e1a = _model([a1, a2]).real

    def pv(p):
        # P int_{x0}^{xM} t eps2(t) / (t^2 - p^2) dt = P int t eps2 / (t + p) / (t - p) dt
        total = 0.0
        for lo, hi, ylo, yhi in zip(x[:-1], x[1:], y[:-1], y[1:], strict=True):

            def f(t, lo=lo, hi=hi, ylo=ylo, yhi=yhi):
                return t * (ylo + (yhi - ylo) * (t - lo) / (hi - lo)) / (t + p)

            total += integrate.quad(f, lo, hi, weight="cauchy", wvar=p, epsabs=1e-13)[0]
        return total

    # 1/prod_k (t^2 - p_k^2) = sum_k 1/[(t^2 - p_k^2) prod_{m != k}(p_k^2 - p_m^2)] [V]
    poles = [w, a1, a2]
    total = 0.0
    for i, p in enumerate(poles):
        denom = np.prod([p**2 - q**2 for j, q in enumerate(poles) if j != i])
        total += pv(p) / denom
    big_pi = (w**2 - a1**2) * (w**2 - a2**2)
    lag = e1a[0] * (w**2 - a2**2) / (a1**2 - a2**2) + e1a[1] * (w**2 - a1**2) / (a2**2 - a1**2)
    want = lag + 2.0 / np.pi * big_pi * total
    got = subtractive_eps1(x, y, [a1, a2], e1a, [w])[0]
    assert got == pytest.approx(want, abs=1e-8)


def test_automatic_anchors_spread_and_interior():
    # common practice, no source: Chebyshev points in w^2, snapped to distinct interior points
    idx = choose_anchors(X, 3)
    assert idx.size == 3 and np.all(np.diff(idx) > 0)
    assert idx[0] > 0 and idx[-1] < X.size - 1
    w2 = X[idx] ** 2
    lo, hi = X[0] ** 2, X[-1] ** 2
    cheb = 0.5 * (lo + hi) + 0.5 * (hi - lo) * np.cos((2 * np.arange(3)[::-1] + 1) * np.pi / 6)
    np.testing.assert_allclose(w2, cheb, atol=2 * X[-1] * (X[1] - X[0]))
    r = subtractive_from_data(X, _model(X).real, E2, n_anchors=2, at_ev=W_TAB)
    # two automatic anchors must also beat plain KK by a wide margin on this case
    assert np.all(np.abs(r.eps1 - _model(W_TAB).real) < 0.3)


def test_bad_anchors_raise_input_error():
    with pytest.raises(InputError, match="strictly inside"):
        subtractive_eps1(X, E2, [0.6], [1.0])
    with pytest.raises(InputError, match="distinct"):
        subtractive_eps1(X, E2, [1.2, 1.2], [1.0, 1.0])
    with pytest.raises(InputError, match="equal-length"):
        subtractive_eps1(X, E2, [1.2, 1.3], [1.0])
    with pytest.raises(InputError, match="anchors"):
        choose_anchors(X[:3], 2)
