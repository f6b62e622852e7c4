"""Relaxed vector fitting and the fit_pole_pairs entry point."""

import json
import warnings
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest

from kkcheck import materials
from kkcheck.errors import InputError
from kkcheck.rational import dense_passivity_check, fit_pole_pairs, starting_poles, vector_fit
from kkcheck.rational.fit import WEIGHTING, detect_conductor
from kkcheck.rational.vfit import poles_plus_pair, polish_poles
from kkcheck.units import sigma_nk_to_eps

RNG = np.random.default_rng(59846294526092468)


def _noisy(eps, rel, rng):
    return eps + rel * np.abs(eps) * (
        rng.standard_normal(eps.size) + 1j * rng.standard_normal(eps.size)
    )


@pytest.mark.parametrize("method", ["band", "aaa"])
def test_known_poles_recovered(method):
    # closed form: Lorentz d_eps=2, w0=1.5, gamma=0.3, 400 samples on [0.1, 4]; poles
    # +-sqrt(w0^2 - gamma^2/4) - i gamma/2 = +-1.49248116 - 0.15i in the physics w-plane,
    # residues +-d_eps w0^2 / (2 sqrt(w0^2 - gamma^2/4)) = +-1.50755672. With s = -i w the
    # s-plane pole is a = -i w_p = -0.15 + 1.49248116 i (stored representative, Im a >= 0).
    w = np.linspace(0.1, 4, 400)
    e = 1.0 + materials.lorentz(w, 2.0, 1.5, 0.3)
    r = vector_fit(w, e, starting_poles(w, 1, False, e, method=method))
    assert r.model.n_pairs == 1
    assert r.model.poles[0] == pytest.approx(complex(-0.15, 1.49248116), abs=1e-8)
    assert abs(r.model.residues[0]) == pytest.approx(1.50755672, abs=1e-8)
    assert r.model.eps_inf == pytest.approx(1.0, abs=1e-10)


def test_drude_metal_exact():
    # closed form, the Drude mapping of the pole-pair form of Han, Dutton & Fan, IEEE Microw.
    # Wireless Compon. Lett. 16(3), 119 (2006) (vol/pages from memory): Drude = conductor pole
    # at 0 (2 c0 = wp^2/gamma) + real pole -gamma
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
    clean = fit_pole_pairs(w, e0, tol=0.01)
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
    with pytest.raises(InputError, match="^pairs must be a positive integer"):
        fit_pole_pairs(w, e, pairs=0)
    with pytest.raises(InputError, match="^tol .* must be > 0"):
        fit_pole_pairs(w, e, tol=0.0)


def test_unmet_target_warns():
    w = np.linspace(0.5, 6, 300)
    e = materials.rakic_ld(w)
    with warnings.catch_warnings(record=True) as rec:
        warnings.simplefilter("always")
        r = fit_pole_pairs(w, e, tol=1e-9, max_pairs=2)
    assert any("max_pairs" in str(x.message) for x in rec)
    assert r.warnings and r.rms_rel > 1e-9


def _rakic_gold_nk_table(seed):
    # Lorentz-Drude gold of Rakic et al., Appl. Opt. 37(22), 5271 (1998) (kkcheck.materials.
    # RAKIC_AU) sampled 207-2480 nm every 5 nm as n, k with Gaussian noise 0.002 in each; sigma
    # propagated to eps to first order.
    lam = np.arange(207.0, 2480.0 + 0.5, 5.0)
    w = np.sort(1239.841984 / lam)
    nk = np.sqrt(materials.rakic_ld(w))
    rng = np.random.default_rng(seed)
    n = nk.real + 0.002 * rng.standard_normal(w.size)
    k = nk.imag + 0.002 * rng.standard_normal(w.size)
    s1, s2 = sigma_nk_to_eps(n, k, 0.002, 0.002)
    return w, (n + 1j * k) ** 2, s1, s2


@pytest.mark.parametrize("seed", [1, 2, 3, 4, 5, 6])
def test_rakic_gold_nk_noise_reaches_floor_with_few_entries(seed):
    # The Lorentz-Drude gold model of Rakic et al., Appl. Opt. 37(22), 5271 (1998) is exactly
    # rational: Drude (conductor + one real pole) plus 5 Lorentz pairs, one at 13.32 eV far
    # above and one at 0.415 eV just below the 0.5-6 eV window. So 6 entries reach the noise
    # floor, chi2/dof ~ 1 (common practice, no source); the band-only start stalled at
    # chi2/dof ~ 3 up to 9 entries, and vector fitting without the pole polish needed 8 (seed 5)
    # or 10 (seed 4) entries.
    w, e, s1, s2 = _rakic_gold_nk_table(seed)
    truth = materials.rakic_ld(w)
    r_true = np.concatenate([(truth.real - e.real) / s1, (truth.imag - e.imag) / s2])
    assert r_true @ r_true / (2 * w.size - 24) < 1.2  # the floor is reachable by the true model
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        r = fit_pole_pairs(w, e, s1, s2)
    # seed 4: the unconstrained 7-entry optimum wants eps_inf ~ 1e-3 (noise pulls the
    # background down); with the physical bound eps_inf >= 1 (Rakic's own eps_inf is 1) the
    # fixed-pole passive fit of 7-9 entries misses the floor, and 10 entries reach it (measured)
    assert r.conductor and r.n_pairs <= (10 if seed == 4 else 7)
    assert r.model.eps_inf >= 1.0
    assert r.chi2_dof <= 1.5
    assert r.passivity.certified and r.stable
    assert dense_passivity_check(r.model, 1e-4, 1e4).passive
    # the in-band Lorentz poles of RAKIC_AU are found: a = -Gamma/2 + i sqrt(w0^2 - Gamma^2/4)
    for _, g, w0 in materials.RAKIC_AU[3][1:4]:
        a = complex(-g / 2, np.sqrt(w0**2 - g**2 / 4))
        assert np.min(np.abs(r.model.poles - a)) < 0.05 * abs(a)


def test_added_pair_sites():
    # two Lorentz oscillators (closed form, kkcheck.materials); a model holding only the first
    # leaves its largest residual at the second, so the "residual" site lands near 4.4 eV.
    w = np.linspace(1.0, 6.0, 400)
    e = 1.5 + materials.lorentz(w, 1.5, 2.6, 0.25) + materials.lorentz(w, 0.8, 4.4, 0.3)
    one = vector_fit(w, 1.5 + materials.lorentz(w, 1.5, 2.6, 0.25), starting_poles(w, 1, False))
    wt = np.ones(w.size)  # uniform weights: the misfit is the missing oscillator itself
    p = poles_plus_pair(w, e, one.model, wt, wt, "residual")
    assert p.size == 2 and p[:1] == pytest.approx(one.model.poles)
    assert abs(p[1].imag - 4.4) < 0.15 and p[1].real == pytest.approx(-p[1].imag / 10)
    assert poles_plus_pair(w, e, one.model, wt, wt, "above")[1] == pytest.approx(-3.0 + 30.0j)
    assert poles_plus_pair(w, e, one.model, wt, wt, "below")[1] == pytest.approx(-0.03 + 0.3j)
    with pytest.raises(ValueError, match="site"):
        poles_plus_pair(w, e, one.model, wt, wt, "middle")


def test_polish_moves_perturbed_poles_to_the_exact_ones():
    # closed form: Lorentz d_eps=2, w0=1.5, gamma=0.3 on [0.1, 4]: pole
    # a = -gamma/2 + i sqrt(w0^2 - gamma^2/4) = -0.15 + 1.49248116 i, |c| = 1.50755672,
    # eps_inf = 1. Started 5 % off in alpha and beta, with the residues re-solved, the polish
    # must land on the exact pole (noise-free data: the minimum of the misfit is zero there).
    w = np.linspace(0.1, 4, 400)
    e = 1.0 + materials.lorentz(w, 2.0, 1.5, 0.3)
    wt = 1 / np.abs(e)
    start = vector_fit(w, e, [complex(-0.1575, 1.567)], n_iter=0, weight1=wt, weight2=wt)
    assert start.model.poles[0] == pytest.approx(complex(-0.1575, 1.567))
    r = polish_poles(w, e, start.model, wt, wt)
    assert r.rss_after < 1e-16 < r.rss_before
    assert r.model.poles[0] == pytest.approx(complex(-0.15, 1.49248116), abs=1e-7)
    assert abs(r.model.residues[0]) == pytest.approx(1.50755672, abs=1e-7)
    assert r.model.eps_inf == pytest.approx(1.0, abs=1e-8)


def test_polish_keeps_poles_stable_and_the_conductor_at_zero():
    # Drude + Lorentz (closed forms of kkcheck.materials; Drude as pole pairs after Han, Dutton
    # & Fan 2006) with 1e-3 noise, fitted with one pair too many: whatever the polish does with
    # the spare pair, every pole keeps Re a < 0, eps_inf > 0, the conductor term stays a pure
    # 2 c_0/s, and the weighted misfit does not grow.
    w = np.linspace(0.5, 6, 300)
    e0 = 1.0 + materials.drude(w, 8.0, 0.07) + materials.lorentz(w, 1.5, 2.8, 0.6)
    e = _noisy(e0, 1e-3, np.random.default_rng(7))
    wt = 1 / (1e-3 * np.abs(e0))
    start = vector_fit(w, e, starting_poles(w, 3, True, e), conductor=True, weight1=wt, weight2=wt)
    r = polish_poles(w, e, start.model, wt, wt)
    assert r.rss_after <= r.rss_before
    m = r.model
    assert np.all(m.poles.real < 0) and m.eps_inf > 0 and m.conductor_residue is not None
    assert m.n_pairs == start.model.n_pairs
    # the Drude conductivity wp^2/gamma = 64/0.07 is recovered to 1 % (common practice, no source)
    assert 2 * m.conductor_residue == pytest.approx(64.0 / 0.07, rel=0.01)


def test_tol_keeps_the_fewest_entries_that_meet_it():
    # Rakic et al., Appl. Opt. 37(22), 5271 (1998) gold (kkcheck.materials), noise-free, 0.5-6
    # eV: the rms relative error, recomputed here from its definition, meets tol for the kept
    # model, and every earlier step's leading fit in the table misses it.
    w = np.linspace(0.5, 6, 300)
    e = materials.rakic_ld(w)
    r = fit_pole_pairs(w, e, tol=0.01)
    rms = np.sqrt(np.mean(np.abs(r.model.eps(w) - e) ** 2 / np.abs(e) ** 2))
    assert rms == pytest.approx(r.rms_rel, rel=1e-12) and rms <= 0.01
    assert [row.n_start for row in r.order_table] == list(range(1, len(r.order_table) + 1))
    assert all(row.rms_rel > 0.01 for row in r.order_table[:-1])
    assert r.order_table[-1].rms_rel <= 0.01 and r.passivity.certified


def test_fit_to_dict_is_the_summary_fit_block():
    # closed form: Drude (conductor pole + one real pole) is one entry, fitted exactly; the
    # block has the keys, in the order, of the committed demo summary.json (reports/demo), and
    # JSON-safe numbers (NaN -> None, -0.0 -> 0.0, as json.dumps(allow_nan=False) requires)
    w = np.linspace(0.3, 5, 300)
    r = fit_pole_pairs(w, 1.0 + materials.drude(w, 8.0, 0.07))
    d = r.to_dict()
    demo = Path(__file__).resolve().parents[1] / "reports" / "demo" / "summary.json"
    committed = json.loads(demo.read_text(encoding="utf-8"))["fit"]
    # keys are only added (DESIGN.md: other programs read summary.json): the committed demo's
    # keys come first, in order, until the integrator regenerates the demo
    assert list(d)[: len(committed)] == list(committed)
    assert d["weighting"] == committed["weighting"] == WEIGHTING
    assert d["certificate"]["exact_roots"] == 0 and d["eps_inf"] >= 1.0
    assert d["device"] is None
    assert d["pairs"] == 1 and d["rms_rel"] < 1e-10 and d["certified_passive"] and d["stable"]
    assert d["range_ev"] == [0.3, 5.0] and d["notes"] == []
    odd = replace(r, rms_rel=float("nan"), max_rel=-0.0).to_dict()
    assert odd["rms_rel"] is None and str(odd["max_rel"]) == "0.0"
    json.dumps(odd, allow_nan=False)
    assert r.to_dict(weighting="1/|eps|")["weighting"] == "1/|eps|"
