"""Tests of kkcheck.merge: scale/offset reconciliation, blending, gaps, which source is off.

Sources are built from closed-form dielectric functions (kkcheck.materials) with known
planted scale factors, noise and gaps; the checks compare with those planted values and
with closed forms (inverse-variance mean, linearity of the KK transform).
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from kkcheck.errors import InputError
from kkcheck.kk.kernels import pl_kk_matrix
from kkcheck.materials import lorentz, tauc_lorentz
from kkcheck.merge import (
    ReferenceTrial,
    estimate_scale_offset,
    find_gaps,
    merge,
    off_source,
    rank_references,
)
from kkcheck.spectrum import Dataset, Flag, Provenance
from kkcheck.units import (
    EV_PER_INV_CM,
    HC_EV_NM,
    detect_convention,
    eps_to_nk,
    nk_to_eps,
    to_energy_ev,
)


def truth(e):
    """Tauc–Lorentz film (Jellison & Modine 1996 closed form) plus eps_inf = 1.9."""
    return 1.9 + tauc_lorentz(e, 122.0, 3.45, 2.54, 1.20)


def _ds(name, e, scale=1.0, noise=2e-3, seed=0, offset=0.0, rows=True):
    rng = np.random.default_rng(seed)
    eps = (
        scale * truth(e) + offset + noise * (rng.normal(size=e.size) + 1j * rng.normal(size=e.size))
    )
    prov = Provenance(rows=np.arange(2, e.size + 2)) if rows else Provenance()
    return Dataset(name, e, eps, provenance=prov)


def test_scaled_second_source_found_within_002():
    a = _ds("uvvis", np.linspace(1.0, 3.2, 400), seed=1)
    b = _ds("nir", np.linspace(2.6, 5.5, 300), scale=1.05, seed=2)
    res = merge([a, b], reference="uvvis")
    rep = {s.name: s for s in res.sources}
    assert rep["uvvis"].reference and rep["uvvis"].scale == 1.0
    assert abs(rep["nir"].scale - 1.05) < 0.02  # planted 5 % scale
    assert abs(rep["nir"].eps1_offset) < 5 * rep["nir"].eps1_offset_sigma + 1e-3
    assert rep["nir"].applied and rep["nir"].n_overlap > 20
    assert rep["nir"].scale_sigma > 0
    # corrected merge follows the truth (closed form) to a few noise sigmas everywhere
    sp = res.spectrum
    np.testing.assert_allclose(sp.eps, truth(sp.energy_ev), atol=0.02)
    # the other way round: the reference is 1/1.05 of the other
    rev = {s.name: s for s in merge([a, b], reference="nir").sources}
    assert abs(rev["uvvis"].scale - 1 / 1.05) < 0.02


def test_offset_and_scale_fitted_jointly():
    # eps_b = 0.97 eps + 0.3 on eps1 only: the model of estimate_scale_offset exactly
    e = np.linspace(1.5, 5.0, 500)
    a = _ds("a", e, seed=3)
    rng = np.random.default_rng(4)
    eps_b = 0.97 * truth(e) + 0.3 + 2e-3 * (rng.normal(size=e.size) + 1j * rng.normal(size=e.size))
    f = estimate_scale_offset(Dataset("b", e, eps_b), a)
    assert f.scale == pytest.approx(0.97, abs=3e-3)
    assert f.eps1_offset == pytest.approx(0.3, abs=0.02)
    assert abs(f.scale - 0.97) < 5 * f.scale_sigma + 1e-4  # the error bar covers the truth


def test_estimates_reported_but_not_applied():
    a = _ds("a", np.linspace(1.0, 3.2, 300), seed=5)
    b = _ds("b", np.linspace(2.6, 5.5, 300), scale=1.05, seed=6)
    res = merge([a, b], reference="a", correct=False)
    rb = res.sources[1]
    assert abs(rb.scale - 1.05) < 0.02 and not rb.applied
    hi = res.spectrum.energy_ev > 3.3  # only b there: values as measured
    np.testing.assert_allclose(res.spectrum.eps[hi], b.eps[b.energy_ev > 3.3])


def test_chained_sources_propagate_along_overlaps():
    # A-B-C, A and C do not overlap; C is 3 % low relative to A (planted), B is true.
    a = _ds("A", np.linspace(1.0, 2.6, 300), seed=7)
    b = _ds("B", np.linspace(2.3, 4.2, 300), seed=8)
    c = _ds("C", np.linspace(3.9, 6.0, 300), scale=0.97, seed=9)
    res = merge([a, b, c], reference="A")
    rc = res.sources[2]
    assert rc.scale == pytest.approx(0.97, abs=0.01)
    assert rc.applied
    sp = res.spectrum
    np.testing.assert_allclose(sp.eps, truth(sp.energy_ev), atol=0.03)
    # default reference: A covers 67 % of the visible band 1.65-3.26 eV (log width), B 51 %
    # (the rule of kkcheck.merge.assembly._default_reference; common practice, no source)
    assert merge([a, b, c]).reference == "A"


def test_three_sources_in_different_units_and_conventions():
    rng = np.random.default_rng(10)
    # 1. n,k on a wavelength grid [nm] (UV-visible ellipsometer)
    lam = np.arange(250.0, 1000.0 + 1e-9, 2.0)
    e1 = to_energy_ev(lam, "wavelength_nm")
    o = np.argsort(e1)
    n, k = eps_to_nk(truth(e1[o]))
    s1 = Dataset(
        "uvvis",
        e1[o],
        nk_to_eps(n + rng.normal(0, 1e-3, n.size), k + rng.normal(0, 1e-3, n.size)),
        quantity="nk",
        axis="wavelength_nm",
    )
    # 2. eps on an energy grid [eV]
    e2 = np.linspace(0.6, 1.4, 200)
    s2 = Dataset("nir", e2, truth(e2) + rng.normal(0, 2e-3, e2.size), axis="energy_ev")
    # 3. wavenumber table [cm^-1] written with N = n - i k (exp(+iwt)); imaginary parts of
    #    the truth are 0 below the gap, so make it absorbing: a weak Lorentz band at 0.3 eV
    nu = np.arange(12000.0, 2000.0 - 1e-9, -20.0)
    e3 = np.sort(to_energy_ev(nu, "wavenumber_cm-1"))
    band = lorentz(e3, 0.05, 0.3, 0.05)
    written = np.conj(truth(e3) + band)  # as the file has it
    check = detect_convention(written.imag)
    assert check.detected == "exp(+iwt)"
    s3 = Dataset(
        "ir",
        e3,
        np.conj(written),
        axis="wavenumber_cm-1",
        convention="exp(+iwt)",
        converted=True,
    )
    res = merge([s1, s2, s3])
    sp = res.spectrum
    lo = 2000.0 * EV_PER_INV_CM
    assert sp.range_ev[0] == pytest.approx(lo, rel=1e-12)
    assert sp.range_ev[1] == pytest.approx(HC_EV_NM / 250.0, rel=1e-12)
    # no scale error was planted: all scales 1 within 1 %
    for s in res.sources:
        assert s.scale == pytest.approx(1.0, abs=0.01), s
    ref = truth(sp.energy_ev) + lorentz(sp.energy_ev, 0.05, 0.3, 0.05) * (sp.energy_ev < 1.5)
    # 5 sigma: n,k noise 1e-3 becomes 2|N| 1e-3 in eps (kkcheck.units.sigma_nk_to_eps)
    tol = 5 * (2 * np.abs(np.sqrt(ref)) * 1e-3 + 2e-3)
    assert np.all(np.abs(sp.eps.real - ref.real) < tol)
    assert np.all(np.abs(sp.eps.imag - ref.imag) < tol)
    assert np.all(sp.eps.imag > -0.01)  # passive everywhere after conversion
    assert any("converted" in s for s in res.notes)
    assert set(sp.source_names) == {"uvvis", "nir", "ir"}


def test_planted_gap_reported():
    a = _ds("a", np.linspace(1.0, 2.0, 200), seed=11)
    b = _ds("b", np.linspace(2.5, 4.0, 200), seed=12)
    with pytest.warns(RuntimeWarning, match="no chain of overlaps"):
        res = merge([a, b])
    assert res.gaps_ev == ((2.0, 2.5),)
    assert any("gap" in n for n in res.notes)
    # a hole inside one source (points 100..139 removed) is a gap too
    e = np.linspace(1.0, 3.0, 300)
    keep = np.r_[0:100, 140:300]
    gaps = find_gaps(e[keep])
    assert gaps == ((float(e[99]), float(e[140])),)
    # a change of density (dense then 5x sparser) is not a gap
    x = np.r_[np.linspace(1.0, 2.0, 101), np.linspace(2.05, 4.0, 40)]
    assert find_gaps(x) == ()


def test_blend_is_inverse_variance_mean_with_provenance():
    # Two sources on the same grid with given sigmas; closed form:
    # mean = (v1/s1^2 + v2/s2^2)/(1/s1^2 + 1/s2^2), sigma = (1/s1^2 + 1/s2^2)^-1/2.
    e = np.linspace(1.0, 2.0, 50)
    a = Dataset("a", e, np.full(50, 2.0 + 1.0j), np.full(50, 0.1), np.full(50, 0.2))
    b = Dataset(
        "b",
        e,
        np.full(50, 3.0 + 2.0j),
        np.full(50, 0.3),
        np.full(50, 0.2),
        provenance=Provenance(rows=np.arange(10, 60)),
    )
    res = merge([a, b], reference="a", correct=False)
    sp = res.spectrum
    w1 = np.array([1 / 0.1**2, 1 / 0.3**2])
    assert len(sp) == 50
    np.testing.assert_allclose(sp.eps.real, (2.0 * w1[0] + 3.0 * w1[1]) / w1.sum())
    np.testing.assert_allclose(sp.eps.imag, 1.5)
    np.testing.assert_allclose(sp.sigma_eps1, w1.sum() ** -0.5)
    np.testing.assert_allclose(sp.sigma_eps2, 0.2 / np.sqrt(2))
    assert np.all(sp.flags & Flag.BLENDED) and np.all(sp.flags & Flag.OVERLAP)
    assert np.all(sp.source == 0)  # "a" carries the larger weight
    # side by side: every point kept, labelled with its source and file row
    sbs = merge([a, b], reference="a", correct=False, overlap="side_by_side")
    s = sbs.spectrum
    assert len(s) == 100 and sorted(set(s.source)) == [0, 1]
    np.testing.assert_array_equal(s.row[s.source == 1], np.arange(10, 60))
    np.testing.assert_array_equal(s.eps[s.source == 1], b.eps)
    assert np.all(s.flags & Flag.OVERLAP) and not np.any(s.flags & Flag.BLENDED)


def _kk_relative_residual(sp):
    """Stand-in KK score: relative rms of eps1 - (c + K eps2), c fitted.

    K = pl_kk_matrix: the exact KK partner of the piecewise-linear eps2 (verified against
    scipy quad in kkcheck.kk.kernels); end points dropped (log singularity of the
    truncated window). Dividing by the spread of eps1 makes it invariant under
    eps -> s eps + o, as chi2/dof with a free eps_inf and sigmas scaled with the data is.
    """
    e = sp.energy_ev
    K = pl_kk_matrix(e, e[1:-1])
    r = sp.eps.real[1:-1] - K @ sp.eps.imag
    r = r - r.mean()
    return float(np.sqrt(np.mean(r**2)) / np.std(sp.eps.real))


def _lorentz_sources(scale_b):
    """A single Lorentz oscillator (closed-form KK pair) seen by three instruments.

    The window 0.05-60 eV holds nearly all of eps2, so the truncated KK transform plus a
    constant reproduces eps1 closely; source B carries a planted scale error.
    """
    rng = np.random.default_rng(13)

    def f(e):
        return 1.0 + lorentz(e, 4.0, 3.0, 0.5)

    def mk(name, lo, hi, n, s):
        e = np.geomspace(lo, hi, n)
        return Dataset(name, e, s * f(e) + 1e-4 * (rng.normal(size=n) + 1j * rng.normal(size=n)))

    return [
        mk("A", 0.05, 2.6, 500, 1.0),
        mk("B", 2.2, 5.0, 400, scale_b),
        mk("C", 4.4, 60.0, 500, 1.0),
    ]


def test_rank_references_names_the_scaled_source():
    trials = rank_references(_lorentz_sources(1.05), _kk_relative_residual)
    assert trials[0].hypothesis == "suspect" and trials[0].source == "B"
    assert trials[0].ratio == 1.0
    assert all(t.ratio > 5 for t in trials[1:])  # every other hypothesis far worse
    best_b = {s.name: s for s in trials[0].sources}["B"]
    assert best_b.applied and best_b.scale == pytest.approx(1.05, abs=0.01)
    assert off_source(trials) == "B"


def test_rank_references_reference_mode_ties_by_kk_linearity():
    # Closed-form property: KK is linear and eps_inf absorbs a constant, so merges that
    # differ by eps -> s eps + o score the same under a scale-invariant score. Trusting
    # A, B or C along a chain gives exactly such merges.
    trials = rank_references(_lorentz_sources(1.05), _kk_relative_residual, mode="reference")
    corrected = [t.score for t in trials if t.hypothesis == "reference"]
    assert len(corrected) == 3
    np.testing.assert_allclose(corrected, corrected[0], rtol=1e-8)
    base = [t for t in trials if t.hypothesis == "uncorrected"][0]
    assert base.score > 10 * corrected[0]
    assert off_source(trials) is None  # no suspect trials: cannot name a source


def test_transparent_overlap_gives_a_positive_scale_near_one():
    # Fused silica (Malitson 1965 Sellmeier, kkcheck.materials): in a 0.08 eV overlap eps1
    # changes by ~0.002, about the noise, so scale and offset are collinear. Both sources are
    # the same material: the scale must be 1 within the noise (closed form), never the
    # negative or near-zero scale plus a large offset the joint fit can wander to.
    from kkcheck.materials import sellmeier_silica

    for seed in range(8):
        rng = np.random.default_rng(seed)
        ds = []
        for name, e in (("a", np.linspace(0.55, 1.38, 150)), ("b", np.linspace(1.30, 3.5, 150))):
            noise = 2e-3 * rng.normal(size=e.size) + 2e-5j * rng.normal(size=e.size)
            ds.append(Dataset(name, e, sellmeier_silica(e) + noise))
        f = estimate_scale_offset(ds[1], ds[0])
        assert f.scale == pytest.approx(1.0, abs=0.01), (seed, f)
        assert f.eps1_offset == 0.0 and "scale fitted alone" in f.note
        rep = merge(ds, reference="a").sources[1]
        assert rep.scale == pytest.approx(1.0, abs=0.01)
        # a scale of 1 within its error corrects nothing: reported, not applied, and why
        assert not rep.applied
        assert any("standard errors from none" in r for r in rep.decision.reasons)


def test_undetermined_scale_is_reported_not_applied():
    # An overlap where eps is only noise around 0 (common practice, no source: such an
    # overlap carries no scale information); a scale near 0 would blow the source up 1/s-fold
    # and a negative one would flip eps2 to an active medium. Reported, not applied, warned.
    rng = np.random.default_rng(3)
    ea, eb = np.linspace(1.0, 2.0, 60), np.linspace(1.8, 3.0, 60)
    eps_a = 1e-3 * (rng.normal(size=60) + 1j * rng.normal(size=60))
    eps_b = 1e-3 * (rng.normal(size=60) + 1j * rng.normal(size=60))
    eps_b[eb > 2.0] += 2.0 + 0.5j
    a, b = Dataset("a", ea, eps_a), Dataset("b", eb, eps_b)
    with pytest.warns(RuntimeWarning, match="is not determined"):
        res = merge([a, b], reference="a")
    rep = res.sources[1]
    assert not rep.applied
    np.testing.assert_allclose(
        res.spectrum.eps[res.spectrum.energy_ev > 2.0], eps_b[eb > 2.0], rtol=1e-12
    )


def test_two_sources_cannot_be_told_apart():
    # With two sources the two corrected merges differ by a global scale: they tie.
    a = _ds("a", np.linspace(1.0, 3.2, 300), seed=14)
    b = _ds("b", np.linspace(2.6, 5.5, 300), scale=1.05, seed=15)
    trials = rank_references([a, b], _kk_relative_residual)
    sus = [t.score for t in trials if t.hypothesis == "suspect"]
    assert sus[0] == pytest.approx(sus[1], rel=1e-3)
    assert off_source(trials) is None


def test_bad_input_messages():
    a = _ds("a", np.linspace(1.0, 2.0, 50))
    b = _ds("b", np.linspace(3.0, 4.0, 50))
    with pytest.raises(InputError, match="overlap = .average. is not a choice"):
        merge([a, b], overlap="average")
    with pytest.raises(InputError, match="not one of the sources"):
        merge([a, b], reference="c")
    with pytest.raises(InputError, match="at least one dataset"):
        merge([])
    with pytest.raises(InputError, match="at least 4"):
        estimate_scale_offset(a, b)
    with pytest.warns(RuntimeWarning, match="no chain of overlaps"):
        res = merge([a, b], reference="a")
    assert np.isnan(res.sources[1].scale) and not res.sources[1].applied
    # duplicate names are made unique, and said so by the name itself
    assert merge([a, _ds("a", np.linspace(1.5, 2.5, 50))]).spectrum.source_names == ("a", "a#2")


def test_mode_and_overlap_are_checked_choices():
    a = _ds("a", np.linspace(1.0, 2.0, 50))
    with pytest.raises(InputError, match="mode = 'both' is not a choice"):
        rank_references([a], _kk_relative_residual, mode="both")
    with pytest.raises(InputError, match="overlap = 'mean' is not a choice"):
        rank_references([a], _kk_relative_residual, overlap="mean")


def test_to_dict_is_json_safe_and_carries_the_estimates():
    # Closed forms checked: the planted 5 % scale of "b" (Tauc-Lorentz truth), the planted
    # gap 2.0-2.5 eV before "c", which no chain of overlaps links (estimates unknown: null).
    a = _ds("a", np.linspace(1.0, 2.0, 200), seed=16)
    b = _ds("b", np.linspace(1.6, 2.0, 100), scale=1.05, seed=17)
    c = _ds("c", np.linspace(2.5, 4.0, 200), seed=18)
    with pytest.warns(RuntimeWarning, match="no chain of overlaps"):
        res = merge([a, b, c], reference="a")
    d = res.to_dict("blend")
    json.dumps(d, allow_nan=False)  # NaN would raise: JSON has no NaN
    assert list(d) == ["reference", "sources", "gaps_ev", "overlap", "notes"]
    assert d["reference"] == "a" and d["overlap"] == "blend" and d["notes"] == list(res.notes)
    assert d["gaps_ev"] == [[2.0, 2.5]]
    sa, sb, sc = d["sources"]
    assert sa["reference"] and sa["scale"] == 1.0 and sa["range_ev"] == [1.0, 2.0]
    assert sb["scale"] == pytest.approx(1.05, abs=0.02) and sb["applied"]
    assert sb["overlap_points"] == res.sources[1].n_overlap > 20
    assert sc["scale"] is None and sc["eps1_offset_sigma"] is None and not sc["applied"]
    assert set(sa) == {
        "name",
        "range_ev",
        "eps1_offset",
        "eps1_offset_sigma",
        "scale",
        "scale_sigma",
        "reference",
        "overlap_points",
        "applied",
        "decision",
    }
    assert sa["decision"] is None and sb["decision"]["applied"] and not sb["decision"]["reasons"]
    # with a ranking: its items and the suspect; a NaN score is written as null
    trials = (
        ReferenceTrial("suspect", "b", 2.0, 1.0, res.sources),
        ReferenceTrial("uncorrected", "", float("nan"), float("nan"), res.sources),
    )
    d = res.to_dict("blend", trials)
    json.dumps(d, allow_nan=False)
    assert d["reference_ranking"] == [
        {"hypothesis": "suspect", "source": "b", "score": 2.0, "ratio": 1.0},
        {"hypothesis": "uncorrected", "source": "", "score": None, "ratio": None},
    ]
    assert "suspect_source" in d and d["suspect_source"] is None  # one suspect: cannot tell


def test_to_dict_is_the_merge_block_of_the_summary():
    # The summary.json "merge" block of a whole job (kkcheck.report.summary.build_summary) is what
    # MergeResult.to_dict writes, ranking included.
    from kkcheck.pipeline import JobOptions, analyse
    from kkcheck.report.summary import build_summary

    ds = _lorentz_sources(1.05)
    res = analyse(ds, JobOptions(max_points=400))
    assert res.ranking
    expected = build_summary(res)["merge"]
    assert res.merge.to_dict(res.options.overlap, res.ranking) == expected
    assert expected["suspect_source"] == "B"  # the planted 5 % scale


def _shared_grid_sources():
    """Two sources whose grids share the 101 points 2.00, 2.01, ..., 3.00 eV (B 5 % high)."""
    return [
        _ds("A", np.linspace(1.0, 3.0, 201), seed=19),
        _ds("B", np.linspace(2.0, 4.0, 201), scale=1.05, seed=20),
    ]


def _recording_score(seen):
    """A KK score stand-in that records (points, duplicate energies?, any BLENDED?) per call."""

    def score(sp):
        dup = bool(np.any(np.diff(sp.energy_ev) == 0))
        seen.append((len(sp), dup, bool(np.any(sp.flags & Flag.BLENDED))))
        return float(len(seen))

    return score


def test_rank_references_trial_merges_use_the_given_overlap():
    # Counting closed form: 201 + 201 points with 101 energies in common. Side by side keeps
    # all 402 (each shared energy twice, nothing blended); blend has 402 - 101 = 301 distinct
    # energies, the shared ones blended. Every trial (baseline + 2 suspects) must see the same.
    ds = _shared_grid_sources()
    for overlap, expected in (("side_by_side", (402, True, False)), ("blend", (301, False, True))):
        seen = []
        trials = rank_references(ds, _recording_score(seen), overlap=overlap)
        assert len(trials) == 3 and seen == [expected] * 3, overlap
        seen = []
        rank_references(ds, _recording_score(seen), mode="reference", overlap=overlap)
        assert seen == [expected] * 3, overlap
    seen = []
    rank_references(ds, _recording_score(seen))  # default: merge()'s default, blend
    assert seen == [(301, False, True)] * 3


def test_pipeline_ranks_the_merge_it_analyses(monkeypatch):
    # The job's ranking trials must be merged with the job's own overlap choice (issue 9,
    # item 7: they were always blended while the job analysed side-by-side merges).
    from kkcheck import pipeline

    for overlap, expected in (("side_by_side", (402, True, False)), ("blend", (301, False, True))):
        seen = []
        monkeypatch.setattr(pipeline, "_kk_score", lambda *a, _s=seen, **k: _recording_score(_s))
        res = pipeline.analyse(_shared_grid_sources(), pipeline.JobOptions(overlap=overlap))
        assert len(res.merge.spectrum) == expected[0]
        # 2 scores by the merge's KK test of the correction (without, with), 3 trials
        assert res.ranking and seen == [expected] * 5, overlap
