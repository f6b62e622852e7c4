"""Detector-changeover steps: levelled before the KK test, reported, never hidden."""

import numpy as np
import pytest

from kkcheck.clean import Outlier, StepCorrection, clean, level_steps, level_steps_if_better
from kkcheck.kk import kk_test
from kkcheck.kk.binning import bin_spectrum
from kkcheck.materials import tauc_lorentz
from kkcheck.merge import merge
from kkcheck.spectrum import Dataset, Flag, Spectrum
from kkcheck.units import HC_EV_NM


def _truth(e):
    # Tauc-Lorentz (Jellison & Modine 1996 closed form) with invented parameters
    return 2.0 + tauc_lorentz(e, 90.0, 4.0, 2.2, 2.3)


def _sources(step_rel=0.025, seed=5):
    rng = np.random.default_rng(seed)
    lam_a = np.arange(300.0, 1000.0 + 1e-9, 3.0)  # reference instrument
    lam_b = np.arange(900.0, 2000.0 + 1e-9, 5.0)  # second instrument with a changeover
    ea, eb = HC_EV_NM / lam_a[::-1], HC_EV_NM / lam_b[::-1]
    a = _truth(ea) + rng.normal(0, 2e-3, ea.size) + 1j * rng.normal(0, 1e-3, ea.size)
    b = _truth(eb)
    b = np.where(HC_EV_NM / eb >= 1500.0, b.real * (1 + step_rel) + 1j * b.imag, b)
    b = b + rng.normal(0, 2e-3, eb.size) + 1j * rng.normal(0, 1e-3, eb.size)
    return Dataset("uv", ea, a), Dataset("nir", eb, b), eb


def test_step_is_levelled_on_the_side_without_overlap():
    # planted: eps1 x 1.025 beyond 1500 nm (the side far from the overlap at 900-1000 nm)
    a, b, eb = _sources()
    m = merge([a, b], overlap="side_by_side")
    cl = clean(m.spectrum)
    steps = [o for o in cl.outliers if o.kind == "step"]
    assert len(steps) == 1
    assert HC_EV_NM / steps[0].energy_ev == pytest.approx(1500.0, abs=10.0)
    leveled, (corr,) = level_steps(cl.spectrum, steps)
    assert corr.kept == "above"  # the higher-energy side overlaps the reference
    assert corr.component == "eps1" and corr.source == "nir"
    # the jump in eps1 at 1500 nm is -0.025 * eps1 there (energy order: value after minus before)
    e_step = HC_EV_NM / 1500.0
    assert corr.jump == pytest.approx(-0.025 * _truth(e_step).real, rel=0.15)
    nir = leveled.source == 1
    far = nir & (HC_EV_NM / leveled.energy_ev > 1550.0)
    err = leveled.eps.real[far] - _truth(leveled.energy_ev[far]).real
    assert np.abs(np.mean(err)) < 3e-3  # back to the truth within noise (2e-3 per point)
    assert np.count_nonzero(leveled.flags & int(Flag.STEP)) == 1  # the flag stays


def test_levelling_lets_the_kk_test_see_clean_data_as_consistent():
    a, b, _ = _sources(seed=8)
    cl = clean(merge([a, b], overlap="side_by_side").spectrum)
    raw = kk_test(cl.spectrum)
    leveled, _ = level_steps(cl.spectrum, cl.outliers)
    fixed = kk_test(leveled)
    assert raw.verdict == "inconsistent"
    assert fixed.verdict == "consistent", fixed.regions
    assert fixed.chi2_dof < 2.0 < raw.chi2_dof


def test_no_steps_no_change():
    a, _, _ = _sources()
    cl = clean(merge([a]).spectrum)
    leveled, corr = level_steps(cl.spectrum, cl.outliers)
    assert corr == ()
    np.testing.assert_array_equal(leveled.eps, cl.spectrum.eps)


def test_a_step_that_kk_does_not_support_is_left_as_measured():
    # A "step" claimed on clean data (what a sharp feature on a sparse grid can look like to
    # the detector) must not be levelled: shifting half a source would create the very
    # inconsistency it is meant to remove (common practice, no source). The score is the KK
    # test of the binned spectrum, as in the pipeline.
    a, _, _ = _sources()
    cl = clean(merge([a]).spectrum)
    i = len(cl.spectrum) // 2
    v = float(cl.spectrum.eps.real[i])
    fake = Outlier(float(cl.spectrum.energy_ev[i]), "uv", "eps1", "step", i, v, v - 0.3, 9.0)

    def test(spectrum):
        return kk_test(bin_spectrum(spectrum, 3000)[0])

    out, (rec,), kk = level_steps_if_better(cl.spectrum, [fake], test)
    assert rec.applied is False and "left as measured" in rec.reason
    np.testing.assert_array_equal(out.eps, cl.spectrum.eps)
    assert kk.verdict == "consistent"


class _Score:
    def __init__(self, chi2_dof):
        self.chi2_dof = chi2_dof


def _flat_with_step():
    # 20 points of eps = 2 (eps1 only); eps1 raised by 0.5 from point 15 on (a real step)
    e = np.arange(1.0, 21.0)
    eps1 = np.where(np.arange(20) >= 15, 2.5, 2.0)
    return Spectrum.from_dataset(Dataset("a", e, eps1 + 0j))


def test_level_steps_if_better_keeps_only_what_lowers_the_score():
    # Worked by hand with the stub score sum (eps1 - 2)^2:
    #   start: 5 points off by 0.5 -> 1.25.
    #   A (index 15, jump 0.5, relative 0.5/2.5 = 0.2) is tried first; 15 points below vs 5
    #   above, no overlap: the lower side is kept, the upper shifted by -0.5 -> score 0 < 1.25,
    #   accepted.
    #   B (index 5, claimed jump 0.3 where there is none, relative 0.3/2.0 = 0.15): 5 below vs
    #   15 above, the upper side is kept, the lower shifted by +0.3 -> 5 * 0.09 = 0.45, not
    #   below 0: rejected, "(0.45 vs 0)".
    sp = _flat_with_step()
    step_a = Outlier(16.0, "a", "eps1", "step", 15, 2.5, 2.0, 50.0)
    step_b = Outlier(6.0, "a", "eps1", "step", 5, 2.0, 1.7, 9.0)
    calls = []

    def score(spectrum):
        calls.append(spectrum)
        return _Score(float(np.sum((spectrum.eps.real - 2.0) ** 2)))

    out, recs, best = level_steps_if_better(sp, [step_b, step_a], score)
    assert len(calls) == 3  # the start, then one trial per step
    np.testing.assert_allclose(out.eps.real, 2.0, rtol=0, atol=1e-15)
    assert best.chi2_dof == pytest.approx(0.0, abs=1e-28)
    assert [r.energy_ev for r in recs] == [6.0, 16.0]  # sorted by energy
    rec_b, rec_a = recs
    assert rec_a.applied and rec_a.kept == "below" and rec_a.points == 5
    assert rec_a.jump == pytest.approx(0.5) and rec_a.relative == pytest.approx(0.2)
    assert rec_a.reason == "the lower-energy side holds more points (no overlap decides)"
    assert not rec_b.applied and rec_b.kept == "above" and rec_b.points == 5
    assert rec_b.reason == (
        "left as measured: levelling it did not lower the KK chi2/dof (0.45 vs 0), so it may "
        "be a real feature"
    )
    # only the first max_trials steps are tried, the rest recorded as not tried
    out1, (r_b, r_a), best1 = level_steps_if_better(sp, [step_b, step_a], score, max_trials=1)
    assert r_a.applied and not r_b.applied and r_b.reason == "not tried (> 1 steps)"
    assert best1.chi2_dof == pytest.approx(0.0, abs=1e-28)


def test_step_correction_to_dict_is_strict_json():
    # RFC 8259 JSON has no NaN: json.dumps(allow_nan=False) must accept the item (a NaN
    # relative jump, from a step at a zero value, is written as null); a step left as
    # measured shifts no point.
    import json

    c = StepCorrection(1.0, "nir", "n", 0.1, float("nan"), "above", 12, "why", applied=False)
    d = json.loads(json.dumps(c.to_dict(), allow_nan=False))
    assert d == {
        "energy_ev": 1.0,
        "source": "nir",
        "component": "n",
        "jump": 0.1,
        "relative": None,
        "kept_side": "above",
        "points_shifted": 0,
        "applied": False,
        "reason": "why",
    }
