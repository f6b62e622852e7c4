"""Normal-incidence slab R/T against closed forms and independent numerical routes.

Sources: the Airy formulas and the characteristic matrix of M. Born, E. Wolf, *Principles of
Optics*, 7th ed., Cambridge University Press (1999), section 1.6 (section number from memory);
the incoherent intensity sums of O. S. Heavens, *Optical Properties of Thin Solid Films*,
Butterworths (1955) (from memory). The numbers below were computed from those closed forms and
cross-checked by an independent numpy calculation (values, not literature data).
"""

import dataclasses
import json
import math

import numpy as np
import pytest

from kkcheck import materials
from kkcheck.errors import InputError
from kkcheck.rational import model_from_terms
from kkcheck.slab import coherent_slab, compare_slab, film_on_substrate, incoherent_slab


@pytest.mark.parametrize(
    "n, d, R, T",
    [
        # closed form (Born & Wolf 1999, sec. 1.6), cross-checked numerically; air, 500 nm
        (1.5, 500 / (4 * 1.5), 0.147929, None),  # quarter-wave, ((N^2-1)/(N^2+1))^2
        (1.5, 500 / (2 * 1.5), 0.0, None),  # half-wave
        (2 + 0.1j, 123, 0.010397, 0.688818),
        (0.2 + 3j, 20, 0.582049, 0.304298),
    ],
)
def test_coherent_slab_reference_values(n, d, R, T):
    rt = coherent_slab(np.array([n]), d, 500.0)
    assert rt.R[0] == pytest.approx(R, abs=1e-6)
    if T is not None:
        assert rt.T[0] == pytest.approx(T, abs=1e-6)
    else:  # lossless: R + T = 1
        assert rt.R[0] + rt.T[0] == pytest.approx(1.0, abs=1e-12)


def test_incoherent_glass():
    # closed form of the incoherent slab (Heavens 1955, from memory): lossless glass n = 1.5,
    # T = 2n/(n^2+1) = 0.923077, R = 1 - T = 0.076923
    rt = incoherent_slab(np.array([1.5 + 0j]), 1e6, 500.0)
    assert rt.T[0] == pytest.approx(0.923077, abs=1e-6)
    assert rt.R[0] == pytest.approx(0.076923, abs=1e-6)


def _matrix_rt(layers, lam):
    # characteristic matrix (Born & Wolf 1999, sec. 1.6), air on both sides
    m = np.eye(2, dtype=complex)
    for n, d in layers:
        dl = 2 * np.pi * n * d / lam
        m = m @ np.array([[np.cos(dl), -1j * np.sin(dl) / n], [-1j * n * np.sin(dl), np.cos(dl)]])
    b, c = m @ np.array([1.0, 1.0])
    return abs((b - c) / (b + c)) ** 2, abs(2 / (b + c)) ** 2


def test_incoherent_equals_phase_average_of_coherent():
    # the incoherent formula (Heavens 1955) equals the coherent characteristic-matrix result
    # averaged over the slab phase (independent numerical route)
    n, lam = 1.5 + 2e-6j, 500.0
    ds = np.linspace(2e4, 2e4 + lam / 1.5, 2001)[:-1]
    avg = np.mean([_matrix_rt([(n, d)], lam) for d in ds], axis=0)
    rt = incoherent_slab(np.array([n]), ds.mean(), lam)
    assert rt.R[0] == pytest.approx(avg[0], abs=2e-5)
    assert rt.T[0] == pytest.approx(avg[1], abs=2e-5)


def test_film_on_substrate_equals_phase_average():
    # film formula (Heavens 1955, from memory) checked against the characteristic matrix
    # averaged over the substrate phase (independent numerical route)
    nf, ns, lam = 2 + 0.1j, 1.5 + 1e-6j, 500.0
    ds = np.linspace(1e5, 1e5 + lam / 1.5, 2001)[:-1]
    avg = np.mean([_matrix_rt([(nf, 123.0), (ns, d)], lam) for d in ds], axis=0)
    rt = film_on_substrate(np.array([nf]), 123.0, ns, 1e5, lam)
    assert rt.R[0] == pytest.approx(avg[0], abs=2e-5)
    assert rt.T[0] == pytest.approx(avg[1], abs=2e-5)
    # a film of index 1 leaves bare glass: T = 2n/(n^2+1) of the incoherent glass slab
    bare = film_on_substrate(np.array([1.0 + 0j]), 50.0, 1.5, 1e6, lam)
    assert bare.T[0] == pytest.approx(0.923077, abs=1e-6)


def test_compare_slab():
    w = np.linspace(0.5, 6, 200)
    eps = materials.rakic_ld(w)
    wp, f0, g0, osc = materials.RAKIC_AU
    exact = model_from_terms(
        1.0,
        drude=[(np.sqrt(f0) * wp, g0)],
        lorentz=[(f * wp**2 / w0**2, w0, g) for f, g, w0 in osc],
    )
    c = compare_slab(w, eps, exact, 30.0)
    assert c.max_dR < 1e-10 and c.max_dT < 1e-10 and c.geometry == "free-standing"
    shifted = model_from_terms(1.1, drude=[(np.sqrt(f0) * wp, g0)])
    c2 = compare_slab(w, eps, shifted, 30.0, substrate_n=1.5)
    # the error must show: direct R/T of the two eps arrays (closed form of the film formula)
    lam = 1239.841984 / w
    a = film_on_substrate(np.sqrt(eps), 30.0, 1.5, 1e6, lam)
    b = film_on_substrate(np.sqrt(shifted.eps(w)), 30.0, 1.5, 1e6, lam)
    assert c2.max_dR == pytest.approx(np.max(np.abs(a.R - b.R)), rel=1e-12)
    assert c2.max_dR > 1e-3
    with pytest.raises(InputError, match="thickness"):
        compare_slab(w, eps, exact, -1.0)


def test_compare_slab_keeps_its_arrays_and_summary_block():
    w = np.linspace(0.5, 6, 120)
    eps = materials.rakic_ld(w)
    shifted = model_from_terms(1.1, drude=[(np.sqrt(0.76) * 9.03, 0.053)])
    c = compare_slab(w, eps, shifted, 40.0)
    # the stored arrays are the Airy R/T (Born & Wolf 1999, sec. 1.6) of the two eps arrays,
    # lambda = hc/E with hc = 1239.841984 eV nm (CODATA 2018)
    lam = 1239.841984 / w
    a = coherent_slab(np.sqrt(eps), 40.0, lam)
    b = coherent_slab(np.sqrt(shifted.eps(w)), 40.0, lam)
    np.testing.assert_allclose(c.energy_ev, w, rtol=0)
    np.testing.assert_allclose(c.table_rt.R, a.R, rtol=1e-12)
    np.testing.assert_allclose(c.table_rt.T, a.T, rtol=1e-12)
    np.testing.assert_allclose(c.model_rt.R, b.R, rtol=1e-12)
    np.testing.assert_allclose(c.model_rt.T, b.T, rtol=1e-12)
    for arr in (c.energy_ev, c.table_rt.R, c.model_rt.T):
        assert not arr.flags.writeable
    # the maxima and their energies are those of the stored arrays
    i = int(np.argmax(np.abs(b.T - a.T)))
    assert c.max_dT == pytest.approx(abs(b.T[i] - a.T[i]), rel=1e-12)
    assert c.at_dT_ev == w[i]
    # the summary.json "slab" block (DESIGN.md machine-readable outputs), JSON-safe
    d = c.to_dict()
    assert list(d) == [
        "thickness_nm",
        "geometry",
        "max_abs_dR",
        "max_abs_dT",
        "at_dR_ev",
        "at_dT_ev",
        "grid_points",
        "interpolation",
        "incoherent",
    ]  # keys are only ever added (DESIGN.md: other programs read summary.json)
    assert d["thickness_nm"] == 40.0 and d["geometry"] == "free-standing"
    assert d["max_abs_dR"] == c.max_dR and d["at_dT_ev"] == c.at_dT_ev
    bad = dataclasses.replace(c, max_dR=float("nan"), max_dT=-0.0)
    assert bad.to_dict()["max_abs_dR"] is None
    assert math.copysign(1.0, bad.to_dict()["max_abs_dT"]) == 1.0
    json.dumps(bad.to_dict(), allow_nan=False)  # raises on NaN or infinity


def test_fringe_grid_resolves_a_thick_slab():
    # closed form: fringe period in photon energy hc / (2 n d) (Born & Wolf 1999, sec. 1.6);
    # a 10 um slab of n = 3.6 near 1 eV: 1239.84 / 72000 = 0.0172 eV per fringe
    from kkcheck.slab import POINTS_PER_FRINGE, fringe_grid

    rows = np.linspace(1.0, 3.0, 81)  # a table every 0.025 eV: coarser than one fringe
    g = fringe_grid(rows, 3.6, 10_000.0)
    period = 1239.841984 / (2 * 3.6 * 10_000.0)
    assert np.max(np.diff(g)) <= period / POINTS_PER_FRINGE * 1.0001
    assert np.all(np.isin(rows, g))


def test_resolved_check_finds_the_fringe_error_the_rows_miss():
    # a constant-index slab, model off by dn = 0.002: the coherent T of a 10 um slab swings by
    # ~0.5 (Airy, Born & Wolf 1999) between rows; the incoherent T barely moves (Heavens 1955)
    from kkcheck.slab import FilmSpec, compare_film

    class Const:
        def __init__(self, n):
            self.n = n

        def eps(self, w):
            return np.full(np.shape(w), self.n**2, complex)

    rows = np.linspace(1.0, 1.4, 9)
    table = np.full(rows.size, (3.5 + 0j) ** 2)
    coarse = compare_slab(rows, table, Const(3.502), 10_000.0)
    fine = compare_film(rows, table, Const(3.502), FilmSpec(10_000.0))
    # exact: Delta(phase) = 4 pi d dn / lambda ~ 0.2 rad; T of a lossless slab between
    # T_min = 1 - R_max and 1 (Born & Wolf): the sampled maximum must exceed the rows' one
    assert fine.max_dT > coarse.max_dT
    assert fine.max_dT > 0.1
    assert fine.incoherent is not None and fine.incoherent[2] < 1e-3
    assert fine.to_dict()["interpolation"].startswith("n linear")


def test_index_interpolated_log_linear_in_k():
    # common practice, no source: k between rows with k = 1e-2 and 1e-4 is 1e-3 half way
    from kkcheck.slab import interpolate_index

    e = np.array([1.0, 2.0])
    n = np.array([3.0 + 1e-2j, 3.2 + 1e-4j])
    got = interpolate_index(e, n**2, [1.5])
    assert got[0].imag == pytest.approx(1e-3, rel=1e-9)
    assert got[0].real == pytest.approx(3.1, rel=1e-9)
