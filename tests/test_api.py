"""The Python API: every kind of input, the result object, one BLAS thread, the example script.

Outside references: the Lorentz oscillator's closed form (a textbook form, e.g. Wooten,
"Optical Properties of Solids", 1972, ch. 3, from memory) for the planted data; pandas and
numpy themselves for the frame contents. Tests of plumbing name no source ("common practice,
no source").
"""

import json
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

import kkcheck
from kkcheck.api import as_input_list, parse_range, read_any, select_range
from kkcheck.errors import InputError
from kkcheck.job import JobOptions
from kkcheck.units import HC_EV_NM

ROOT = Path(__file__).resolve().parent.parent


def _lorentz(e):
    """eps of one Lorentz oscillator (closed form, exp(-iwt): +i gamma w in the denominator)."""
    return 2.5 + 3.0 / (4.0 - e**2 - 0.3j * e)


@pytest.fixture(scope="module")
def table(tmp_path_factory):
    rng = np.random.default_rng(11)
    e = np.linspace(0.6, 5.0, 200)
    eps = _lorentz(e) + rng.normal(0, 1e-3, e.size) + 1j * rng.normal(0, 1e-3, e.size)
    path = tmp_path_factory.mktemp("api") / "film.csv"
    lines = ["energy_ev,eps1,eps2"] + [f"{a:.6f},{z.real:.6f},{z.imag:.6f}" for a, z in zip(e, eps)]
    path.write_text("\n".join(lines) + "\n")
    return path


@pytest.fixture(scope="module")
def checked(table):
    return kkcheck.check(str(table))


def test_a_single_path_is_one_input(table, checked):
    # issue 16: the string was taken as a sequence of paths (".: is a directory")
    assert len(checked.datasets) == 1 and len(checked.datasets[0]) == 200
    assert kkcheck.check(Path(table)).kk.chi2_dof == pytest.approx(checked.kk.chi2_dof)


def test_a_dataframe_goes_through_the_reader(table, checked):
    frame = pd.read_csv(table)
    res = kkcheck.check(frame)
    np.testing.assert_array_equal(res.datasets[0].eps, checked.datasets[0].eps)
    assert res.datasets[0].provenance.path == "<DataFrame 1>"
    # header-like names with units, on a wavelength axis
    lam = pd.DataFrame(
        {
            "Wavelength (nm)": HC_EV_NM / frame["energy_ev"],
            "e1": frame["eps1"],
            "e2": frame["eps2"],
        }
    )
    res2 = kkcheck.check(lam)
    assert res2.datasets[0].axis == "wavelength_nm"
    np.testing.assert_allclose(res2.datasets[0].energy_ev, checked.datasets[0].energy_ev)


def test_a_bad_dataframe_names_it_not_a_temporary_file():
    frame = pd.DataFrame({"energy_ev": [1.0, 2.0, 3.0], "colour": [1, 2, 3]})
    with pytest.raises(InputError) as e:
        kkcheck.check(frame)
    assert e.value.path == "<DataFrame 1>" and "kkcheck-in-" not in e.value.one_line()


def test_arrays_and_datasets(checked):
    ds = checked.datasets[0]
    from_pair = kkcheck.check((np.asarray(ds.energy_ev), np.asarray(ds.eps)))
    np.testing.assert_array_equal(from_pair.datasets[0].eps, ds.eps)
    # arrays carry no printed digits (Dataset.value_quantum), so the rounding part of the
    # noise floor is missing: the same verdict, chi2 within a few per cent
    assert from_pair.kk.verdict == checked.kk.verdict
    assert from_pair.kk.chi2_dof == pytest.approx(checked.kk.chi2_dof, rel=0.05)
    from_ds = kkcheck.check(ds)
    assert from_ds.kk.chi2_dof == pytest.approx(checked.kk.chi2_dof, rel=1e-9)
    mixed = kkcheck.check([ds, (ds.energy_ev[::-1], ds.eps[::-1] * 1.0)])
    assert len(mixed.datasets) == 2 and mixed.datasets[0].name != mixed.datasets[1].name


@pytest.mark.parametrize(
    ("inputs", "expected"),
    [
        (object(), "cannot read inputs of type"),
        ([], "no input files"),
        ((np.array([1.0, 1.0, 2.0]), np.array([1 + 1j, 2 + 1j, 3 + 1j])), "repeated"),
        ((np.array([-1.0, 1.0]), np.array([1 + 1j, 2 + 1j])), "> 0"),
    ],
)
def test_unusable_inputs_say_what_was_expected(inputs, expected):
    with pytest.raises(InputError, match=expected):
        read_any(inputs, JobOptions())


def test_as_input_list_shapes():
    assert as_input_list("a.csv") == ["a.csv"]
    assert as_input_list(["a.csv", "b.csv"]) == ["a.csv", "b.csv"]
    pair = (np.ones(3), np.ones(3, complex))
    assert len(as_input_list(pair)) == 1


def test_short_repr_text_report_and_html(checked):
    r = repr(checked)
    assert r.startswith("<JobResult:") and len(r) < 300 and "array" not in r
    assert checked.report() == checked.text_summary()
    html = checked._repr_html_()
    assert html.startswith("<table") and checked.kk.verdict in html


def test_to_frame_matches_the_kk_result(checked):
    f = checked.to_frame()
    assert len(f) == len(checked.analysed)
    np.testing.assert_array_equal(f["eps2_kk"].to_numpy(), checked.kk.eps2_model)
    np.testing.assert_array_equal(f["z1"].to_numpy(), checked.kk.resid1)
    assert "eps1_model" not in f  # no fit asked for


def test_plot_returns_a_figure(checked):
    from matplotlib.figure import Figure

    fig = checked.plot()
    assert isinstance(fig, Figure) and len(fig.axes) == 2
    # Lorentz eps2 spans > 2 decades over 0.6-5 eV: log axis (overview.LOG_SPAN)
    eps2 = checked.analysed.eps.imag
    assert (fig.axes[1].get_yscale() == "log") == (eps2.max() > 100 * eps2[eps2 > 0].min())


def test_model_is_the_object_and_model_json_the_document(table, tmp_path):
    res = kkcheck.fit(str(table), out_dir=tmp_path / "o", pairs=1)
    assert res.model is res.fit.model
    on_disk = json.loads((tmp_path / "o" / "model.json").read_text())
    assert on_disk["schema"] == res.model_json["schema"]
    # one Lorentz oscillator: the one-pair model recovers it (closed form, 0.1 % noise)
    e = np.linspace(1.0, 4.0, 7)
    np.testing.assert_allclose(res.model.eps(e), _lorentz(e), rtol=2e-2)
    assert "1 pole pair" in repr(res) and "1 pole pair," in res.report()


def test_range_parsing_and_selection(checked):
    lo, hi = parse_range("400:1000nm")
    assert lo == pytest.approx(HC_EV_NM / 1000) and hi == pytest.approx(HC_EV_NM / 400)
    ds = select_range(checked.datasets[0], 1.0, 2.0)
    assert ds.energy_ev.min() >= 1.0 and ds.energy_ev.max() <= 2.0
    assert ds.provenance.rows.size == ds.energy_ev.size
    assert any("range" in n for n in ds.provenance.notes)
    with pytest.raises(InputError, match="no point in the range"):
        select_range(checked.datasets[0], 10.0, 20.0)
    res = kkcheck.check(checked.datasets[0], range_ev="1:2eV")
    assert res.datasets[0].range_ev[1] <= 2.0


def test_importing_kkcheck_pins_blas_to_one_thread():
    # issue 16: the API ran ~4x slower than the command line, which alone pinned BLAS
    env = {k: v for k, v in os.environ.items() if not k.endswith("_NUM_THREADS")}
    code = "import kkcheck, os; print(os.environ.get('OPENBLAS_NUM_THREADS'))"
    out = subprocess.run(
        [sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True
    )
    assert out.stdout.strip() == "1"
    env["OPENBLAS_NUM_THREADS"] = "2"  # the user's choice is kept
    out = subprocess.run(
        [sys.executable, "-c", code], env=env, capture_output=True, text=True, check=True
    )
    assert out.stdout.strip() == "2"


@pytest.mark.slow
def test_example_script_runs(tmp_path):
    script = ROOT / "examples" / "api_example.py"
    out = subprocess.run(
        [sys.executable, str(script), str(tmp_path / "ex")],
        capture_output=True,
        text=True,
        cwd=tmp_path,
        timeout=300,
    )
    assert out.returncode == 0, out.stderr
    assert "<JobResult:" in out.stdout and "model eps at 2 eV" in out.stdout
    assert (tmp_path / "ex" / "overview.png").stat().st_size > 1000
