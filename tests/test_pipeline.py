"""The whole job: demo artefacts, TOML configs, the Python API of the README."""

import json
from pathlib import Path

import numpy as np
import pytest

import kkcheck
from kkcheck.cli import main
from kkcheck.materials import lorentz, tauc_lorentz
from kkcheck.units import HC_EV_NM, eps_to_nk

ROOT = Path(__file__).resolve().parent.parent


def _film(path: Path, lam_lo: float, lam_hi: float, step: float, seed: int, scale=1.0):
    """Tauc-Lorentz film (Jellison & Modine 1996 form, invented parameters), n,k with noise."""
    rng = np.random.default_rng(seed)
    lam = np.arange(lam_lo, lam_hi + 1e-9, step)
    eps = (1.8 + tauc_lorentz(HC_EV_NM / lam, 85.0, 4.2, 2.0, 2.4)) * scale
    n, k = eps_to_nk(eps)
    n = n + rng.normal(0, 1e-3, lam.size)
    k = np.abs(k + rng.normal(0, 1e-3, lam.size))
    rows = [f"{a:.2f},{b:.5f},{c:.5f}" for a, b, c in zip(lam, n, k)]
    path.write_text("wavelength_nm,n,k\n" + "\n".join(rows) + "\n")
    return path


@pytest.mark.slow
def test_demo_produces_every_artefact(tmp_path):
    res = kkcheck.demo(out_dir=tmp_path / "demo")
    out = tmp_path / "demo"
    for name in (
        "summary.json",
        "model.json",
        "cleaned.csv",
        "repaired.csv",
        "repaired_wavelength_nm.csv",
        "model_parameters.txt",
        "report.html",
        "summary.md",
    ):
        assert (out / name).stat().st_size > 0, name
    for stem in (
        "sources",
        "kk_reconstruction",
        "kk_residuals",
        "repaired",
        "fit",
        "passivity",
        "slab",
    ):
        assert (out / "figures" / f"{stem}.png").stat().st_size > 10_000
        assert (out / "figures" / f"{stem}.pdf").read_bytes()[:5] == b"%PDF-"
    assert set(res.files) >= {out / "summary.json", out / "report.html"}
    # the planted defects of reference_data/README.md are found
    s = json.loads((out / "summary.json").read_text())
    (step,) = s["step_corrections"]
    assert step["source"] == "nir_ellipsometry"
    assert HC_EV_NM / step["energy_ev"] == pytest.approx(1600.0, abs=10.0)  # planted at 1.60 um
    assert step["relative"] == pytest.approx(-0.025, abs=0.006)  # eps1 x 1.025 below 0.775 eV
    # the FTIR reflectance overlaps the short side of the step (kkcheck/demo_data, see
    # reference_data/README.md), so the step is left as measured rather than shifting values
    # another source checks, and the KK test reports it where it is
    assert not step["applied"] and "overlap" in step["reason"]
    assert s["kk"]["verdict"] == "inconsistent"
    # every region lies on the planted n bump centred at 480 nm (2.58 eV, width ~18 nm) or on
    # the unlevelled step's short side (0.56-0.775 eV)
    for r in s["kk"]["regions"]:
        on_bump = 2.3 < r["from_ev"] and r["to_ev"] < 2.9
        on_step = 0.55 < r["from_ev"] and r["to_ev"] < 0.80
        assert on_bump or on_step, r
    assert any(2.3 < r["from_ev"] and r["to_ev"] < 2.9 for r in s["kk"]["regions"])
    m = json.loads((out / "model.json").read_text())
    assert m["passivity"]["certified"] and m["stable"]
    # the closed-form Lorentz phonon planted by reference_data/make_demo.py (0.9, 0.118 eV,
    # 0.004 eV) comes back as one pair
    ph = [t for t in m["terms"] if abs(t.get("w0_ev", 0) - 0.118) < 0.002]
    assert len(ph) == 1 and ph[0]["gamma_ev"] == pytest.approx(0.004, rel=0.05)
    changes = (out / "repair_changes.csv").read_text().splitlines()
    assert changes[2].startswith("energy_ev,source,row,component,old,new,stage,reason")
    assert any(",spike" in c for c in changes)
    # the FTIR reflectance covers the old gap between the NIR and handbook tables, so there is
    # nothing to fill; the change record says so by having no fill rows
    assert s["merge"]["gaps_ev"] == [] and not any(",fill" in c for c in changes)
    html = (out / "report.html").read_text()
    assert html.index("INCONSISTENT") < html.index("<table")
    md = (out / "summary.md").read_text()
    assert "inconsistent" in md.lower() and "fitted range" in md.lower()


def test_run_config_merges_two_files(tmp_path):
    _film(tmp_path / "uv.csv", 300.0, 800.0, 4.0, seed=1)
    _film(tmp_path / "vis.csv", 700.0, 1200.0, 5.0, seed=2, scale=1.03)
    cfg = tmp_path / "job.toml"
    cfg.write_text(
        'title = "two instruments"\nout = "results"\n'
        'inputs = ["uv.csv", {path = "vis.csv", name = "VIS"}]\n'
        '[merge]\nreference = "uv"\n[fit]\npairs = 3\n[report]\nhtml = false\n'
    )
    assert main(["run", str(cfg), "--quiet"]) == 0
    s = json.loads((tmp_path / "results" / "summary.json").read_text())
    src = {x["name"]: x for x in s["merge"]["sources"]}
    assert src["uv"]["reference"] is True
    assert src["VIS"]["scale"] == pytest.approx(1.03, abs=0.01)  # planted 3 % scale
    assert s["kk"]["verdict"] == "consistent"
    m = json.loads((tmp_path / "results" / "model.json").read_text())
    assert len(m["pairs"]) == 3
    assert not (tmp_path / "results" / "report.html").exists()


@pytest.mark.parametrize(
    "text, expected",
    [
        ('inputs = ["a.csv"]\ncolour = 3\n', "unknown key"),
        ("inputs = [\n", "TOML"),
        ('title = "x"\n', "inputs"),
        ('inputs = ["a.csv"]\n[fit]\npairz = 3\n', "pairz"),
    ],
)
def test_bad_config_is_one_line(tmp_path, capsys, text, expected):
    cfg = tmp_path / "job.toml"
    cfg.write_text(text)
    assert main(["run", str(cfg)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "job.toml" in err and expected in err


def test_python_api_as_in_readme(tmp_path):
    a = _film(tmp_path / "uvvis.csv", 300.0, 800.0, 4.0, seed=3)
    b = _film(tmp_path / "nir.csv", 750.0, 1500.0, 6.0, seed=4)
    result = kkcheck.check([str(a), str(b)], out_dir=tmp_path / "results")
    assert result.kk.verdict == "consistent"
    assert [r.from_ev for r in result.kk.regions] == []
    fitted = kkcheck.fit([str(a), str(b)], out_dir=tmp_path / "results", pairs=4)
    eps = fitted.fit.model.eps([1.0, 2.0, 3.0])
    truth = 1.8 + tauc_lorentz(np.array([1.0, 2.0, 3.0]), 85.0, 4.2, 2.0, 2.4)
    np.testing.assert_allclose(eps, truth, rtol=0.02)


def test_lorentz_oscillator_fit_recovers_its_parameters(tmp_path):
    # closed-form Lorentz oscillator (common practice) sampled as eps; the pipeline's fit
    # must find one pair with w0 and gamma of the oscillator
    e = np.linspace(0.5, 4.0, 300)
    rng = np.random.default_rng(11)
    eps = 2.0 + lorentz(e, 3.0, 2.0, 0.2) + rng.normal(0, 1e-3, e.size) * (1 + 1j)
    p = tmp_path / "osc.txt"
    p.write_text(
        "energy (eV)\teps1\teps2\n"
        + "\n".join(f"{a:.6f}\t{z.real:.6f}\t{z.imag:.6f}" for a, z in zip(e, eps))
        + "\n"
    )
    res = kkcheck.fit([str(p)], out_dir=tmp_path / "o")
    terms = res.model_json["terms"]
    (term,) = [t for t in terms if t.get("kind") in ("lorentz", "modified_lorentz")]
    assert term["w0_ev"] == pytest.approx(2.0, rel=5e-3)
    assert term["gamma_ev"] == pytest.approx(0.2, rel=2e-2)


def test_source_ranking_bins_large_spectra_like_the_main_test(monkeypatch):
    # Two overlapping 1200-point sources of a Tauc-Lorentz film (Jellison & Modine 1996 closed
    # form). Every KK test of the job, the source-ranking trials included, must see the
    # spectrum binned to about max_points: the dense fit is M^2 in memory (two 5348-point
    # sources took 4.6 GB unbinned). Size bound: common practice, no source.
    from kkcheck.kk import consistency
    from kkcheck.pipeline import JobOptions, analyse
    from kkcheck.spectrum import Dataset

    rng = np.random.default_rng(11)
    ds = []
    for name, (lo, hi) in (("uv", (1.0, 3.2)), ("vis", (2.8, 6.0))):
        e = np.linspace(lo, hi, 1200)
        eps = 1.9 + tauc_lorentz(e, 122.0, 3.45, 2.54, 1.20)
        ds.append(
            Dataset(name, e, eps + 1e-3 * (rng.normal(size=e.size) + 1j * rng.normal(size=e.size)))
        )
    seen = []
    real = consistency.kk_test

    def spy(spectrum, *args, **kwargs):
        seen.append(len(spectrum.energy_ev))
        return real(spectrum, *args, **kwargs)

    monkeypatch.setattr(consistency, "kk_test", spy)
    res = analyse(ds, JobOptions(max_points=400))
    assert res.ranking is not None and len(seen) >= 3  # baseline + one trial per source + main
    assert max(seen) < 1000, seen  # 2400 points in, about 400 (plus sharp points) analysed


def test_choice_options_are_checked_once_up_front_with_the_choices_listed():
    # issue 9: string options are Literal aliases checked when the options are made (common
    # practice, no source); the message names the option and every allowed value
    from kkcheck.errors import InputError
    from kkcheck.job import JobOptions

    with pytest.raises(InputError, match=r"flagged = 'drop' is not a choice; expected one of "
                       r"keep, downweight, replace"):
        JobOptions(flagged="drop")
    with pytest.raises(InputError, match="overlap = 'mean'"):
        JobOptions(overlap="mean")
    assert JobOptions(flagged="keep").flag_policy.kk_sigma_factor == 1.0
    assert JobOptions().flag_policy.repair_choice == "replace_flagged"


def test_config_file_choice_error_names_the_file(tmp_path):
    from kkcheck.errors import InputError
    from kkcheck.job import load_config

    cfg = tmp_path / "job.toml"
    cfg.write_text('inputs = ["a.csv"]\n[clean]\nsteps = "smooth"\n', encoding="utf-8")
    with pytest.raises(InputError) as info:
        load_config(cfg)
    assert info.value.path == str(cfg)
    assert "steps = 'smooth' is not a choice; expected one of level, keep" in info.value.message
