"""Detector-changeover steps: levelled before the KK test, reported, never hidden."""

import numpy as np
import pytest

from kkcheck.clean import clean, level_steps
from kkcheck.kk import kk_test
from kkcheck.materials import tauc_lorentz
from kkcheck.merge import merge
from kkcheck.spectrum import Dataset, Flag
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


def test_pipeline_leaves_a_step_that_kk_does_not_support():
    # A "step" claimed on clean data (what a sharp feature on a sparse grid can look like to
    # the detector) must not be levelled: shifting half a source would create the very
    # inconsistency it is meant to remove (common practice, no source).
    from kkcheck.clean import Outlier
    from kkcheck.kk import KKTestOptions
    from kkcheck.pipeline import JobOptions, _level_steps_if_consistent

    a, _, _ = _sources()
    cl = clean(merge([a]).spectrum)
    i = len(cl.spectrum) // 2
    v = float(cl.spectrum.eps.real[i])
    fake = Outlier(float(cl.spectrum.energy_ev[i]), "uv", "eps1", "step", i, v, v - 0.3, 9.0)
    out, (rec,), kk = _level_steps_if_consistent(cl, [fake], JobOptions(), KKTestOptions())
    assert rec.applied is False and "left as measured" in rec.reason
    np.testing.assert_array_equal(out.spectrum.eps, cl.spectrum.eps)
    assert kk.verdict == "consistent"
