"""Relaxed vector fitting and the fit_pole_pairs entry point."""

import warnings

import numpy as np
import pytest

from kkcheck import materials
from kkcheck.errors import InputError
from kkcheck.rational import dense_passivity_check, fit_pole_pairs, starting_poles, vector_fit
from kkcheck.rational.fit import detect_conductor

RNG = np.random.default_rng(59846294526092468)


def _noisy(eps, rel, rng):
    return eps + rel * np.abs(eps) * (
        rng.standard_normal(eps.size) + 1j * rng.standard_normal(eps.size)
    )


@pytest.mark.parametrize("method", ["band", "aaa"])
def test_known_poles_recovered(method):
    # REFERENCES item 7 [V]: Lorentz d_eps=2, w0=1.5, gamma=0.3, 400 samples on [0.1, 4];
    # poles +-1.49248116 - 0.15i in the physics w-plane, residues +-1.50755672. With s = -i w the
    # s-plane pole is a = -i w_p = -0.15 + 1.49248116 i (stored representative, Im a >= 0).
    w = np.linspace(0.1, 4, 400)
    e = 1.0 + materials.lorentz(w, 2.0, 1.5, 0.3)
    r = vector_fit(w, e, starting_poles(w, 1, False, e, method=method))
    assert r.model.n_pairs == 1
    assert r.model.poles[0] == pytest.approx(complex(-0.15, 1.49248116), abs=1e-8)
    assert abs(r.model.residues[0]) == pytest.approx(1.50755672, abs=1e-8)
    assert r.model.eps_inf == pytest.approx(1.0, abs=1e-10)


def test_drude_metal_exact():
    # closed form (REFERENCES item 8): Drude = conductor pole at 0 (2 c0 = wp^2/gamma) + pole -gamma
    w = np.linspace(0.3, 5, 300)
    e = 1.0 + materials.drude(w, 8.0, 0.07)
    r = fit_pole_pairs(w, e)
    assert r.conductor and r.n_pairs == 1
    assert r.model.poles[0] == pytest.approx(-0.07, rel=1e-8)
    assert 2 * r.model.conductor_residue == pytest.approx(64.0 / 0.07, rel=1e-8)
    assert r.rms_rel < 1e-10 and r.passivity.certified and r.stable


@pytest.mark.slow
def test_rakic_gold_clean_and_noisy():
    # issue 5 target: Rakic 1998 gold 0.5-6 eV to <= 1 % rms with <= 6 pairs, certified passive
    w = np.linspace(0.5, 6, 600)
    e0 = materials.rakic_ld(w)
    clean = fit_pole_pairs(w, e0, tol_rel=0.01)
    noisy_e = _noisy(e0, 1e-3, RNG)
    sig = 1e-3 * np.abs(e0)
    noisy = fit_pole_pairs(w, noisy_e, sig, sig)
    for r in (clean, noisy):
        assert r.n_pairs <= 6 and r.rms_rel <= 0.01
        assert r.passivity.certified and r.stable and r.conductor
        assert dense_passivity_check(r.model, 1e-4, 1e4).passive
    # noise floor: sqrt(2) * 1e-3 rms relative noise; chi2/dof near 1 (common practice, no source)
    assert noisy.chi2_dof < 1.3
    assert np.sqrt(np.mean(np.abs(noisy.model.eps(w) / e0 - 1) ** 2)) < 1e-3


def test_two_oscillator_semiconductor_two_pairs():
    # two Lorentz oscillators (closed form, kkcheck.materials), 400-1200 nm, 1e-3 noise
    lam = np.linspace(400, 1200, 500)
    w = np.sort(1239.841984 / lam)

    def truth(x):
        return 1.8 + materials.lorentz(x, 1.5, 2.6, 0.25) + materials.lorentz(x, 6.0, 4.4, 0.9)

    e0 = truth(w)
    sig = 1e-3 * np.abs(e0)
    r = fit_pole_pairs(w, _noisy(e0, 1e-3, RNG), sig, sig)
    assert not r.conductor and r.n_pairs == 2
    assert r.chi2_dof < 1.3 and r.passivity.certified
    assert r.order_table[0].chi2_dof > 10  # one pair is not enough: the trade-off shows why


def test_order_table_and_bic_path():
    w = np.linspace(0.5, 6, 200)
    e = _noisy(materials.rakic_ld(w), 1e-3, RNG)
    r = fit_pole_pairs(w, e, max_pairs=8)
    ns = [row.n_start for row in r.order_table]
    assert ns == list(range(1, len(ns) + 1))
    assert r.chi2_dof is None and r.rms_rel < 0.01 and r.passivity.certified


def test_conductor_detection():
    w = np.linspace(0.5, 6, 200)
    assert detect_conductor(w, materials.rakic_ld(w))
    assert not detect_conductor(w, 2.0 + materials.lorentz(w, 3.0, 3.5, 0.4))
    assert not detect_conductor(w, materials.sellmeier_silica(w) + 1e-6j)


def test_input_validation():
    w = np.linspace(1, 2, 10)
    e = np.full(10, 2.0 + 0.1j)
    with pytest.raises(InputError, match="strictly increasing"):
        fit_pole_pairs(w[::-1], e)
    with pytest.raises(InputError, match="same length"):
        fit_pole_pairs(w, e[:5])
    with pytest.raises(InputError, match="sigma"):
        fit_pole_pairs(w, e, -np.ones(10))
    with pytest.raises(InputError, match="conductor"):
        fit_pole_pairs(w, e, conductor="maybe")
    with pytest.raises(InputError, match="n_pairs"):
        fit_pole_pairs(w, e, n_pairs=0)


def test_unmet_target_warns():
    w = np.linspace(0.5, 6, 300)
    e = materials.rakic_ld(w)
    with warnings.catch_warnings(record=True) as rec:
        warnings.simplefilter("always")
        r = fit_pole_pairs(w, e, tol_rel=1e-9, max_pairs=2)
    assert any("max_pairs" in str(x.message) for x in rec)
    assert r.warnings and r.rms_rel > 1e-9
