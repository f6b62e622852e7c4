"""The KK verdict on real published tables (reference_data/published/, see its README).

Each table is read with kkcheck's reader and tested with :func:`kkcheck.kk.kk_test` on the
one-source spectrum (no cleaning: the detectors are tested elsewhere, and these checks are of
the verdict). Papers, as the file headers give them:

- au_rakic1998_ld: A. D. Rakić, A. B. Djurišić, J. M. Elazar, M. L. Majewski, Appl. Opt. 37,
  5271-5283 (1998), a Lorentz-Drude model evaluated (causal by construction);
- as2s3_synowicki2004: R. A. Synowicki, T. E. Tiwald, Thin Solid Films 455-456, 248-255 (2004),
  an oscillator model (causal by construction);
- sic_larruquert2011: J. I. Larruquert et al., J. Opt. Soc. Am. A 28, 2340-2345 (2011),
  self-consistent by a KK step;
- si_green2008: M. A. Green, Sol. Energ. Mat. Sol. Cells 92, 1305-1310 (2008), KK-constructed;
- al_cheng2016: F. Cheng et al., ACS Nano 10, 9852-9860 (2016), measured (planted faults);
- ti_johnson1974, cr_johnson1974: P. B. Johnson, R. W. Christy, Phys. Rev. B 9, 5056 (1974);
- au_johnson1972, ag_johnson1972: P. B. Johnson, R. W. Christy, Phys. Rev. B 6, 4370 (1972);
- si_aspnes1983: D. E. Aspnes, A. A. Studna, Phys. Rev. B 27, 985 (1983);
- au_ordal1987: M. A. Ordal et al., Appl. Opt. 26, 744 (1987).

Faults planted in a published table are sized in physical units above the 1 % tolerance of
the verdict (kkcheck.kk.verdict; the sizes are common practice, no source: a local k bump of
1.5 % of the k range, a 2 % step as at a detector change).
"""

from pathlib import Path

import numpy as np
import pytest

from kkcheck.io import read_table
from kkcheck.kk import kk_test
from kkcheck.merge import merge
from kkcheck.spectrum import Dataset, Spectrum
from kkcheck.units import HC_EV_NM, eps_to_nk, nk_to_eps

pytestmark = pytest.mark.slow

CORPUS = Path(__file__).resolve().parents[1] / "reference_data" / "published"


def spectrum_of(*names) -> Spectrum:
    datasets = [read_table(CORPUS / f"{n}.csv") for n in names]
    if len(datasets) == 1:
        return Spectrum.from_dataset(datasets[0])
    return merge(datasets).spectrum


def nk_table(name):
    """(energy [eV], n, k) of a one-source table as read."""
    sp = spectrum_of(name)
    n, k = eps_to_nk(sp.eps)
    return sp.energy_ev, n, k


def from_nk(e, n, k) -> Spectrum:
    return Spectrum.from_dataset(Dataset("planted", e, nk_to_eps(n, k), quantity="nk"))


def outliers(r) -> int:
    """Points inside counted regions (a 'few outliers' allowance)."""
    inside = np.zeros(r.energy_ev.size, bool)
    for g in r.regions:
        inside |= (r.energy_ev >= g.from_ev) & (r.energy_ev <= g.to_ev)
    return int(np.count_nonzero(inside))


# tables built with a causal model or a KK step (catalogue.csv built_causally = yes)
@pytest.mark.parametrize(
    "name", ["au_rakic1998_ld", "as2s3_synowicki2004", "sic_larruquert2011", "si_green2008"]
)
def test_tables_built_causally_are_consistent(name):
    r = kk_test(spectrum_of(name))
    assert r.verdict == "consistent" or outliers(r) <= 3, (r.verdict_text, r.regions)
    assert r.verdict_text.startswith("consistent within 1 %") or outliers(r) <= 3


# tables the test calls inconsistent: each verdict names at least one region, and none of the
# regions spans the window (issue 10 item 4)
@pytest.mark.parametrize(
    "names",
    [
        ("ti_johnson1974",),
        ("cr_johnson1974",),
        ("au_johnson1972",),
        ("ag_johnson1972",),
        ("si_aspnes1983",),
        ("au_johnson1972", "au_ordal1987"),
    ],
)
def test_every_inconsistent_verdict_has_a_located_region(names):
    if len(names) > 1:  # the gold stitch: the merge warns that it left the scale unapplied
        with pytest.warns(RuntimeWarning, match="differ in shape"):
            sp = spectrum_of(*names)
    else:
        sp = spectrum_of(*names)
    r = kk_test(sp)
    lo, hi = r.energy_ev[0], r.energy_ev[-1]
    if r.verdict == "inconsistent":
        assert r.regions
        assert all(g.exceeds_tolerance and g.deviation_rel > r.tolerance for g in r.regions)
    for g in (*r.regions, *r.regions_within_tolerance):
        assert not (g.from_ev <= lo and g.to_ev >= hi), g
        # the size that decides is the smaller one against the two fits
        if np.isfinite(g.deviation_refit_rel):
            assert g.deviation_rel == min(g.deviation_all_rel, g.deviation_refit_rel)


def test_edge_region_is_not_sized_by_an_extrapolation():
    # Ti (Johnson and Christy 1974) at its infrared edge: the refit without the edge points
    # extrapolates there (several 100 % of |eps|); the reported size is bounded by the fit to
    # all points and a refit size is never what alone makes the verdict
    r = kk_test(spectrum_of("ti_johnson1974"))
    for g in r.regions:
        assert g.deviation_rel <= g.deviation_all_rel
        assert g.deviation_rel < 1.0  # below 100 % of |eps|


def test_planted_k_bump_is_found_where_planted():
    # al_cheng2016: k raised by 1.5 % of its range over 600-800 nm with no n partner
    e, n, k = nk_table("al_cheng2016")
    lam = HC_EV_NM / e
    bump = (lam >= 600) & (lam <= 800)
    k2 = k + np.where(bump, 0.015 * np.ptp(k), 0.0)
    r = kk_test(from_nk(e, n, k2))
    lo, hi = HC_EV_NM / 800, HC_EV_NM / 600
    assert r.verdict == "inconsistent"
    near = [g for g in r.regions if g.from_ev <= hi + 0.05 and g.to_ev >= lo - 0.05]
    assert near, r.regions
    span = e[-1] - e[0]
    assert all(g.to_ev - g.from_ev < 0.5 * span for g in r.regions)


@pytest.mark.parametrize(("part", "name"), [("n", "si_green2008"), ("k", "au_rakic1998_ld")])
def test_planted_two_percent_step_is_found_at_the_step(part, name):
    # tables consistent by construction, n x 1.02 (silicon, n ~ 3.6: ~4 % of eps1) or k x 1.02
    # (gold, k >> n: ~4 % of |eps|) above 1000 nm, as at a detector change; a region must hold
    # 1000 nm (1.24 eV) or lie beside it. (n x 1.02 in gold would move eps by ~0.1 %, within
    # the tolerance: 2 (n/k)^2 x 2 %)
    e, n, k = nk_table(name)
    above = HC_EV_NM / e > 1000
    n2 = np.where(above, 1.02 * n, n) if part == "n" else n
    k2 = np.where(above, 1.02 * k, k) if part == "k" else k
    r = kk_test(from_nk(e, n2, k2))
    step_ev = HC_EV_NM / 1000
    assert r.verdict == "inconsistent", r.verdict_text
    at_step = [g for g in r.regions if g.from_ev - 0.1 <= step_ev <= g.to_ev + 0.1]
    assert at_step, r.regions
    # the region at the step is local (well under half the window) and none spans the window
    # (a secondary region far from the step remains on silicon: see the issue note)
    assert all(g.to_ev - g.from_ev < 0.5 * (e[-1] - e[0]) for g in at_step)
    assert not any(g.from_ev <= e[0] and g.to_ev >= e[-1] for g in r.regions)


def test_planted_gap_is_named_where_rows_were_removed():
    # as2s3_synowicki2004 with its rows between 1 and 2 um removed: the result names a gap
    # inside that range and the table stays consistent (nothing was changed, only left out)
    e, n, k = nk_table("as2s3_synowicki2004")
    lam_um = HC_EV_NM / e / 1000
    keep = (lam_um < 1.0) | (lam_um > 2.0)
    r = kk_test(from_nk(e[keep], n[keep], k[keep]))
    gaps = [t for t, c in zip(r.notes, r.note_codes, strict=True) if c == "gap"]
    assert gaps, r.notes
    lo, hi = HC_EV_NM / 2000, HC_EV_NM / 1000
    g0, g1 = (float(x) for x in gaps[0].split("gap in the data ")[1].split(" eV")[0].split("-"))
    assert lo - 0.05 <= g0 < g1 <= hi + 0.05
    assert r.verdict == "consistent", r.verdict_text


def _write(path, e, n, k, digits):
    rows = "\n".join(
        f"{HC_EV_NM / x:.{digits}g},{a:.{digits}g},{b:.{digits}g}"
        for x, a, b in zip(e[::-1], n[::-1], k[::-1], strict=True)
    )
    path.write_text("wavelength_nm,n,k\n" + rows + "\n")
    return path


def test_rounding_to_three_four_and_six_digits_keeps_the_verdict(tmp_path):
    # au_rakic1998_ld re-printed with 3, 4 and 6 significant digits: the reader records the
    # digits, the noise model takes the rounding, and the verdict does not change
    e, n, k = nk_table("au_rakic1998_ld")
    verdicts = {}
    for d in (3, 4, 6):
        ds = read_table(_write(tmp_path / f"au_{d}.csv", e, n, k, d))
        r = kk_test(Spectrum.from_dataset(ds))
        verdicts[d] = r.verdict
        assert not r.regions, (d, r.verdict_text)
    assert set(verdicts.values()) == {"consistent"}, verdicts
