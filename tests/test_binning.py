"""Binning large spectra before the dense KK fit: smooth stretches only, nothing hidden."""

import dataclasses

import numpy as np
import pytest

from kkcheck.clean import clean
from kkcheck.kk import kk_test
from kkcheck.kk.binning import bin_spectrum, sidak_threshold
from kkcheck.kk.consistency import KKTestOptions
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
    # the cap is hard: never more than max_points, even with the phonons kept sharp
    assert rec.points_out <= 1000 and not rec.cap_reached
    assert rec.bin_size >= 6
    # the narrow phonon (FWHM 0.004 eV ~ 32 cm^-1 ~ 53 samples) keeps full resolution at its peak
    peak = np.argmax(sp.eps.imag)
    assert np.min(np.abs(out.energy_ev - sp.energy_ev[peak])) < 1e-12
    # means and propagated noise: a bin of b points of white noise has sigma / sqrt(b)
    big = np.flatnonzero(np.diff(out.energy_ev) > 5 * np.median(np.diff(sp.energy_ev)))
    i = big[len(big) // 2]
    ratio = out.sigma_eps1[i] / np.median(sp.sigma_eps1)
    width = np.diff(out.energy_ev)[i] / np.median(np.diff(sp.energy_ev))
    assert ratio == pytest.approx(1 / np.sqrt(width), rel=0.3)
    # the note states the counts of the record (points in, out, bin size, kept points)
    assert rec.note().startswith(f"6000 points were binned to {rec.points_out} for the test")
    assert f"up to {rec.bin_size} neighbours averaged" in rec.note()
    assert f"{rec.kept_sharp} points at sharp features" in rec.note()
    # flagged points survive as themselves
    assert np.count_nonzero(out.flags & int(Flag.SPIKE)) == np.count_nonzero(
        sp.flags & int(Flag.SPIKE)
    )


def test_cap_is_hard_and_sharp_noise_stays_binned():
    # a spectrum sharp everywhere (a comb of narrow Lorentz lines, closed form) is capped,
    # with the cap stated in the note
    e = np.linspace(0.1, 1.0, 20000)
    eps = 2.0 + sum(lorentz(e, 0.01, c, 0.002) for c in np.linspace(0.12, 0.98, 60))
    sp = Spectrum.from_dataset(Dataset("comb", e, eps))
    sig = np.full(e.size, 1e-6)
    sp = dataclasses.replace(sp, sigma_eps1=sig, sigma_eps2=sig)
    out, rec = bin_spectrum(sp, 1000)
    assert len(out) <= 1000 and rec.cap_reached and rec.sharp_bin_size > 1
    assert "cap of the dense fit was reached" in rec.note()
    # pure white noise on a straight line: the Sidak threshold (Sidak 1967) keeps noise
    # from holding points out of the bins (3 sigma kept ~1 in 8 points of a 1e5 table)
    rng = np.random.default_rng(3)
    n = 100_000
    e = np.linspace(1.0, 2.0, n)
    noisy = (
        2.0 + 0.1 * e + 1e-4 * rng.standard_normal(n) + 1j * (0.5 + 1e-4 * rng.standard_normal(n))
    )
    sp = dataclasses.replace(
        Spectrum.from_dataset(Dataset("line", e, noisy)),
        sigma_eps1=np.full(n, 1e-4),
        sigma_eps2=np.full(n, 1e-4),
    )
    out, rec = bin_spectrum(sp, 3000)
    assert rec.kept_sharp < 0.01 * n and len(out) <= 3000
    assert rec.sharp_threshold == pytest.approx(sidak_threshold(4 * (n - 2) - 4 * 34), abs=0.05)


@pytest.mark.slow
def test_binned_kk_test_keeps_verdicts():
    clean_out, _ = bin_spectrum(_ftir(6000), 1200)
    fault_out, _ = bin_spectrum(_ftir(6000, fault=True), 1200)
    assert kk_test(clean_out).verdict == "consistent"
    # the planted bump is 0.01 on |eps| ~ 2 (0.5 %): significant, but within the default 1 %
    r = kk_test(fault_out)
    assert r.verdict == "consistent"
    assert any(g.from_ev < 0.3 < g.to_ev for g in r.regions_within_tolerance)
    strict = kk_test(fault_out, options=KKTestOptions(tolerance=0.002))
    assert strict.verdict == "inconsistent"
    assert any(g.from_ev < 0.3 < g.to_ev for g in strict.regions)  # planted at 0.3 eV
