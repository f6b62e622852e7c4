"""The report's figures carry the evidence (issue 16, Report and figures), read from the
matplotlib artists: the zoom on the worst inconsistent region, one linear residual scale,
distinct markers for replaced and filled points, the band's half-width panel, eps2 on a log
axis where it spans decades, and one word for each concept.

Data are closed-form (kkcheck.materials.lorentz, the damped harmonic oscillator) with
features put at known places, so every check can fail.
"""

from __future__ import annotations

import numpy as np
import pytest

from kkcheck.materials import lorentz
from kkcheck.report import figures as F
from kkcheck.report.figures import data as data_mod
from kkcheck.report.figures import kk as kk_mod
from kkcheck.report.figures.axes import wants_log_values


@pytest.fixture
def drawn(monkeypatch):
    """The Figure objects the plot functions save (captured, then saved as usual)."""
    figs = []
    for mod in (kk_mod, data_mod):
        real = mod.save

        def capture(fig, stem, _real=real):
            figs.append(fig)
            return _real(fig, stem)

        monkeypatch.setattr(mod, "save", capture)
    return figs


def _eps(e):
    return 2.0 + lorentz(e, 3.0, 4.2, 0.6)


def _legend_texts(ax) -> list[str]:
    leg = ax.get_legend()
    return [t.get_text() for t in leg.get_texts()] if leg is not None else []


def test_kk_figure_zooms_on_the_worst_region(tmp_path, drawn):
    e = np.linspace(0.5, 6.0, 400)
    z = _eps(e)
    data = z.copy()
    bump = (e > 2.0) & (e < 2.3)
    data[bump] += 0.05  # a fault of 0.05 in eps1 at 2.0-2.3 eV: the worst region
    regions = [
        {
            "from_ev": 4.5,
            "to_ev": 4.6,
            "component": "eps2",
            "severity": 30.0,
            "deviation_percent": 0.4,
        },
        {
            "from_ev": 2.0,
            "to_ev": 2.3,
            "component": "eps1",
            "severity": 10.0,
            "deviation_percent": 1.9,
        },
    ]
    sig = np.full(e.size, 0.005)
    F.plot_kk(
        tmp_path / "kk",
        e,
        data.real,
        data.imag,
        z.real,
        z.imag,
        regions,
        "inconsistent",
        sigma1=sig,
        sigma2=sig,
        verdict_text="inconsistent: 1.9 % of |eps| in eps1 at 2-2.3 eV",
    )
    fig = drawn[-1]
    zoom = next(a for a in fig.axes if a.get_title().startswith("Zoom"))
    # the largest deviation (not the largest sigma) is zoomed on, in eps1, on a linear axis
    assert "ε1 at 2–2.3 eV" in zoom.get_title() and "1.9 %" in zoom.get_title()
    lo, hi = zoom.get_xlim()
    assert lo < 2.0 and hi > 2.3 and hi - lo < 1.0 and zoom.get_xscale() == "linear"
    # data and reconstruction are told apart: the zoom's y range is a small part of the full
    # panel's, so the fault (0.05) takes a readable share of it
    y0, y1 = zoom.get_ylim()
    f0, f1 = fig.axes[0].get_ylim()
    assert y1 - y0 < 0.3 * (f1 - f0) and y1 - y0 > 0.05
    assert set(_legend_texts(zoom)) == {r"data $\pm1\sigma$", "KK reconstruction"}
    # one word for the concept: "inconsistent region", never "flagged region"
    labels = _legend_texts(fig.axes[0])
    assert "inconsistent region" in labels and "flagged region" not in labels
    assert "1.9 % of |eps|" in fig.axes[0].get_title()


def test_kk_figure_without_regions_has_no_zoom(tmp_path, drawn):
    e = np.linspace(0.5, 6.0, 200)
    z = _eps(e)
    F.plot_kk(tmp_path / "kk", e, z.real, z.imag, z.real, z.imag, [], "consistent")
    fig = drawn[-1]
    assert not any(a.get_title().startswith("Zoom") for a in fig.axes)


def test_residual_axis_is_linear_and_labelled_with_off_scale_count(tmp_path, drawn):
    rng = np.random.default_rng(11)
    e = np.linspace(0.5, 6.0, 400)
    r1 = rng.standard_normal(e.size)
    r2 = rng.standard_normal(e.size)
    r1[100:105] += 500.0  # far beyond 20 x 3 sigma: drawn on the edge, counted
    F.plot_residuals(tmp_path / "res", e, r1, r2, threshold=3.0)
    fig = drawn[-1]
    top, bottom = fig.axes[0], fig.axes[1]
    for ax in (top, bottom):
        assert ax.get_yscale() == "linear" and "(linear)" in ax.get_ylabel()
    assert top.get_ylim()[1] == pytest.approx(kk_mod.RESIDUAL_AXIS_CAP * 3.0)
    # the +-3 sigma noise band stays readable: the axis is at most 20x the threshold
    assert any(t.startswith("off scale (5;") for t in _legend_texts(top))
    assert bottom.get_ylim()[1] < 10.0  # unit-normal noise: the lower panel keeps its scale


def test_repaired_figure_tells_replaced_from_filled(tmp_path, drawn):
    e = np.geomspace(0.3, 8.0, 250)
    z = _eps(e)
    replaced = np.zeros(e.size, bool)
    replaced[[20, 60]] = True
    filled = np.zeros(e.size, bool)
    filled[100:110] = True
    sig = np.where(filled, 0.05, 0.002)
    raw_e = np.delete(e, np.flatnonzero(filled))  # no measured point inside the gap
    F.plot_repaired(
        tmp_path / "rep", e, z, sig, sig, replaced, raw_e, _eps(raw_e), filled_mask=filled
    )
    fig = drawn[-1]
    labels = _legend_texts(fig.axes[0])
    assert "replaced by the KK prediction (2 points)" in labels
    assert "filled inside a gap (no data) (10 points)" in labels
    assert "data" not in labels  # the grey dots are the measured points, none in the gap
    markers = {ln.get_label(): ln.get_marker() for ln in fig.axes[0].get_lines()}
    assert (
        markers["replaced by the KK prediction (2 points)"]
        != markers["filled inside a gap (no data) (10 points)"]
    )
    # the band's half-width at full scale: a log panel where 0.05 and 0.002 both show
    band = fig.axes[2]
    assert band.get_yscale() == "log" and "sigma" in band.get_ylabel()
    lo, hi = band.get_ylim()
    assert lo < 0.002 and hi > 0.05


def test_eps2_log_axis_where_it_spans_decades(tmp_path, drawn):
    # Lorentz eps2 from 0.3 to 8 eV spans ~4 decades (closed form): log axis
    e = np.geomspace(0.3, 8.0, 300)
    z = lorentz(e, 3.0, 4.2, 0.6) + 2.0
    assert wants_log_values(z.imag)
    F.plot_kk(tmp_path / "kk", e, z.real, z.imag, z.real, z.imag, [], "consistent")
    assert drawn[-1].axes[1].get_yscale() == "log"
    assert "log scale" in drawn[-1].axes[1].get_ylabel()
    # a narrow window near the peak spans less than LOG_SPAN: linear
    e2 = np.linspace(3.8, 4.6, 100)
    z2 = lorentz(e2, 3.0, 4.2, 0.6)
    assert not wants_log_values(z2.imag)
    F.plot_kk(tmp_path / "kk2", e2, z2.real, z2.imag, z2.real, z2.imag, [], "consistent")
    assert drawn[-1].axes[1].get_yscale() == "linear"
