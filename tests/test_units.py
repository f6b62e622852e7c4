"""Unit layer: conversions against CODATA 2018 values and optical-constant identities."""

import numpy as np
import pytest

from kkcheck.materials import sellmeier_silica
from kkcheck.units import (
    AXIS_UNITS,
    detect_convention,
    eps_to_nk,
    from_energy_ev,
    nk_to_eps,
    sigma_nk_to_eps,
    to_energy_ev,
)


def test_codata_energy_equivalents():
    # CODATA 2018 (Tiesinga et al., Rev. Mod. Phys. 93, 025010): 1 eV = 8065.543937 cm^-1,
    # 1 eV = 241.7989242 THz, hc = 1239.841984 eV nm, hbar = 6.582119569e-16 eV s.
    assert to_energy_ev(8065.543937, "wavenumber_cm-1") == pytest.approx(1.0, rel=1e-9)
    assert to_energy_ev(241.7989242, "frequency_thz") == pytest.approx(1.0, rel=1e-9)
    assert to_energy_ev(1239.841984, "wavelength_nm") == pytest.approx(1.0, rel=1e-12)
    assert to_energy_ev(1.239841984, "wavelength_um") == pytest.approx(1.0, rel=1e-12)
    assert to_energy_ev(1.0 / 6.582119569e-16, "angular_frequency_rad_s") == pytest.approx(1.0)


@pytest.mark.parametrize("axis", AXIS_UNITS)
def test_axis_round_trip(axis):
    e = np.geomspace(0.01, 20.0, 57)
    np.testing.assert_allclose(to_energy_ev(from_energy_ev(e, axis), axis), e, rtol=1e-14)


def test_unknown_axis_is_an_error():
    with pytest.raises(ValueError, match="unknown axis unit"):
        to_energy_ev([1.0], "furlongs")


def test_nk_eps_round_trip_metals_and_dielectrics():
    # Identity eps = (n + ik)^2 (common practice, no source); includes a metal (eps1 << 0)
    rng = np.random.default_rng(3)
    n = np.r_[rng.uniform(0.05, 5, 200), 0.14]
    k = np.r_[rng.uniform(0.0, 6, 200), 3.697]
    eps = nk_to_eps(n, k)
    np.testing.assert_allclose(eps, (n + 1j * k) ** 2, rtol=1e-14)
    n2, k2 = eps_to_nk(eps)
    np.testing.assert_allclose(n2, n, rtol=1e-10, atol=1e-12)
    np.testing.assert_allclose(k2, k, rtol=1e-10, atol=1e-12)


def test_johnson_christy_gold_row():
    # P. B. Johnson, R. W. Christy, Phys. Rev. B 6, 4370-4379 (1972), Au at 1.88 eV: n = 0.14,
    # k = 3.697 (the row as transcribed identically in several public scripts; the printed
    # table was not read) -> eps = (n + ik)^2 = -13.648 + 1.035i (closed form)
    eps = nk_to_eps(0.14, 3.697)
    assert eps.real == pytest.approx(-13.648, abs=1e-3)
    assert eps.imag == pytest.approx(1.035, abs=1e-3)


def test_sigma_propagation_matches_finite_differences():
    # First-order error propagation (common practice, no source) against a numerical Jacobian
    n, k, sn, sk = 2.0, 0.5, 1e-3, 2e-3
    d = 1e-7
    j = np.array(
        [
            [(nk_to_eps(n + d, k) - nk_to_eps(n - d, k)) / (2 * d)],
            [(nk_to_eps(n, k + d) - nk_to_eps(n, k - d)) / (2 * d)],
        ]
    ).ravel()
    s1_ref = np.hypot(j[0].real * sn, j[1].real * sk)
    s2_ref = np.hypot(j[0].imag * sn, j[1].imag * sk)
    s1, s2 = sigma_nk_to_eps(n, k, sn, sk)
    assert s1 == pytest.approx(s1_ref, rel=1e-6)
    assert s2 == pytest.approx(s2_ref, rel=1e-6)


def test_fused_silica_sellmeier_through_unit_layer():
    # Malitson 1965 (J. Opt. Soc. Am. 55, 1205): n(587.56 nm) = 1.458464, n(1064 nm) = 1.449631
    # (computed from the published coefficients and cross-checked, not read from the paper)
    for lam_nm, n_ref in ((587.56, 1.458464), (1064.0, 1.449631)):
        for axis, value in (
            ("wavelength_nm", lam_nm),
            ("wavelength_um", lam_nm / 1e3),
            ("wavenumber_cm-1", 1e7 / lam_nm),
        ):
            n, k = eps_to_nk(sellmeier_silica(to_energy_ev(value, axis)))
            assert n == pytest.approx(n_ref, abs=1e-6)
            assert k == 0.0


def test_convention_detection_both_ways():
    # Passive media have k >= 0 in exp(-iwt): the definition of that convention (a passive
    # medium absorbs, Im N >= 0); common practice, no source
    rng = np.random.default_rng(7)
    k = np.abs(rng.normal(0.3, 0.1, 100))
    assert detect_convention(k).detected == "exp(-iwt)"
    c = detect_convention(-k)
    assert c.detected == "exp(+iwt)" and c.clear
    # noise around zero (transparent sample) is not a convention: kept, flagged unclear
    c = detect_convention(rng.normal(0.0, 1e-3, 400))
    assert c.detected == "exp(-iwt)" and not c.clear
    # a few negative points among clearly positive data stay exp(-iwt)
    mixed = np.r_[k, -0.01 * np.ones(5)]
    assert detect_convention(mixed).detected == "exp(-iwt)"
