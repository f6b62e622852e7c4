"""Reflectance -> n,k by the KK phase (kkcheck.reflectance) and the R reader.

Check values: docs/references.md [ReflectancePhase] (computed from the closed forms there;
Roessler 1965 for the extrapolations, Palmer et al. 1998 for the subtractive form).
"""

from __future__ import annotations

import numpy as np
import pytest

from kkcheck.errors import InputError
from kkcheck.io.reflectance import read_reflectance
from kkcheck.kk.transform import eps1_to_eps2
from kkcheck.reflectance import (
    Extrapolation,
    anchor_phase,
    nk_from_reflectance,
    phase_of_n,
    reflectance_phase,
    retrieve_nk,
    tail_phase,
)


def _two_osc(w):
    # the [SubtractiveCheck] model of docs/references.md
    return 1 + 2 / (1 - w**2 - 0.1j * w) + 48 / (16 - w**2 - 0.5j * w)


def _refl(big_n):
    return np.abs((big_n - 1) / (big_n + 1)) ** 2


def test_tail_closed_form_check_value():
    # [ReflectancePhase]: w_H = 10, R_H = 0.05, s = 4, w = 2 -> 0.44911624 (computed)
    assert tail_phase(2.0, 10.0, 0.05, 4.0) == pytest.approx(0.44911624, abs=5e-9)


def test_tail_closed_form_against_quadrature():
    # closed form vs scipy.integrate.quad of -(w/pi) int ln R/(w'^2 - w^2) (reference library)
    from scipy import integrate

    w, wh, rh, s = 3.0, 7.0, 0.2, 2.5

    def f(t):
        return np.log(rh * (wh / t) ** s) / (t * t - w * w)

    ref = -w / np.pi * integrate.quad(f, wh, np.inf, epsabs=1e-13, limit=200)[0]
    assert tail_phase(w, wh, rh, s) == pytest.approx(ref, abs=1e-9)


def test_phase_sign_and_sskk_table():
    # [ReflectancePhase] table: R on [0.05, 6], anchor 1.5; theta = arg[(N-1)/(N+1)]
    x = np.linspace(0.05, 6.0, 20001)
    r = _refl(np.sqrt(_two_osc(x)))
    w = np.array([0.8, 2.0, 3.0])
    true = phase_of_n(np.sqrt(_two_osc(w)))
    np.testing.assert_allclose(true, [0.04807, 0.05427, 0.08067], atol=1e-5)
    plain = eps1_to_eps2(x, 0.5 * np.log(r), w)  # truncated: ln R = 0 outside the window
    np.testing.assert_allclose(plain, [-0.13318, -0.47697, -0.74115], atol=2e-5)
    a = np.array([1.5])
    sskk = anchor_phase(
        w, plain, a, phase_of_n(np.sqrt(_two_osc(a))), eps1_to_eps2(x, 0.5 * np.log(r), a)
    )
    np.testing.assert_allclose(sskk, [0.07385, 0.04059, 0.03519], atol=2e-5)


def test_anchored_retrieval_recovers_nk():
    # same model: anchored at 1.5 eV, extrapolation fitted to the anchor. Tolerances are
    # project practice, no source: measured 2e-4 at 0.8/2/3 eV, 0.021 at worst in 0.3-5 eV
    # (near the strong oscillator at 4 eV)
    x = np.linspace(0.05, 6.0, 4001)
    big_n = np.sqrt(_two_osc(x))
    res = retrieve_nk(
        x, _refl(big_n), 1e-4, anchors_ev=[1.5], anchors_index=np.sqrt(_two_osc(np.array([1.5])))
    )
    inner = (x > 0.3) & (x < 5.0)
    assert np.max(np.abs(res.n + 1j * res.k - big_n)[inner]) < 0.03
    for w in (0.8, 2.0, 3.0):
        i = int(np.argmin(np.abs(x - w)))
        assert abs(res.n[i] + 1j * res.k[i] - big_n[i]) < 1e-3
    assert res.anchors_ev == (1.5,)
    assert np.all(res.sigma_n > 0)


def test_drude_metal_with_hagen_rubens():
    # Drude eps = 1 - wp^2/(w^2 + i g w), wp = 3 eV, g = 0.2 eV (closed form); R on
    # [0.02, 15] eV. Hagen-Rubens below the window brings n,k within 1 % of |N|, a constant
    # R does measurably worse (Roessler 1965, from memory, for the rule).
    x = np.geomspace(0.02, 15.0, 3000)
    big_n = np.sqrt(1 - 9.0 / (x**2 + 0.2j * x))
    r = _refl(big_n)
    m = (x > 0.05) & (x < 10)

    def err(low):
        n, k = nk_from_reflectance(r, reflectance_phase(x, r, None, Extrapolation(low, 4.0)))
        return np.max(np.abs(n + 1j * k - big_n)[m] / np.abs(big_n[m]))

    assert err("hagen-rubens") < 0.01
    assert err("constant") > 3 * err("hagen-rubens")
    res = retrieve_nk(x, r, 1e-4)
    assert res.extrapolation.low == "hagen-rubens"  # the stated metal rule picks it


def _write(path, header, rows):
    path.write_text(header + "\n" + "\n".join(rows) + "\n")


def test_percent_and_fraction_tables_agree(tmp_path):
    x = np.linspace(0.1, 1.0, 60)
    r = _refl(np.sqrt(_two_osc(x)))
    _write(tmp_path / "f.csv", "energy_ev,R", [f"{a:.6f},{b:.8f}" for a, b in zip(x, r)])
    _write(tmp_path / "p.csv", "energy_ev,R (%)", [f"{a:.6f},{100 * b:.6f}" for a, b in zip(x, r)])
    _write(tmp_path / "d.csv", "energy_ev,R", [f"{a:.6f},{100 * b:.6f}" for a, b in zip(x, r)])
    f = read_reflectance(tmp_path / "f.csv")
    p = read_reflectance(tmp_path / "p.csv")
    d = read_reflectance(tmp_path / "d.csv")
    assert (f.scale, p.scale, d.scale) == ("fraction", "percent", "percent")
    np.testing.assert_allclose(p.reflectance, f.reflectance, rtol=1e-6)
    np.testing.assert_allclose(d.reflectance, f.reflectance, rtol=1e-6)
    a = retrieve_nk(f.energy_ev, f.reflectance, 1e-4)
    b = retrieve_nk(p.energy_ev, p.reflectance, 1e-4)
    np.testing.assert_allclose(a.n, b.n, rtol=1e-5)
    np.testing.assert_allclose(a.k, b.k, atol=1e-5)


def test_reader_refuses_r_outside_unit_interval(tmp_path):
    rows = [f"{0.1 + 0.01 * i:.3f},0.5" for i in range(10)] + ["0.300,1.2"]
    _write(tmp_path / "bad.csv", "energy_ev,R (fraction)", rows)
    with pytest.raises(InputError, match=r"outside \(0, 1\)") as exc:
        read_reflectance(tmp_path / "bad.csv")
    assert exc.value.line == 12


def test_reader_wavenumber_axis_sorted(tmp_path):
    nu = np.arange(4000.0, 399.0, -100.0)
    _write(tmp_path / "ftir.txt", "Wavenumber (cm-1); R (%)", [f"{a:.0f}; 40.0" for a in nu])
    t = read_reflectance(tmp_path / "ftir.txt")
    assert np.all(np.diff(t.energy_ev) > 0)
    assert t.energy_ev[-1] == pytest.approx(4000 * 1.239841984e-4)
    assert any("sorted" in n for n in t.provenance.notes)
