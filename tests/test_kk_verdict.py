"""kkcheck.kk.verdict on small constructed cases whose sizes are worked out by hand."""

import numpy as np

from kkcheck.kk.consistency import KKTestOptions, kk_test
from kkcheck.kk.regions import Region
from kkcheck.kk.verdict import deviation_profile, sized_region, verdict_text, worst_part
from kkcheck.materials import lorentz
from kkcheck.spectrum import Dataset, Spectrum


def test_sizes_by_hand_on_both_fits():
    # eps = 4 + 1i everywhere (|eps| = 4.12); a deviation of 0.2 in eps2 on points 4-8 of the
    # refit model, 0.1 against the fit to all points, no noise: the excess deviation is the
    # running rms of the difference (width 1 -> the difference itself), over |eps|
    e = np.linspace(1.0, 2.0, 12)
    data = np.full(12, 4.0 + 1.0j)
    bump = (np.arange(12) >= 4) & (np.arange(12) <= 8)
    refit = data - 0.2j * bump
    allfit = data - 0.1j * bump
    zero, counted = np.zeros(12), np.ones(12, bool)
    dev_r = deviation_profile(data, refit, zero, zero, counted, 1)
    dev_a = deviation_profile(data, allfit, zero, zero, counted, 1)
    g = Region(float(e[4]), float(e[8]), "eps2", 10.0)
    s = sized_region(g, e, dev_r, 0.03, dev_a)
    scale = abs(4.0 + 1.0j)
    np.testing.assert_allclose(s.deviation_refit_rel, 0.2 / scale, rtol=1e-12)
    np.testing.assert_allclose(s.deviation_all_rel, 0.1 / scale, rtol=1e-12)
    assert s.deviation_rel == s.deviation_all_rel  # the smaller decides
    assert not s.exceeds_tolerance  # 2.4 % < 3 %, although 4.9 % against the refit
    # k_data - k_model by hand: sqrt(4+1i) vs sqrt(4+0.9i) (the all-points fit, smaller)
    np.testing.assert_allclose(s.dk_max, abs((np.sqrt(4 + 1j) - np.sqrt(4 + 0.9j)).imag))
    assert sized_region(g, e, dev_r, 0.03).exceeds_tolerance  # one fit only: 4.9 % > 3 %
    # noise is subtracted in quadrature: sigma 0.1 leaves sqrt(0.2^2 - 0.1^2)
    dev_n = deviation_profile(data, refit, zero, np.full(12, 0.1), counted, 1)
    np.testing.assert_allclose(dev_n.rel2[6], np.sqrt(0.03) / scale, rtol=1e-12)
    assert verdict_text([], [s], 0.0, 0.03).startswith("consistent within 3 %")


def test_worst_part_is_the_run_around_the_largest_running_rms():
    # z2 = 0 except 6, 8, 6 at points 10-12: the worst part is eps2 there (running rms with
    # width 1 is |z|; the run stays above half the peak, 4, over 10-12)
    e = np.linspace(1.0, 3.0, 30)
    z1 = np.zeros(30)
    z2 = np.zeros(30)
    z2[10:13] = [6.0, 8.0, 6.0]
    w = worst_part(e, z1, z2, np.ones(30, bool), 1, 10.0)
    assert (w.component, w.origin, w.label) == ("eps2", "worst_part", "moderate")
    assert (w.from_ev, w.to_ev, w.severity) == (e[10], e[12], 8.0)


def test_warm_started_refit_equals_cold_solve():
    # a Lorentz oscillator (closed form, common practice) with noise, refitted without 20
    # points: the bounded least-squares problem is convex, so warm and cold starts must reach
    # the same minimiser (to solver precision)
    rng = np.random.default_rng(5)
    e = np.linspace(1.0, 4.0, 200)
    eps = 2.0 + lorentz(e, 1.0, 2.5, 0.25)
    eps = eps + 0.002 * (rng.standard_normal(200) + 1j * rng.standard_normal(200))
    r = kk_test(Spectrum.from_dataset(Dataset("t", e, eps)), options=KKTestOptions())
    w = np.ones(200)
    w[90:110] = 0.0
    args = (e, eps, r.sigma_eps1, r.sigma_eps2, w)
    warm = r.model.refit(*args, warm_start=True)
    cold = r.model.refit(*args, warm_start=False)
    np.testing.assert_allclose(warm.chi2, cold.chi2, rtol=1e-6)
    np.testing.assert_allclose(warm.model.eps(e), cold.model.eps(e), atol=1e-6)
