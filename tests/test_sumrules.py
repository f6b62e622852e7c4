"""Sum rules on closed-form Drude and Lorentz dielectric functions.

The rules are those of Altarelli, Dexter, Nussenzveig & Smith, Phys. Rev. B 6, 4502 (1972)
(equation numbers not recorded); the check values are computed from the closed forms
(docs/references.md [SumRuleFormulas]).
"""

import dataclasses
import json

import numpy as np
import pytest

from kkcheck.errors import InputError
from kkcheck.kk.sumrules import NEFF_CM3_EV2, fsum_cumulative, n_eff, sum_rules
from kkcheck.materials import drude, lorentz

# very wide window with a dense patch at the Drude knee / Lorentz peak
X = np.unique(np.concatenate([np.geomspace(1e-6, 1e4, 20000), np.linspace(0.01, 2.0, 20000)]))


def test_drude_inertial_eps1_rule_equals_minus_pi_sigma_over_2():
    # Altarelli et al. 1972 conductor rule, value computed from the closed form: Drude wp = 1,
    # gamma = 0.05 gives -31.415927 = -pi (wp^2/gamma)/2.
    # Over [1e-6, 1e4] the closed-form integral is -(wp^2/gamma)(atan(X/g) - atan(x0/g)),
    # 5e-4 short of the full-axis value; the trapezoid (PL) error is ~1e-6.
    eps = 1.0 + drude(X, 1.0, 0.05)
    r = sum_rules(X, eps.real, eps.imag, dc_sigma_ev=20.0)
    window = -20.0 * (np.arctan(X[-1] / 0.05) - np.arctan(X[0] / 0.05))
    assert r.inertial_eps1_ev == pytest.approx(window, abs=1e-5)
    assert r.expected_inertial_eps1_ev == pytest.approx(-31.415927, abs=1e-6)
    assert r.inertial_eps1_ev == pytest.approx(-31.415927, abs=1e-3)
    # f-sum: int E eps2 dE -> (pi/2) wp^2, i.e. plasma energy 1 eV (Altarelli et al. 1972)
    assert r.plasma_energy_ev[-1] == pytest.approx(1.0, abs=1e-4)
    assert r.caution == ""


def test_inertial_n_rule_vanishes_for_lorentz_and_drude():
    # Altarelli et al. 1972: int (n - 1) dE = 0 for insulators and conductors. Missing
    # parts: Lorentz (n - 1 ~ 0.41 below 1e-6, ~ -1/(2E^2) above 1e4) < 1e-6; Drude
    # (n ~ sqrt(sigma/(2E)) below x0) ~ sqrt(2 sigma x0) = 6e-3.
    eps = 1.0 + lorentz(X, 1.0, 1.0, 0.1)
    r = sum_rules(X, eps.real, eps.imag)
    assert r.inertial_n_ev == pytest.approx(0.0, abs=1e-4)
    assert r.inertial_eps1_ev == pytest.approx(0.0, abs=1e-3)
    assert r.expected_inertial_eps1_ev == 0.0
    eps = 1.0 + drude(X, 1.0, 0.05)
    r = sum_rules(X, eps.real, eps.imag, dc_sigma_ev=20.0)
    assert r.inertial_n_ev == pytest.approx(0.0, abs=1e-2)


def test_n_eff_gold_plasma_energy_one_electron_per_atom():
    # N_eff definition (Smith 1985, constant from CODATA values, docs/references.md
    # [SumRuleFormulas]): hbar wp = 9.03 eV <-> n = 5.914e22 cm^-3 (7.2525e20 wp^2), so a
    # Drude metal with that wp and that density has N_eff -> 1 when the window holds all of it
    eps = 1.0 + drude(X, 9.03, 0.05)
    ne = n_eff(X, eps.imag, 5.914e22)
    assert ne[-1] == pytest.approx(1.0, abs=2e-3)
    assert NEFF_CM3_EV2 * np.pi / 2 == pytest.approx(7.2525e20, rel=1e-4)


def test_fsum_cumulative_exact_for_piecewise_linear():
    # closed form: int_1^3 E (E - 1) dE = [E^3/3 - E^2/2]_1^3 = 14/3 for eps2 = E - 1 on [1, 3]
    x = np.array([1.0, 2.0, 3.0])
    assert fsum_cumulative(x, x - 1.0)[-1] == pytest.approx(14.0 / 3.0, abs=1e-12)


def test_caution_when_window_too_narrow():
    # common practice, no source: a window holding only the peak of a Lorentz line cannot
    # close any sum rule, and the result must say so
    x = np.linspace(0.8, 1.2, 400)
    eps = 1.0 + lorentz(x, 1.0, 1.0, 0.1)
    r = sum_rules(x, eps.real, eps.imag, density_cm3=1e22)
    assert "f-sum" in r.caution and "inertial" in r.caution
    assert r.n_eff is not None and r.window_ev == (0.8, 1.2)


def test_bad_density_raises():
    with pytest.raises(InputError, match="density"):
        n_eff([1.0, 2.0], [1.0, 1.0], -1.0)


def test_to_dict_is_the_summary_block():
    # the sum_rules block of summary.json (DESIGN.md contract) for the Drude case above:
    # scalars at the window's top, the running plasma energy on <= 25 energies, JSON-safe
    eps = 1.0 + drude(X, 1.0, 0.05)
    r = sum_rules(X, eps.real, eps.imag, dc_sigma_ev=20.0)
    d = r.to_dict()
    assert list(d) == [
        "window_ev",
        "fsum_ev2",
        "effective_plasma_energy_ev",
        "inertial_n_ev",
        "inertial_eps1_ev",
        "expected_inertial_eps1_ev",
        "caution",
        "running",
        "notes",
    ]
    assert d["window_ev"] == [X[0], X[-1]]
    # f-sum (pi/2) wp^2 and plasma energy 1 eV; conductor rule -pi (wp^2/gamma)/2 (computed
    # from the closed forms, Altarelli et al. 1972)
    assert d["fsum_ev2"] == pytest.approx(np.pi / 2, abs=2e-4)
    assert d["effective_plasma_energy_ev"] == pytest.approx(1.0, abs=1e-4)
    assert d["expected_inertial_eps1_ev"] == pytest.approx(-31.415927, abs=1e-6)
    assert d["inertial_eps1_ev"] == r.inertial_eps1_ev and d["caution"] == ""
    run = d["running"]
    # 25 evenly picked points of the ~40000 (fewer only for tables with < 25 points)
    assert len(run["energy_ev"]) == 25 == len(run["effective_plasma_energy_ev"])
    assert run["energy_ev"][0] == X[0] and run["energy_ev"][-1] == X[-1]
    assert run["effective_plasma_energy_ev"][-1] == d["effective_plasma_energy_ev"]
    assert d["notes"].startswith("integrals over the measured window only")
    json.dumps(d, allow_nan=False)
    assert dataclasses.replace(r, inertial_n_ev=float("nan")).to_dict()["inertial_n_ev"] is None
