"""Report figures: files written, sizes, what each figure shows, no global matplotlib state.

Data are closed-form (kkcheck.materials.lorentz, the damped harmonic oscillator), so every
feature a figure must show sits at a known place.
"""

from __future__ import annotations

import struct
import subprocess
import sys

import matplotlib
import matplotlib.image as mimage
import numpy as np
import pytest

from kkcheck.materials import lorentz
from kkcheck.report import figures as F
from kkcheck.report.figures.axes import ev_nm, uses_log

# Expected PNG width: 7.0 in at FIGURE_DPI (common practice for a one-column figure, no source).
WIDTH_PX = round(7.0 * F.FIGURE_DPI)


def _png_size(path) -> tuple[int, int]:
    data = path.read_bytes()
    # PNG signature and IHDR layout: ISO/IEC 15948 (PNG spec), section 11.2.2
    assert data[:8] == b"\x89PNG\r\n\x1a\n"
    assert data[12:16] == b"IHDR"
    return struct.unpack(">II", data[16:24])


def _check_pair(png, height_in: float):
    pdf = png.with_suffix(".pdf")
    assert png.suffix == ".png" and png.is_file() and pdf.is_file()
    assert png.stat().st_size > 10_000  # a drawn figure, not an empty canvas
    # PDF files start with "%PDF-" (ISO 32000-1, section 7.5.2) and end with "%%EOF"
    pdf_bytes = pdf.read_bytes()
    assert pdf_bytes[:5] == b"%PDF-" and b"%%EOF" in pdf_bytes[-64:]
    assert _png_size(png) == (WIDTH_PX, round(height_in * F.FIGURE_DPI))


def _red_fraction(png, rgb, tol=0.06) -> float:
    """Fraction of pixels within ``tol`` of colour ``rgb`` (0..1 floats)."""
    img = mimage.imread(png)[..., :3]
    return float(np.mean(np.all(np.abs(img - np.asarray(rgb)) < tol, axis=-1)))


def _eps(e):
    return 2.0 + lorentz(e, 3.0, 4.2, 0.6)


def test_plot_sources_writes_png_and_pdf(tmp_path):
    rng = np.random.default_rng(20260101)
    e1 = np.linspace(0.6, 3.0, 150)
    e2 = np.linspace(2.8, 6.5, 120)
    z1 = _eps(e1) + 0.01 * rng.standard_normal(e1.size)
    z2 = _eps(e2)
    z1[40] += 0.4
    sources = [
        {"name": "vis", "energy_ev": e1, "eps1": z1.real, "eps2": z1.imag},
        {"name": "uv", "energy_ev": e2, "eps1": z2.real, "eps2": z2.imag},
    ]
    outliers = [
        {"energy_ev": e1[40], "source": "vis", "component": "eps1", "kind": "spike"},
        {"energy_ev": 4.0, "source": "uv", "component": "eps2", "kind": "step"},
        {"energy_ev": 5.0, "source": "unknown", "component": "both", "kind": "noise"},
    ]
    png = F.plot_sources(tmp_path / "sources", sources, outliers, [(3.0, 3.05)])
    assert png == tmp_path / "sources.png"
    _check_pair(png, 5.6)
    # flags are drawn in the flag colour #C00000 (markers and the step line)
    assert _red_fraction(png, (0xC0 / 255, 0, 0), tol=0.08) > 2e-5


@pytest.mark.parametrize("verdict", ["consistent", "inconsistent"])
def test_plot_kk_regions_and_verdict_colour(tmp_path, verdict):
    e = np.geomspace(0.2, 8.0, 300)
    z = _eps(e)
    regions = [{"from_ev": 0.8, "to_ev": 1.2, "component": "eps1", "severity": 8.0}]
    # a stem given with its .png suffix is not doubled into kk.png.png
    png = F.plot_kk(
        tmp_path / "sub" / "kk.png", e, z.real, z.imag, z.real, z.imag, regions, verdict
    )
    assert png == tmp_path / "sub" / "kk.png"
    _check_pair(png, 7.6)  # with a region: two panels and the zoom on the worst region
    # title colour: green #007A4D for consistent, red #C00000 for inconsistent
    green = _red_fraction(png, (0x00 / 255, 0x7A / 255, 0x4D / 255), tol=0.05)
    red = _red_fraction(png, (0xC0 / 255, 0, 0), tol=0.05)
    if verdict == "consistent":
        assert green > red
    else:
        assert red > green


def test_plot_residuals_linear_for_large_faults(tmp_path):
    rng = np.random.default_rng(7)
    e = np.linspace(0.5, 6.0, 400)
    r1 = rng.standard_normal(e.size)
    r2 = rng.standard_normal(e.size)
    r1[100:110] += 80.0
    png = F.plot_residuals(tmp_path / "res", e, r1, r2, threshold=3.0)
    _check_pair(png, 5.0)
    png2 = F.plot_residuals(tmp_path / "res2", e, None, r2, threshold=2.5)
    _check_pair(png2, 5.0)
    with pytest.raises(ValueError, match="threshold"):
        F.plot_residuals(tmp_path / "bad", e, r1, r2, threshold=0.0)


def test_plot_repaired_band_and_changed_points(tmp_path):
    e = np.geomspace(0.3, 8.0, 250)
    z = _eps(e)
    mask = np.zeros(e.size, bool)
    mask[100:110] = True
    raw_e = np.linspace(0.6, 3.0, 80)
    png = F.plot_repaired(
        tmp_path / "rep", e, z, 0.05 + 0 * e, 0.05 + 0 * e, mask, raw_e, _eps(raw_e)
    )
    _check_pair(png, 7.0)  # with a sigma: the band half-width panel below
    with pytest.raises(ValueError, match="together"):
        F.plot_repaired(tmp_path / "bad", e, z, raw_energy_ev=raw_e)


def test_plot_fit_and_slab(tmp_path):
    e = np.geomspace(0.2, 8.0, 300)
    z = _eps(e)
    png = F.plot_fit(tmp_path / "fit", e, z, z * (1 + 1e-3 * np.sin(e)), (0.5, 6.0))
    _check_pair(png, 10.0)  # five panels: eps1, eps2, n, k (log), relative error
    R = 0.3 + 0.1 * np.sin(e)
    T = 0.5 - 0.1 * np.cos(e)
    png = F.plot_slab(tmp_path / "slab", e, R, T, R + 1e-3, T - 1e-3, 100.0)
    _check_pair(png, 5.4)


def test_plot_passivity_shows_gain_in_red(tmp_path):
    e = np.geomspace(1e-3, 1e3, 2000)
    passive = _eps(e).imag  # a Lorentz oscillator: eps2 > 0 at every w > 0 (closed form)
    gain = passive - 1e-3 * np.exp(-(np.log(e / 30.0) ** 2))
    ok = F.plot_passivity(tmp_path / "ok", e, passive, (0.5, 6.0))
    bad = F.plot_passivity(tmp_path / "bad", e, gain, (0.5, 6.0))
    _check_pair(ok, 3.8)
    _check_pair(bad, 3.8)
    # the negative lobe is filled with #C00000 at alpha 0.5 over white -> (0.876, 0.5, 0.5)
    fill = (1 - 0.5 * (1 - 0xC0 / 255), 0.5, 0.5)
    assert _red_fraction(bad, fill) > 5e-3
    assert _red_fraction(ok, fill) < 1e-4


def test_mismatched_lengths_are_programming_errors(tmp_path):
    e = np.linspace(1, 2, 10)
    with pytest.raises(ValueError, match="points"):
        F.plot_kk(tmp_path / "x", e, e[:-1], e, None, None)
    with pytest.raises(ValueError, match="at least one source"):
        F.plot_sources(tmp_path / "x", [], [], [])


def test_log_axis_rule():
    # DESIGN choice: logarithmic energy axis when the range spans more than one decade
    assert uses_log(0.2, 8.0)
    assert not uses_log(1.0, 6.0)
    # the top axis maps E [eV] -> wavelength [nm] = hc / E, hc = 1239.841984 eV nm (CODATA 2018)
    np.testing.assert_allclose(ev_nm(np.array([1.0, 2.0])), [1239.841984, 619.920992])


def test_rc_params_restored_and_no_pyplot(tmp_path):
    before = dict(matplotlib.rcParams)
    e = np.linspace(1.0, 5.0, 30)
    F.plot_slab(tmp_path / "s", e, 0 * e + 0.3, 0 * e + 0.5, 0 * e + 0.3, 0 * e + 0.5, 50)
    after = dict(matplotlib.rcParams)
    assert {k: v for k, v in after.items() if before.get(k) != v} == {}
    # drawing must not pull in pyplot (its global figure manager); checked in a fresh process
    code = (
        "import sys, numpy as np\n"
        "from kkcheck.report.figures import plot_slab\n"
        f"plot_slab(r'{tmp_path / 'p'}', np.linspace(1, 2, 5), *[np.ones(5) * 0.4] * 4, 10)\n"
        "print('matplotlib.pyplot' in sys.modules)\n"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.strip() == "False"
