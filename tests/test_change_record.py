"""Tests of kkcheck.changes: every value of the repaired table that differs from the input is
recorded, and re-applying the record to the inputs gives the repaired table exactly.

The stages are run as the pipeline chains them (merge, clean, step levelling kept only when
the KK misfit drops, KK test, repair). Sources: a Tauc-Lorentz film (Jellison & Modine 1996
closed form, kkcheck.materials) with a planted scale, spikes and a detector step; and a
published table, F. Cheng et al., ACS Nano 10, 9852 (2016) (al_cheng2016 of the corpus), with
planted spikes and a withheld band.
"""

from __future__ import annotations

from pathlib import Path
from types import SimpleNamespace

import numpy as np
import pytest

from kkcheck.changes import apply_record, change_record, record_counts, record_frame
from kkcheck.clean import clean, level_steps_if_better
from kkcheck.io import read_table
from kkcheck.kk.consistency import kk_test
from kkcheck.materials import tauc_lorentz
from kkcheck.merge import merge
from kkcheck.repair import repair
from kkcheck.spectrum import Dataset, Provenance

PUBLISHED = Path(__file__).resolve().parent.parent / "reference_data" / "published"


def _run(datasets):
    """The pipeline's chain of stages on ``datasets``, as a JobResult-like namespace."""
    merged = merge(datasets, overlap="side_by_side")
    cleaned = clean(merged.spectrum, policy="keep")
    steps = [o for o in cleaned.outliers if o.kind == "step"]
    spectrum, corrections = cleaned.spectrum, ()
    if steps:
        spectrum, corrections, _ = level_steps_if_better(spectrum, steps, kk_test)
    kk = kk_test(spectrum)
    rep = repair(spectrum, kk)
    return SimpleNamespace(
        datasets=tuple(datasets), merge=merged, steps=corrections, analysed=spectrum, repair=rep
    )


def _ds(name, e, eps):
    return Dataset(name, e, eps, provenance=Provenance(rows=np.arange(3, e.size + 3)))


@pytest.mark.slow
def test_record_reproduces_the_repaired_table_with_scale_step_spikes_and_gap():
    rng = np.random.default_rng(5)

    def f(e):
        return 1.9 + tauc_lorentz(e, 122.0, 3.45, 2.54, 1.20)

    ea = np.concatenate([np.linspace(1.0, 2.0, 120), np.linspace(2.3, 3.4, 130)])  # a gap
    eb = np.linspace(3.0, 5.5, 250)
    noise = 2e-3
    eps_a = f(ea) + noise * (rng.normal(size=ea.size) + 1j * rng.normal(size=ea.size))
    eps_b = 1.05 * f(eb) + noise * (rng.normal(size=eb.size) + 1j * rng.normal(size=eb.size))
    eps_b[eb > 4.6] += 0.15  # detector-changeover step in eps1
    eps_a[[40, 200]] += 0.8 + 0.5j  # spikes
    a, b = _ds("vis", ea, eps_a), _ds("uv", eb, eps_b)
    res = _run([a, b])
    rec = change_record(res)
    # exact: the record applied to the inputs is the repaired table, bit for bit
    table = apply_record(res.datasets, rec, res.repair.energy_ev)
    np.testing.assert_array_equal(table, res.repair.eps)
    counts = record_counts(rec)
    reasons = set(counts["by_reason"])
    assert "other" not in reasons and not any("other" in r for r in reasons)
    assert any("scale_offset" in r for r in reasons)  # the 5 % scale of uv was applied
    assert res.merge.sources[1].applied
    assert "fill" in reasons  # the 2.0-2.3 eV gap
    assert any("spike" in r for r in reasons)
    assert any(c.applied for c in res.steps)  # the planted step was levelled ...
    assert any("level" in r for r in reasons)  # ... and its shifted values are recorded
    # every record names its input row (or -1 for an added point)
    assert all((c.row >= 3) == (c.source != "") for c in rec)
    frame = record_frame(rec, axis="wavelength_nm")
    assert list(frame.columns)[:2] == ["wavelength_nm", "energy_ev"] and len(frame) == len(rec)


def test_record_on_a_published_table_with_spikes_and_withheld_band():
    # Cheng et al. 2016 with two planted spikes: the spikes are replaced by the prediction of
    # the other data; nothing else changes; the record reproduces the table exactly.
    ds = read_table(PUBLISHED / "al_cheng2016.csv")
    eps = np.array(ds.eps)
    eps[[100, 300]] *= 1.3
    spiked = Dataset(ds.name, ds.energy_ev, eps, provenance=ds.provenance)
    res = _run([spiked])
    rec = change_record(res)
    np.testing.assert_array_equal(
        apply_record(res.datasets, rec, res.repair.energy_ev), res.repair.eps
    )
    changed_rows = {c.row for c in rec if "spike" in c.reason}
    planted_rows = {int(ds.provenance.rows[100]), int(ds.provenance.rows[300])}
    assert planted_rows <= changed_rows
    # a record that misses a change would not reproduce the table
    if rec:
        short = apply_record(res.datasets, rec[1:], res.repair.energy_ev)
        assert not np.array_equal(short, res.repair.eps)


def test_nothing_recorded_when_nothing_changes():
    # a KK-consistent closed form (Tauc-Lorentz) without defects: no spike, no gap, one
    # source: the repaired table is the input and the record is empty
    e = np.linspace(1.0, 5.0, 200)
    eps = 1.9 + tauc_lorentz(e, 122.0, 3.45, 2.54, 1.20)
    res = _run([_ds("film", e, eps)])
    rec = change_record(res)
    assert all(c.reason != "other" for c in rec)
    np.testing.assert_array_equal(
        apply_record(res.datasets, rec, res.repair.energy_ev), res.repair.eps
    )
    assert record_counts(rec)["values"] == len(rec)
