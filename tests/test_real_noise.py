"""The noise model of tabulated data: printed digits, rounding, scatter, resolution (issue 10).

Sources: the rectangular-distribution uncertainty q/sqrt(12) (JCGM 100:2008, section 4.3.7,
from memory), the linear-interpolation error term (Burden & Faires, Numerical Analysis,
Theorem 3.3, from memory), and published tables of the corpus (reference_data/published,
catalogue.csv) for what a real table looks like.
"""

from pathlib import Path

import numpy as np
import pytest

from kkcheck.io import read_table
from kkcheck.io.cells import printed_quantum
from kkcheck.noise import local_noise, resolution_sigma, scatter_sigma, spectrum_noise
from kkcheck.spectrum import Dataset, Spectrum, rounding_of_dataset

PUBLISHED = Path(__file__).resolve().parents[1] / "reference_data" / "published"


def test_printed_quantum_by_hand():
    # by hand: the unit of the last printed digit (1.2340 -> 1e-4; 3.1e-05 is 3.1 x 1e-5 so
    # its last digit is 1e-6; an integer's last digit is 1; Fortran D exponents read as E)
    toks = ["1.2340", "3.1e-05", "400", "1.5D+00", "-.5", "2.", "0.000", "1E3", "+7.25e+2"]
    want = [1e-4, 1e-6, 1.0, 1e-1, 1e-1, 1.0, 1e-3, 1e3, 1e0]
    assert printed_quantum(toks) == pytest.approx(want, rel=1e-12)


def test_reader_records_digits_and_zero_bounds_of_a_published_table():
    # tio2_sarkar2019_film: catalogue.csv says k is printed as exactly 0 on 912 of 977 rows
    ds = read_table(PUBLISHED / "tio2_sarkar2019_film.csv")
    assert ds.value_quantum.shape == (len(ds), 2)
    _, _, zero = rounding_of_dataset(ds)
    assert int(zero.sum()) == 912
    spec = Spectrum.from_dataset(ds)
    assert int(spec.zero_bound.sum()) == 912
    # a printed 0 is a bound: its eps2 uncertainty is 2 n q (whole quantum), never zero
    assert np.all(spec.rounding_eps2[spec.zero_bound] > 0)


def test_rounding_uncertainty_matches_the_rounding_error_of_a_reprinted_curve():
    # JCGM 100:2008 4.3.7 (from memory): rounding to a unit q is uniform on +-q/2, standard
    # uncertainty q/sqrt(12). Re-print a smooth eps table with 4 decimals and compare the
    # recorded rounding with the actual rounding errors (std of 4000 uniforms: ~1.1 %).
    e = np.linspace(1.0, 3.0, 4000)
    eps = 2.0 + 0.3 * e + 1j * (0.5 + 0.1 * np.sin(3 * e))
    q = 1e-4
    printed = np.round(eps.real / q) * q + 1j * np.round(eps.imag / q) * q
    ds = Dataset("r", e, printed, value_quantum=np.full((e.size, 2), q))
    r1, r2, zero = rounding_of_dataset(ds)
    assert not zero.any()
    assert r1 == pytest.approx(np.full(e.size, q / np.sqrt(12)), rel=1e-12)
    actual = np.std((printed - eps).real)
    assert actual == pytest.approx(q / np.sqrt(12), rel=0.05)
    assert r2[0] == pytest.approx(np.std((printed - eps).imag), rel=0.05)


def _lorentz(e):
    # one Lorentz oscillator (closed form): eps = 1 + f / (e0^2 - e^2 - i g e)
    return 1.0 + 20.0 / (4.0**2 - e**2 - 1j * 0.8 * e)


def test_scatter_is_not_fooled_by_a_smooth_coarse_curve():
    # a noiseless Lorentz oscillator on 60 points: the cubic pseudo-residual estimator
    # (Gasser et al. 1986) reads its fourth-derivative term as noise; the high-passed,
    # grid-calibrated scatter must stay far below it (no source for the margin: 10x)
    e = np.linspace(1.0, 7.0, 60)
    y = _lorentz(e).imag
    old = np.median(local_noise(e, y))
    new = np.median(scatter_sigma(e, y))
    assert new < old / 10


def test_scatter_recovers_planted_white_noise():
    # planted Gaussian noise sigma 2e-3 on the same curve at 600 points (fixed seed); the
    # median of a running MAD ratio scatters a few % (common practice, no source: 15 %)
    e = np.linspace(1.0, 7.0, 600)
    rng = np.random.default_rng(7)
    y = _lorentz(e).imag + 2e-3 * rng.standard_normal(e.size)
    assert np.median(scatter_sigma(e, y)) == pytest.approx(2e-3, rel=0.15)


def test_resolution_of_a_parabola_is_the_linear_interpolation_error():
    # closed form: f = a x^2 has f'' = 2a; the RMS of linear interpolation's error over an
    # interval of width h is |f''| h^2 / sqrt(120) (Burden & Faires Thm 3.3, from memory)
    x = np.linspace(1.0, 2.0, 51)
    h = x[1] - x[0]
    r = resolution_sigma(x, 3.0 * x**2)
    assert r == pytest.approx(np.full(x.size, 6.0 * h**2 / np.sqrt(120.0)), rel=1e-6)
    # and the exact RMS of the interpolation error, integrated numerically, agrees
    t = np.linspace(0.0, h, 20001)
    err = 3.0 * (x[10] + t) ** 2 - (
        3.0 * x[10] ** 2 + (3.0 * x[11] ** 2 - 3.0 * x[10] ** 2) * t / h
    )
    assert np.sqrt(np.mean(err**2)) == pytest.approx(r[10], rel=1e-3)


@pytest.mark.parametrize("name", ["tio2_sarkar2019_film", "gaas_aspnes1986", "cr_johnson1974"])
def test_noise_model_is_idempotent_and_reported(name):
    # the clean stage fills missing sigmas from this estimate; estimating again on the filled
    # spectrum must give the same sigmas (published tables of the corpus)
    spec = Spectrum.from_dataset(read_table(PUBLISHED / f"{name}.csv"))
    ne = spectrum_noise(spec)
    again = spectrum_noise(spec.replace(sigma_eps1=ne.sigma_eps1, sigma_eps2=ne.sigma_eps2))
    assert again.sigma_eps1 == pytest.approx(ne.sigma_eps1, rel=1e-12)
    assert again.sigma_eps2 == pytest.approx(ne.sigma_eps2, rel=1e-12)
    d = ne.to_dict()
    (src,) = d["sources"]
    assert src["source"] == name
    assert set(src["relative"]) == {"rounding", "stated", "scatter", "resolution", "combined"}
    assert src["dominant"] in {"rounding", "stated", "scatter", "resolution"}


def test_reprinted_table_rounding_part_follows_the_digits():
    # sio2_kischkat2012_film re-printed with 3, 4 and 6 decimals of n and k: the rounding part
    # must scale by 10 per digit (q/sqrt(12), JCGM 100:2008 4.3.7) and the scatter part must
    # not exceed the rounding by much (rounding-limited table; margin 3x, no source)
    ds = read_table(PUBLISHED / "sio2_kischkat2012_film.csv")
    from kkcheck.units import eps_to_nk, nk_to_eps

    n, k = eps_to_nk(ds.eps)
    med = []
    for dec in (3, 4, 6):
        q = 10.0**-dec
        eps = nk_to_eps(np.round(n / q) * q, np.round(k / q) * q)
        d = Dataset("p", ds.energy_ev, eps, quantity="nk", value_quantum=np.full((len(ds), 2), q))
        ne = spectrum_noise(Spectrum.from_dataset(d))
        clear = k > 5e-3  # k far from its bound in every printing
        med.append(np.median(ne.rounding[0][clear]))
        if dec <= 4:
            assert np.median(ne.scatter[0]) < 3 * np.median(ne.rounding[0])
    assert med[0] / med[1] == pytest.approx(10.0, rel=0.05)
    assert med[1] / med[2] == pytest.approx(100.0, rel=0.05)
