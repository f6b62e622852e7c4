"""Noise estimation (kkcheck.noise) against planted noise of known size and closed forms."""

import numpy as np
import pytest
from scipy.stats import median_abs_deviation, norm

from kkcheck.noise import (
    NORMAL_MAD,
    estimate_noise,
    local_noise,
    neighbour_noise_sigma,
    noise_per_point,
    running_noise_sigma,
    spectrum_noise,
)
from kkcheck.spectrum import Dataset, Spectrum
from kkcheck.units import HC_EV_NM, eps_to_nk, nk_to_eps, sigma_nk_to_eps


def _grid(n=400, seed=0):
    # nonuniform grid: uniform in wavelength 300-1000 nm, converted to eV (hc = 1239.841984 eV nm)
    return np.sort(1239.841984 / np.linspace(300, 1000, n))


def test_mad_factor_matches_reference_check_value():
    # closed form: the MAD of normal noise is Phi^-1(3/4) sigma (Hampel, J. Am. Stat. Assoc.
    # 69, 383 (1974)), so the factor is 1 / scipy.stats.norm.ppf(0.75).
    assert NORMAL_MAD == pytest.approx(1.0 / norm.ppf(0.75), rel=1e-15)
    # by hand: x = [1,2,3,4,100,6,7,8,9] has median 6 and |x - 6| sorted 0,1,2,2,3,3,4,5,94,
    # so raw MAD 3.0 and normal-scaled 3 / 0.6744898 = 4.447807; scipy as the reference.
    x = np.array([1, 2, 3, 4, 100, 6, 7, 8, 9], float)
    raw = np.median(np.abs(x - np.median(x)))
    assert raw == 3.0
    assert NORMAL_MAD * raw == pytest.approx(4.447807, abs=1e-6)
    assert NORMAL_MAD * raw == pytest.approx(median_abs_deviation(x, scale="normal"), rel=1e-12)


def test_neighbour_noise_sigma_recovers_white_noise_on_nonuniform_grid():
    # planted Gaussian noise of sigma 0.01 on a smooth curve sampled uniformly in wavelength
    # (nonuniform in energy); a MAD of 5000 values scatters ~1.6 % (common practice, no
    # source), so 5 % is a safe bound.
    rng = np.random.default_rng(11)
    e = np.sort(HC_EV_NM / np.linspace(400.0, 1600.0, 5000))
    y = np.sin(2.0 * e) + rng.normal(0, 0.01, e.size)
    assert neighbour_noise_sigma(e, y) == pytest.approx(0.01, rel=0.05)
    assert np.isnan(neighbour_noise_sigma(e[:4], y[:4]))  # documented: NaN below 5 points


def test_running_noise_sigma_follows_a_noise_change():
    # planted: noise 1e-3 on the first half, 4e-3 on the second, on a smooth curve; the
    # running estimate over 51 points (MAD scatter ~ 10 %, common practice, no source) must
    # read each level within 25 % away from the change.
    rng = np.random.default_rng(21)
    e = np.linspace(1.0, 4.0, 1000)
    s = np.where(e < 2.5, 1e-3, 4e-3)
    y = np.cos(e) + s * rng.standard_normal(e.size)
    est = running_noise_sigma(e, y, 25)
    assert np.median(est[50:450]) == pytest.approx(1e-3, rel=0.25)
    assert np.median(est[550:950]) == pytest.approx(4e-3, rel=0.25)
    assert np.all(est > 0)


def test_noise_per_point_propagates_region_noise_of_nk_sources():
    # noise planted in n and k (3e-3 each): the regional estimate is propagated to eps by the
    # first-order closed form sigma_eps1 = 2 sqrt(n^2 sn^2 + k^2 sk^2) (sigma_nk_to_eps), so
    # the per-point sigmas follow that law with the estimated levels.
    e = _grid(2000)
    eps = (2.0 + 0.5 * e) + 1j * (0.2 + 1.5 * np.exp(-((e - 3) ** 2)))
    n, k = eps_to_nk(eps)
    rng = np.random.default_rng(9)
    nn = n + 3e-3 * rng.standard_normal(e.size)
    kn = k + 3e-3 * rng.standard_normal(e.size)
    sp = Spectrum.from_dataset(Dataset("nk", e, nk_to_eps(nn, kn), quantity="nk"))
    rep = estimate_noise(sp, region_points=500)
    assert [r.component for r in rep.regions] == ["n"] * 4 + ["k"] * 4
    assert rep.sigma("nk", "n") == pytest.approx(3e-3, rel=0.15)
    assert rep.sigma("nk", "k") == pytest.approx(3e-3, rel=0.15)
    s1, s2 = noise_per_point(sp, rep)
    t1, t2 = sigma_nk_to_eps(n, k, 3e-3, 3e-3)
    assert np.median(s1 / t1) == pytest.approx(1.0, rel=0.15)
    assert np.median(s2 / t2) == pytest.approx(1.0, rel=0.15)


@pytest.mark.parametrize("sigma", [1e-3, 3e-2])
def test_homoscedastic_noise_recovered(sigma):
    # planted Gaussian noise of known sigma on a smooth curve; a MAD estimate from ~50 points
    # has ~10 % relative scatter (common practice, no source), so 20 % is a safe bound.
    e = _grid()
    rng = np.random.default_rng(11)
    y = np.sin(3 * e) + 0.3 * e**2 + sigma * rng.standard_normal(e.size)
    est = local_noise(e, y)
    assert np.median(est) == pytest.approx(sigma, rel=0.15)
    assert np.all(est > 0.6 * sigma) and np.all(est < 1.6 * sigma)


def test_heteroscedastic_noise_followed():
    # noise growing linearly by a factor 6 across the window (planted): the estimate must follow
    # it within 30 % at both ends (window of ~50 points; common practice, no source)
    e = np.linspace(1.0, 5.0, 600)
    s = 1e-3 * (1 + 5 * (e - 1) / 4)
    rng = np.random.default_rng(5)
    y = np.exp(-((e - 3) ** 2)) + s * rng.standard_normal(e.size)
    est = local_noise(e, y)
    assert np.median(est[:60] / s[:60]) == pytest.approx(1.0, rel=0.3)
    assert np.median(est[-60:] / s[-60:]) == pytest.approx(1.0, rel=0.3)


def test_spikes_do_not_inflate_estimate():
    # 5 spikes of 100 sigma among 400 points: a median-based estimate moves by < 20 %
    e = _grid()
    rng = np.random.default_rng(3)
    y = np.cos(e) + 1e-3 * rng.standard_normal(e.size)
    y[[50, 120, 200, 260, 330]] += 0.1
    assert np.median(local_noise(e, y)) == pytest.approx(1e-3, rel=0.2)


def test_nk_source_noise_propagated_to_eps():
    # noise planted in n and k (0.01 each); sigma_eps must follow the first-order propagation
    # sigma_eps1 = 2 sqrt(n^2 sn^2 + k^2 sk^2) (closed form), so it grows with |N|
    e = _grid()
    eps = (2.0 + 0.5 * e) + 1j * (0.2 + 1.5 * np.exp(-((e - 3) ** 2)))
    n, k = eps_to_nk(eps)
    rng = np.random.default_rng(7)
    nn = n + 0.01 * rng.standard_normal(e.size)
    kn = k + 0.01 * rng.standard_normal(e.size)
    sp = Spectrum.from_dataset(Dataset("nk", e, nk_to_eps(nn, kn), quantity="nk"))
    ne = spectrum_noise(sp)
    t1, t2 = sigma_nk_to_eps(n, k, 0.01, 0.01)
    assert np.median(ne.sigma_eps1 / t1) == pytest.approx(1.0, rel=0.2)
    assert np.median(ne.sigma_eps2 / t2) == pytest.approx(1.0, rel=0.2)
    assert ne.estimated.all()


def test_given_sigma_is_used_and_floor_applies():
    e = np.linspace(1, 3, 50)
    eps = (2.0 + 0.1 * e) + 1j * (0.5 + 0.0 * e)  # exactly linear: cubic residual ~ 1e-16
    sp = Spectrum.from_dataset(
        Dataset("given", e, eps, sigma_eps1=np.full(50, 0.02), sigma_eps2=np.full(50, 0.03))
    )
    ne = spectrum_noise(sp)
    np.testing.assert_array_equal(ne.sigma_eps1, 0.02)
    np.testing.assert_array_equal(ne.sigma_eps2, 0.03)
    assert not ne.estimated.any()
    # no uncertainty given and noiseless data: the documented floor 1e-4 |eps| is used
    sp0 = Spectrum.from_dataset(Dataset("clean", e, eps))
    ne0 = spectrum_noise(sp0)
    np.testing.assert_allclose(ne0.sigma_eps1, 1e-4 * np.abs(eps), rtol=1e-12)
    np.testing.assert_allclose(ne0.sigma_eps2, 1e-4 * np.abs(eps), rtol=1e-12)
