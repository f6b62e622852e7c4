"""Pole-pair model: exact conversions to/from Drude, Lorentz, Debye; model.json round trip."""

import json

import numpy as np
import pytest

from kkcheck import materials
from kkcheck.errors import InputError
from kkcheck.rational import (
    PolePairModel,
    debye_pairs,
    drude_pairs,
    lorentz_pairs,
    model_from_json,
    model_from_terms,
    model_to_dict,
    model_to_json,
    parameter_table,
    physical_terms,
)
from kkcheck.rational.fit import fit_pole_pairs
from kkcheck.rational.model import design_matrix, loss_matrix, parameter_vector

W = np.geomspace(0.05, 50, 400)


def test_lorentz_pole_matches_closed_form():
    # closed form: Lorentz d_eps=2, w0=1.5, gamma=0.3 has poles +-sqrt(w0^2 - gamma^2/4) -
    # i gamma/2 = +-1.49248116 - 0.15i in the physics w-plane, residues of magnitude
    # d_eps w0^2 / (2 sqrt(w0^2 - gamma^2/4)) = 1.50755672. Our s = -i w, so a w-plane pole
    # w_p corresponds to a = -i w_p: the pair is a = -0.15 +- 1.49248116 i (Re a < 0: stable).
    a, c = lorentz_pairs(2.0, 1.5, 0.3)
    w_poles = np.sort_complex(np.array([1j * a[0], 1j * np.conj(a[0])]))
    np.testing.assert_allclose(w_poles, [-1.49248116 - 0.15j, 1.49248116 - 0.15j], atol=1e-8)
    assert abs(c[0]) == pytest.approx(1.50755672, abs=1e-8)


@pytest.mark.parametrize(
    "terms, ref",
    [
        # closed forms in kkcheck.materials, exp(-i w t); pole-pair mappings of Han, Dutton &
        # Fan, IEEE Microw. Wireless Compon. Lett. 16(3), 119 (2006) (vol/pages from memory),
        # with j w -> s
        (dict(lorentz=[(2.0, 1.5, 0.3)]), lambda w: materials.lorentz(w, 2.0, 1.5, 0.3)),
        (dict(lorentz=[(1.3, 0.7, 3.0)]), lambda w: materials.lorentz(w, 1.3, 0.7, 3.0)),
        (dict(debye=[(4.0, 0.2)]), lambda w: materials.debye(w, 4.0, 0.2)),
        (dict(drude=[(9.0, 0.05)]), lambda w: materials.drude(w, 9.0, 0.05)),
    ],
)
def test_terms_equal_closed_forms(terms, ref):
    m = model_from_terms(1.7, **terms)
    # closed form from kkcheck.materials (algebra of the Han-Dutton-Fan 2006 mappings),
    # rounding-level agreement
    np.testing.assert_allclose(m.eps(W), 1.7 + ref(W), rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(m.eps2(W), (1.7 + ref(W)).imag, rtol=1e-10, atol=1e-12)


def test_drude_pairs_mapping_values():
    # Drude mapping (Han, Dutton & Fan 2006 form; algebra checked against the closed form):
    # sigma/eps0 = wp^2/gamma, real pole a = -gamma, c = -wp^2/(2 gamma)
    c0, a, c = drude_pairs(9.03, 0.053)
    assert 2 * c0 == pytest.approx(9.03**2 / 0.053, rel=1e-14)
    assert a[0] == -0.053
    assert c[0].real == pytest.approx(-(9.03**2) / (2 * 0.053), rel=1e-14)


def test_debye_pairs_mapping_values():
    # Debye mapping (Han, Dutton & Fan 2006 form; algebra checked against the closed form):
    # a = -1/tau, c = d_eps/(2 tau)
    a, c = debye_pairs(3.0, 0.25)
    assert a[0] == -0.25 and c[0] == pytest.approx(3.0 * 0.25 / 2)


def test_rakic_gold_exact_and_value_from_published_parameters():
    wp, f0, g0, osc = materials.RAKIC_AU
    m = model_from_terms(
        1.0,
        drude=[(np.sqrt(f0) * wp, g0)],
        lorentz=[(f * wp**2 / w0**2, w0, g) for f, g, w0 in osc],
    )
    e = m.eps(1239.84198 / 600.0)
    # Au at 600 nm from the parameters of Rakic et al., Appl. Opt. 37(22), 5271 (1998), as
    # evaluated independently with numpy: eps = -7.9881 + 2.0623i (a computed value, not one
    # printed in the paper)
    assert e.real == pytest.approx(-7.9881, abs=2e-4)
    assert e.imag == pytest.approx(2.0623, abs=2e-4)
    np.testing.assert_allclose(m.eps(W), materials.rakic_ld(W), rtol=1e-11)
    assert m.stable and m.n_pairs == 6


def test_physical_terms_inverse():
    m = model_from_terms(2.0, drude=[(7.0, 0.1)], lorentz=[(2.0, 1.5, 0.3)], debye=[(3.0, 0.2)])
    kinds = [t.kind for t in physical_terms(m)]
    assert kinds == ["drude", "lorentz", "debye"]
    d = physical_terms(m)
    # inverse of the exact mappings (Han, Dutton & Fan 2006 form) returns the input parameters
    assert d[0].as_dict() == pytest.approx({"wp_ev": 7.0, "gamma_ev": 0.1}, rel=1e-12)
    assert d[1].as_dict() == pytest.approx(
        {"strength": 2.0, "w0_ev": 1.5, "gamma_ev": 0.3}, rel=1e-12
    )
    assert d[2].as_dict() == pytest.approx({"strength": 3.0, "tau_inv_ev": 0.2}, rel=1e-12)
    # a pair with Re c != 0 is reported as a modified Lorentz term, which is exact by algebra
    mm = PolePairModel(1.0, [complex(-0.2, 2.0)], [complex(0.3, -1.0)])
    t = physical_terms(mm)[0].as_dict()
    w = np.linspace(0.1, 5, 50)
    alt = 1.0 + (t["b0_ev2"] - 1j * t["b1_ev"] * w) / (
        t["w0_ev"] ** 2 - w**2 - 1j * t["gamma_ev"] * w
    )
    np.testing.assert_allclose(mm.eps(w), alt, rtol=1e-12)


def test_linear_parameterisation_consistent():
    m = model_from_terms(1.5, drude=[(9, 0.05)], lorentz=[(2, 1.5, 0.3), (1, 0.5, 3)])
    th = parameter_vector(m)
    # eps evaluated as plain partial fractions (definition: DEVELOPERS.md, Conventions) vs the
    # design matrix
    s = -1j * W
    direct = 1.5 + 2 * m.conductor_residue / s
    for a, c in zip(m.poles, m.residues, strict=True):
        direct = direct + c / (s - a) + np.conj(c) / (s - np.conj(a))
    np.testing.assert_allclose(design_matrix(m.poles, True, W) @ th, direct, rtol=1e-11)
    np.testing.assert_allclose(loss_matrix(m.poles, True, W) @ th[1:], direct.imag, rtol=1e-9)


def test_stability_flags():
    assert not PolePairModel(1.0, [complex(0.1, 1.0)], [1j]).stable
    assert not PolePairModel(-0.5, [complex(-0.1, 1.0)], [1j]).stable
    # conjugate representative is normalised to Im a >= 0 without changing eps
    m1 = PolePairModel(1.0, [complex(-0.1, -1.0)], [complex(0.2, 0.5)])
    m2 = PolePairModel(1.0, [complex(-0.1, 1.0)], [complex(0.2, -0.5)])
    np.testing.assert_allclose(m1.eps(W), m2.eps(W), rtol=1e-14)
    assert m1.poles[0].imag > 0


def test_model_json_round_trip_ev_and_rad_s():
    w = np.linspace(0.5, 6, 300)
    r = fit_pole_pairs(w, materials.rakic_ld(w))
    doc = json.loads(model_to_json(r))
    # README.md "Outputs" (model.json row): required keys and values
    assert doc["schema"] == "kkcheck.model/1" and doc["frequency_unit"] == "eV"
    assert doc["form"].startswith("eps(w) = eps_inf + sum_p [c_p/(s - a_p)")
    for key in ("eps_inf", "pairs", "range_ev", "metrics", "passivity", "stable"):
        assert key in doc
    assert set(doc["passivity"]) >= {"certified", "min_eps2", "method"}
    assert set(doc["metrics"]) >= {"rms_rel", "max_rel"}
    for unit in ("eV", "rad/s"):
        rec = model_from_json(model_to_json(r, unit))
        np.testing.assert_allclose(rec.model.eps(w), r.model.eps(w), rtol=1e-12)
        assert rec.passivity["certified"] == r.passivity.certified
        assert rec.range_ev == pytest.approx(r.range_ev)
    # rad/s uses hbar = 6.582119569e-16 eV s (CODATA 2018)
    d = model_to_dict(r, "rad/s")
    assert d["pairs"][0]["pole"][0] == pytest.approx(
        r.model.poles[0].real / 6.582119569e-16, rel=1e-12
    )
    assert "drude" in parameter_table(r.model)


def test_model_json_errors():
    with pytest.raises(InputError, match="schema"):
        model_from_json('{"schema": "other"}')
    with pytest.raises(InputError, match="JSON"):
        model_from_json("{not json")
    w = np.linspace(0.5, 6, 50)
    with pytest.raises(InputError, match="frequency_unit"):
        model_to_dict(fit_pole_pairs(w, materials.rakic_ld(w), pairs=3), "Hz")
