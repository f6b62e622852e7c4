"""The MSKK view of the KK test (kkcheck.kk.mskk).

Method: Palmer, Williams & Budde, Appl. Opt. 37, 2660 (1998) (from memory); check case
docs/references.md [SubtractiveCheck] (computed). The view adds the basis fit's outside
absorption (Kuzmenko 2005), so on the check model it must beat the two-anchor MSKK that
ignores it; a planted eps1 fault must show where it was planted.
"""

from __future__ import annotations

import numpy as np

from kkcheck.kk.consistency import kk_test
from kkcheck.kk.mskk import choose_view_anchors, mskk_view
from kkcheck.kk.subtractive import subtractive_result
from kkcheck.spectrum import Spectrum


def _two_osc(w):
    return 1 + 2 / (1 - w**2 - 0.1j * w) + 48 / (16 - w**2 - 0.5j * w)


def _spectrum(e, eps):
    m = e.size
    return Spectrum(
        energy_ev=e,
        eps=eps,
        sigma_eps1=np.full(m, 2e-3),
        sigma_eps2=np.full(m, 2e-3),
        source=np.zeros(m, int),
        row=np.zeros(m, int),
        flags=np.zeros(m, int),
        source_names=("synthetic",),
        source_quantity=("eps",),
    )


def _noisy(e, seed=7):
    rng = np.random.default_rng(seed)
    return _two_osc(e) + 2e-3 * (rng.standard_normal(e.size) + 1j * rng.standard_normal(e.size))


def test_check_case_mskk_beats_plain_kk():
    # [SubtractiveCheck]: anchors 1.2 and 2.0; MSKK error < 0.13 where plain KK error > 2.9
    e = np.linspace(0.6, 2.5, 400)
    anchors = np.array([1.2, 2.0])
    r = subtractive_result(
        e, _two_osc(e).imag, anchors, _two_osc(anchors).real, at_ev=[0.9, 1.5, 1.8, 2.2]
    )
    true = _two_osc(np.array([0.9, 1.5, 1.8, 2.2])).real
    assert np.all(np.abs(r.plain_eps1_minus_inf + 1 - true) > 2.9)
    assert np.all(np.abs(r.eps1 - true) < 0.13)


def test_view_models_the_outside_absorption():
    # the view on noisy check-model data: consistent, and closer to the true eps1 than the
    # two-anchor MSKK of the check case (which has no outside absorption) at the same points
    e = np.linspace(0.6, 2.5, 400)
    sp = _spectrum(e, _noisy(e))
    kk = kk_test(sp)
    v = mskk_view(sp, kk, anchors_ev=[1.0, 1.6, 2.2])
    assert v.holdout_ev == 1.6 or abs(v.holdout_ev - 1.6) < 0.01
    w = np.array([0.9, 1.5, 1.8, 2.2])
    idx = [int(np.argmin(np.abs(v.energy_ev - x))) for x in w]
    err_view = np.abs(v.eps1_mskk[idx] - _two_osc(v.energy_ev[idx]).real)
    assert np.all(err_view < 0.034)  # below the [SubtractiveCheck] MSKK errors (0.034-0.121)
    assert not v.regions_ev and v.rms_z < 2.0
    assert abs(v.holdout_z) < 4.0
    assert "agree" in v.statement


def test_view_finds_a_planted_eps1_fault():
    # eps1 raised by a Gaussian bump (0.1 peak, ~50 sigma) at 1.8 eV with no eps2 partner
    e = np.linspace(0.6, 2.5, 400)
    eps = _noisy(e) + 0.1 * np.exp(-0.5 * ((e - 1.8) / 0.05) ** 2)
    sp = _spectrum(e, eps)
    v = mskk_view(sp, kk_test(sp))
    assert v.regions_ev, v.statement
    assert any(a <= 1.8 <= b for a, b in v.regions_ev)
    d = v.to_dict()
    assert set(d) >= {"anchors_ev", "held_out", "rms_z", "regions_ev", "statement"}


def test_anchor_rule_spreads_in_w2_and_skips_edges():
    # rule of choose_view_anchors (project practice, no source)
    e = np.linspace(1.0, 3.0, 201)
    s = np.full(e.size, 0.01)
    usable = np.ones(e.size, bool)
    idx = choose_view_anchors(e, s, usable, 3)
    w2 = e[idx] ** 2
    lo, hi = 1.0 + 0.1 * 8.0, 9.0 - 0.1 * 8.0
    assert idx.size == 3 and np.all((w2 >= lo) & (w2 <= hi))
    assert np.all(np.diff(w2) > 1.5)
