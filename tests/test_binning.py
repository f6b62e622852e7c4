"""Binning large spectra before the dense KK fit: smooth stretches only, nothing hidden."""

import numpy as np
import pytest

from kkcheck.clean import clean
from kkcheck.kk import kk_test
from kkcheck.kk.binning import bin_spectrum
from kkcheck.materials import lorentz
from kkcheck.spectrum import Dataset, Flag, Spectrum
from kkcheck.units import EV_PER_INV_CM


def _ftir(n, fault=False, seed=0):
    # two Lorentz phonons (closed form, common practice) on a wavenumber grid, 400-4000 cm^-1
    rng = np.random.default_rng(seed)
    e = np.linspace(400.0, 4000.0, n) * EV_PER_INV_CM
    eps = 2.0 + lorentz(e, 0.8, 0.118, 0.004) + lorentz(e, 0.3, 0.2, 0.01)
    if fault:  # a bump in eps2 at 0.3 eV with no partner in eps1
        eps = eps + 1j * 0.01 * np.exp(-0.5 * ((e - 0.3) / 0.01) ** 2)
    eps = eps + rng.normal(0, 1e-3, n) + 1j * rng.normal(0, 1e-3, n)
    return clean(Spectrum.from_dataset(Dataset("ftir", e, eps))).spectrum


def test_small_spectra_are_untouched():
    sp = _ftir(500)
    out, rec = bin_spectrum(sp, 3000)
    assert out is sp and rec.points_in == rec.points_out == 500
    assert rec.note() is None  # nothing to say when nothing was binned


def test_bins_average_smooth_stretches_and_keep_sharp_ones():
    sp = _ftir(6000)
    out, rec = bin_spectrum(sp, 1000)
    assert rec.bin_size == 6 and rec.points_out < 0.45 * 6000
    # the narrow phonon (FWHM 0.004 eV ~ 32 cm^-1 ~ 53 samples) keeps full resolution at its peak
    peak = np.argmax(sp.eps.imag)
    assert np.min(np.abs(out.energy_ev - sp.energy_ev[peak])) < 1e-12
    # means and propagated noise: a bin of b points of white noise has sigma / sqrt(b)
    big = np.flatnonzero(np.diff(out.energy_ev) > 5 * np.median(np.diff(sp.energy_ev)))
    i = big[len(big) // 2]
    ratio = out.sigma_eps1[i] / np.median(sp.sigma_eps1)
    assert ratio == pytest.approx(1 / np.sqrt(6), rel=0.3)
    # the note states the counts of the record (points in, out, bin size, kept points)
    assert rec.note().startswith(f"6000 points were binned to {rec.points_out} for the test")
    assert "up to 6 neighbours averaged" in rec.note()
    assert f"{rec.kept_sharp} points at sharp features" in rec.note()
    # flagged points survive as themselves
    assert np.count_nonzero(out.flags & int(Flag.SPIKE)) == np.count_nonzero(
        sp.flags & int(Flag.SPIKE)
    )


@pytest.mark.slow
def test_binned_kk_test_keeps_verdicts():
    clean_out, _ = bin_spectrum(_ftir(6000), 1200)
    fault_out, _ = bin_spectrum(_ftir(6000, fault=True), 1200)
    assert kk_test(clean_out).verdict == "consistent"
    r = kk_test(fault_out)
    assert r.verdict == "inconsistent"
    assert any(g.from_ev < 0.3 < g.to_ev for g in r.regions)  # planted at 0.3 eV
