"""The MSKK figure (kkcheck.report.figures.mskk) drawn from a real MSKK view.

Data: the two-oscillator check case eps = 1 + 2/(1 - w^2 - 0.1iw) + 48/(16 - w^2 - 0.5iw)
(docs/references.md [SubtractiveCheck], computed) on [0.6, 2.5] eV with 2e-3 Gaussian noise
(fixed seed); method Palmer, Williams & Budde, Appl. Opt. 37, 2660 (1998) (from memory).
The figure is captured at save time, so the checks read what plot_mskk itself drew.
"""

from __future__ import annotations

import numpy as np
import pytest

from kkcheck.kk.consistency import kk_test
from kkcheck.kk.mskk import mskk_view
from kkcheck.report.figures import mskk as M
from kkcheck.report.figures import plot_mskk
from kkcheck.report.figures.axes import ev_nm
from kkcheck.spectrum import Spectrum


def _two_osc(w):
    return 1 + 2 / (1 - w**2 - 0.1j * w) + 48 / (16 - w**2 - 0.5j * w)


def _view(bump: float = 0.0):
    e = np.linspace(0.6, 2.5, 160)
    rng = np.random.default_rng(11)
    eps = _two_osc(e) + 2e-3 * (rng.standard_normal(e.size) + 1j * rng.standard_normal(e.size))
    eps = eps + bump * np.exp(-0.5 * ((e - 1.8) / 0.05) ** 2)  # eps1 fault, no eps2 partner
    m = e.size
    sp = Spectrum(
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
    return mskk_view(sp, kk_test(sp))


@pytest.fixture(scope="module")
def clean_view():
    return _view()


def _draw(view, stem, monkeypatch):
    """plot_mskk on the view's fields; returns (png path, the Figure it saved)."""
    seen = []
    real_save = M.save

    def keep(fig, path_stem):
        seen.append(fig)
        return real_save(fig, path_stem)

    monkeypatch.setattr(M, "save", keep)
    png = plot_mskk(
        stem,
        view.energy_ev,
        view.eps1_measured,
        view.sigma_eps1,
        view.eps1_mskk,
        view.sigma_mskk,
        view.anchors_ev,
        view.anchors_eps1,
        holdout_ev=view.holdout_ev,
        holdout_residual=view.holdout_residual,
        holdout_z=view.holdout_z,
        regions=view.regions_ev,
    )
    return png, seen[0]


def _line(ax, label):
    found = [ln for ln in ax.get_lines() if ln.get_label().startswith(label)]
    assert len(found) == 1, [ln.get_label() for ln in ax.get_lines()]
    return found[0]


def test_figure_marks_every_anchor_and_the_held_out_one(tmp_path, monkeypatch, clean_view):
    v = clean_view
    png, fig = _draw(v, tmp_path / "mskk", monkeypatch)
    # PNG signature: ISO/IEC 15948 section 5.2; PDF header: ISO 32000-1 section 7.5.2
    assert png.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert png.with_suffix(".pdf").read_bytes()[:5] == b"%PDF-"
    top, bottom = fig.axes[0], fig.axes[1]
    labels = [t.get_text() for t in top.get_legend().get_texts()]
    assert any(t.startswith("measured ε₁") for t in labels)
    assert any(t.startswith("MSKK ε₁") for t in labels)
    anchors = _line(top, M.ANCHOR_LABEL)
    assert len(anchors.get_xdata()) == len(v.anchors_ev) == 2  # rule: 3 chosen, 1 held out
    np.testing.assert_allclose(anchors.get_ydata(), v.anchors_eps1)
    held = _line(top, M.HOLDOUT_LABEL + " (measured")
    np.testing.assert_allclose(held.get_xdata(), [v.holdout_ev])
    assert held.get_xdata()[0] not in anchors.get_xdata()  # marked apart from the anchors
    assert f"{abs(v.holdout_z):.1f}σ" in held.get_label()
    # the prediction marker sits at measured - residual (the view's own numbers)
    pred = _line(top, "held-out anchor: value")
    np.testing.assert_allclose(pred.get_ydata(), held.get_ydata() - v.holdout_residual)
    # the two +-2 sigma bands: fill_between collections, one per curve
    assert len(top.collections) >= 2
    # residual panel: +-3 dashed lines (the view's |z| > 3 rule), all points inside on
    # clean data (the check model is KK consistent by construction)
    levels = sorted(ln.get_ydata()[0] for ln in bottom.get_lines() if ln.get_linestyle() == "--")
    assert levels == [-3.0, 3.0]
    inside = _line(bottom, r"$|z| \leq")
    assert len(inside.get_xdata()) == v.energy_ev.size
    # wavelength on top: vacuum wavelength [nm] = hc/E, hc = 1239.841984 eV nm (CODATA 2018)
    sec = [c for c in top.child_axes if c.get_xlabel().startswith("Wavelength")]
    assert len(sec) == 1
    assert ev_nm(np.array([2.0]))[0] == pytest.approx(619.920992)


def test_planted_fault_shows_in_residuals_and_shading(tmp_path, monkeypatch):
    # eps1 bump of 0.1 (~35 combined sigma) at 1.8 eV with no eps2 partner: the residual
    # panel must show points beyond +3 there and the view's runs must be shaded
    v = _view(bump=0.1)
    _, fig = _draw(v, tmp_path / "fault", monkeypatch)
    bottom = fig.axes[1]
    beyond = _line(bottom, r"$|z| >")
    x, y = np.asarray(beyond.get_xdata()), np.asarray(beyond.get_ydata())
    assert np.any((np.abs(x - 1.8) < 0.06) & (y > 3.0))
    spans = list(fig.axes[0].patches)  # axvspan patches: the shaded runs only
    labelled = [p for p in spans if str(p.get_label() or "").startswith("MSKK off")]
    assert len(v.regions_ev) >= 1 and len(spans) == len(v.regions_ev)
    assert len(labelled) == 1  # one legend entry for all runs
    assert any(a <= 1.8 <= b for a, b in v.regions_ev)


def test_mismatched_arrays_refused(tmp_path, clean_view):
    v = clean_view
    with pytest.raises(ValueError, match="eps1_mskk"):
        plot_mskk(
            tmp_path / "bad",
            v.energy_ev,
            v.eps1_measured,
            v.sigma_eps1,
            v.eps1_mskk[:-1],
            v.sigma_mskk,
            v.anchors_ev,
            v.anchors_eps1,
        )
