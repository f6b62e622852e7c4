"""Repair stage (kkcheck.repair) against the closed-form material the data were made from.

The "true" function is the Tauc–Lorentz a-Si-like model (Jellison & Modine 1996, closed-form
eps1; docs/references.md [Jellison1996]) or Rakić et al. 1998 gold (Appl. Opt. 37, 5271;
docs/references.md [Rakic1998]). Noise of 0.005 in n and k is
planted with fixed seeds; its propagated size in eps is the closed form
sigma_eps1 = 2 sqrt(n^2 + k^2) * 0.005 (kkcheck.units.sigma_nk_to_eps).
"""

import numpy as np
import pytest

from kkcheck import materials as mat
from kkcheck.errors import InputError
from kkcheck.kk.consistency import kk_test
from kkcheck.repair import POLICIES, default_grid, repair
from kkcheck.spectrum import Dataset, Flag, Spectrum
from kkcheck.units import HC_EV_NM, eps_to_nk, nk_to_eps, sigma_nk_to_eps

LEVEL = 0.005


def true_tl(e):
    return mat.tauc_lorentz(e, 122, 3.45, 2.54, 1.2, 1.0)


def noisy_nk(e, eps, seed):
    n, k = eps_to_nk(eps)
    rng = np.random.default_rng(seed)
    nn = n + LEVEL * rng.standard_normal(e.size)
    kn = k + LEVEL * rng.standard_normal(e.size)
    sp = Spectrum.from_dataset(Dataset("ellips", e, nk_to_eps(nn, kn), quantity="nk"))
    return sp, sigma_nk_to_eps(n, k, LEVEL, LEVEL)


@pytest.fixture(scope="module")
def spiked():
    e = np.linspace(1.0, 5.0, 400)
    sp, (s1, s2) = noisy_nk(e, true_tl(e), 31)
    idx = np.array([50, 130, 210, 290, 350])
    eps = np.array(sp.eps)
    eps[idx] += 3.0 + 2.0j  # spikes of ~60 sigma in both components
    mask = np.zeros(e.size, bool)
    mask[idx] = True
    bad = sp.replace(eps=eps).with_flags(mask, Flag.SPIKE)  # as the cleaning stage flags them
    return bad, idx, s1, s2


def test_spikes_replaced_within_noise_of_true_function(spiked):
    sp, idx, s1, s2 = spiked
    r = repair(sp, kk_test(sp))
    true = true_tl(sp.energy_ev[idx])
    # the prediction from the other data must be within 3.5 sigma of the true closed form
    # (10 values checked at once: 3.5 sigma keeps the chance of a false alarm near 0.5 %;
    # common practice, no source)
    assert np.all(np.abs(r.eps.real[idx] - true.real) < 3.5 * s1[idx])
    assert np.all(np.abs(r.eps.imag[idx] - true.imag) < 3.5 * s2[idx])
    assert np.all(r.flags[idx] & int(Flag.REPLACED))
    assert np.all(r.flags[idx] & int(Flag.SPIKE))  # input flags are carried over
    # every replaced value is recorded with its old (spiked) value
    assert len(r.changes) == 2 * idx.size
    olds = {(c.energy_ev, c.component): c.old for c in r.changes}
    for j in idx:
        assert olds[(sp.energy_ev[j], "eps1")] == sp.eps.real[j]
        assert olds[(sp.energy_ev[j], "eps2")] == sp.eps.imag[j]
    assert {c.reason for c in r.changes} == {"spike"}


def test_untouched_points_unchanged(spiked):
    sp, idx, _, _ = spiked
    r = repair(sp, kk_test(sp))
    np.testing.assert_array_equal(r.energy_ev, sp.energy_ev)
    other = np.setdiff1d(np.arange(len(sp)), idx)
    np.testing.assert_array_equal(r.eps[other], sp.eps[other])
    assert not np.any(r.flags[other] & int(Flag.REPLACED | Flag.FILLED))


def test_gap_filled_within_band_of_true_values():
    # 0.5 eV of data removed across the steep rise of eps2 (2.4-2.9 eV)
    e = np.linspace(1.0, 5.0, 400)
    keep = (e < 2.4) | (e > 2.9)
    sp, _ = noisy_nk(e[keep], true_tl(e[keep]), 41)
    kk = kk_test(sp)
    assert any("gap" in n for n in kk.notes)
    r = repair(sp, kk)
    fill = (r.flags & int(Flag.FILLED)) != 0
    assert fill.sum() >= 40  # filled at the data's own spacing (~0.01 eV)
    assert np.all((r.energy_ev[fill] > 2.39) & (r.energy_ev[fill] < 2.91))
    true = true_tl(r.energy_ev[fill])
    # band = 1-sigma propagated model uncertainty; the true values lie within 3 of it
    assert np.all(np.abs(r.eps.real[fill] - true.real) < 3 * r.sigma_eps1[fill])
    assert np.all(np.abs(r.eps.imag[fill] - true.imag) < 3 * r.sigma_eps2[fill])
    assert np.all(r.sigma_eps1[fill] > 0) and np.all(r.sigma_eps2[fill] > 0)
    fills = [c for c in r.changes if c.reason == "fill"]
    assert len(fills) == 2 * fill.sum() and all(np.isnan(c.old) for c in fills)


def test_user_grid_and_gold_published_value():
    # Rakic et al. 1998 Au, computed from the paper's parameters (docs/references.md
    # [Rakic1998]): eps(600 nm) = -7.9881 + 2.0623i, eps(633 nm) =
    # -9.8114 + 1.9645i; a user grid at exactly those wavelengths gets the model there
    e = np.sort(HC_EV_NM / np.linspace(300, 1000, 300))
    sp, (s1, s2) = noisy_nk(e, mat.rakic_ld(e), 51)
    grid = HC_EV_NM / np.array([633.0, 600.0])
    r = repair(sp, kk_test(sp), grid_ev=grid)
    expect = np.array([-7.9881 + 2.0623j, -9.8114 + 1.9645j])  # sorted by energy: 633, 600 nm
    expect = expect[::-1]
    j = np.searchsorted(e, grid)
    assert np.all(np.abs(r.eps.real - expect.real) < 3 * s1[j])
    assert np.all(np.abs(r.eps.imag - expect.imag) < 3 * s2[j])
    assert np.all(r.flags & int(Flag.FILLED))
    frame = r.to_frame("wavelength_nm")
    # wavelength axis from hc = 1239.841984 eV nm (CODATA 2018), increasing order
    np.testing.assert_allclose(frame["wavelength_nm"], [600.0, 633.0], rtol=1e-12)
    assert list(frame.columns[:3]) == ["wavelength_nm", "energy_ev", "eps1"]


def test_region_policy_replaces_inconsistent_component():
    # a bump in k with no partner in n (25 sigma, 30 meV wide at 1.8 eV): with the region
    # policy, eps2 inside the flagged region is replaced by the prediction from the rest,
    # which lies closer to the true function than the faulty data did
    e = np.linspace(1.0, 4.0, 400)
    eps_true = 2.0 + mat.lorentz(e, 1.0, 2.5, 0.25)
    n, k = eps_to_nk(eps_true)
    bump = 25 * LEVEL * np.exp(-0.5 * ((e - 1.8) / 0.03) ** 2)
    rng = np.random.default_rng(61)
    eps = nk_to_eps(
        n + LEVEL * rng.standard_normal(e.size), k + bump + LEVEL * rng.standard_normal(e.size)
    )
    sp = Spectrum.from_dataset(Dataset("x", e, eps, quantity="nk"))
    kk = kk_test(sp)
    assert kk.verdict == "inconsistent"
    r = repair(sp, kk, policy="replace_flagged_and_regions")
    rep = (r.flags & int(Flag.REPLACED)) != 0
    assert rep.any() and np.all(r.flags[rep] & int(Flag.KK_REGION))
    near = np.abs(e - 1.8) < 0.03
    assert np.all(rep[near])
    err_rep = np.max(np.abs(r.eps.imag[near] - eps_true.imag[near]))
    err_data = np.max(np.abs(sp.eps.imag[near] - eps_true.imag[near]))
    assert err_rep < 0.5 * err_data
    assert {c.reason for c in r.changes} <= {"kk_region"}
    assert len(r.changes_frame()) == len(r.changes)


def test_default_grid_fills_gaps_only():
    e = np.concatenate([np.linspace(1, 2, 101), np.linspace(2.5, 3, 51)])
    g = default_grid(e)
    assert np.all(np.isin(e, g))
    added = np.setdiff1d(g, e)
    # spacing 0.01 eV; a 0.5 eV gap gets ceil(0.5/0.01) - 1 = 49 points
    assert added.size == 49 and np.all((added > 2) & (added < 2.5))


def test_bad_input():
    e = np.linspace(1.0, 5.0, 100)
    sp, _ = noisy_nk(e, true_tl(e), 71)
    kk = kk_test(sp)
    with pytest.raises(InputError, match="policy"):
        repair(sp, kk, policy="smooth")
    # the error names every choice of kkcheck.options.RepairChoice
    with pytest.raises(InputError, match="none, replace_flagged, replace_flagged_and_regions"):
        repair(sp, kk, policy="smooth")
    with pytest.raises(InputError, match="grid_ev"):
        repair(sp, kk, grid_ev=[-1.0, 2.0])
    with pytest.raises(InputError, match="not computed from this spectrum"):
        repair(Spectrum.from_dataset(Dataset("y", e[:50], sp.eps[:50])), kk)
    with pytest.warns(RuntimeWarning, match="outside the measured window"):
        repair(sp, kk, grid_ev=[0.5, 2.0])
    assert "model" in POLICIES


def test_to_dict_is_the_summary_block(spiked):
    # the repair block of summary.json: grid points, changed values (5 spikes x 2 components,
    # no gap to fill) and the notes
    sp, idx, _, _ = spiked
    r = repair(sp, kk_test(sp))
    d = r.to_dict()
    assert d == {"points": len(sp), "changed": 2 * idx.size, "notes": list(r.notes)}
    assert d["notes"][0] == "policy 'replace_flagged'"
