"""Coverage of the repair's uncertainty band on withheld data (issue 12 item 3).

A stretch of measured rows is removed, the spectrum is cleaned, KK-tested and repaired on a
grid that includes the removed energies, and the filled values are compared with the removed
ones: the fraction inside +-2 band is the coverage (95 % for a calibrated band). The band is
calibrated by withholding the measured points beside each run (kkcheck.repair, Notes; Stone
1974, docs/references.md [Stone1974], from memory).

Published tables (reference_data/published): F. Cheng et al., ACS Nano 10, 9852 (2016)
(al_cheng2016, the interband peak of aluminium at 700-900 nm and the ultraviolet 300-350 nm);
M. A. Green, Sol. Energy Mater. Sol. Cells 92, 1305 (2008) (si_green2008, 400-500 nm);
S. Sarkar et al., ACS Appl. Mater. Interfaces 11, 13752 (2019) (tio2_sarkar2019_film,
350-450 nm). Synthetic: a Tauc-Lorentz film (Jellison & Modine 1996 closed form) with white
noise.
"""

from __future__ import annotations

import warnings
from pathlib import Path

import numpy as np
import pytest

from kkcheck.clean import clean
from kkcheck.io import read_table
from kkcheck.kk.consistency import kk_test
from kkcheck.materials import tauc_lorentz
from kkcheck.merge import merge
from kkcheck.repair import repair
from kkcheck.spectrum import Dataset
from kkcheck.units import HC_EV_NM

PUBLISHED = Path(__file__).resolve().parent.parent / "reference_data" / "published"


def _withheld(e, eps, out):
    """(inside +-2 band per withheld value, |error| / band, repair notes) for rows ``out``."""
    d = Dataset("x", e[~out], eps[~out])
    sp = clean(merge([d]).spectrum, policy="keep").spectrum
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)  # outside-window notes, if any
        r = repair(sp, kk_test(sp), grid_ev=np.union1d(sp.energy_ev, e[out]))
    g = np.isin(r.energy_ev, e[out])
    z = np.concatenate(
        [
            np.abs(r.eps.real[g] - eps.real[out]) / r.sigma_eps1[g],
            np.abs(r.eps.imag[g] - eps.imag[out]) / r.sigma_eps2[g],
        ]
    )
    return z < 2, z, r.notes


@pytest.mark.parametrize(
    ("name", "lo_nm", "hi_nm"),
    [
        ("al_cheng2016", 700, 900),
        ("al_cheng2016", 300, 350),
        ("si_green2008", 400, 500),
        ("tio2_sarkar2019_film", 350, 450),
    ],
)
def test_band_covers_withheld_published_rows(name, lo_nm, hi_nm):
    ds = read_table(PUBLISHED / f"{name}.csv")
    e = ds.energy_ev
    out = (e >= HC_EV_NM / hi_nm) & (e <= HC_EV_NM / lo_nm)
    inside, z, notes = _withheld(e, ds.eps, out)
    assert any("band calibrated" in n for n in notes)
    # at least 85 % within +-2 band (the lower bound; before the calibration
    # al_cheng2016 700-900 nm had 8 %). On these printed, nearly noise-free tables the
    # calibrated band is conservative (coverage up to 100 %): not wider than needed by more
    # than ~20x, though (the median |error| / band is above 0.05)
    assert inside.mean() >= 0.85, (name, inside.mean())
    assert np.median(z) > 0.05, (name, np.median(z))


def test_band_coverage_on_synthetic_gaps_is_near_95_percent():
    # White noise 2e-3 on a Tauc-Lorentz film; three gaps of 0.3 eV, two noise draws: the
    # pooled coverage at +-2 band must be 85-99 % (95 % target).
    def f(e):
        return 1.9 + tauc_lorentz(e, 122.0, 3.45, 2.54, 1.20)

    e = np.linspace(1.0, 6.0, 400)
    pooled = []
    for seed in (0, 1):
        rng = np.random.default_rng(seed)
        eps = f(e) + 2e-3 * (rng.normal(size=e.size) + 1j * rng.normal(size=e.size))
        for a, b in ((2.0, 2.3), (3.3, 3.6), (4.5, 4.8)):
            inside, _, _ = _withheld(e, eps, (e >= a) & (e <= b))
            pooled.append(inside)
    cover = np.concatenate(pooled).mean()
    assert 0.85 <= cover <= 0.99, cover
