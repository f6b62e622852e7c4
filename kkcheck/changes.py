"""The complete record of changes: every value of the repaired table that differs from the input.

Each stage may change values: the merge (scale and eps1 offset of a source, blending of
overlapping sources), the clean stage (levelling of a detector-changeover step), binning of
large spectra, and the repair (spikes, steps and KK regions replaced, gaps filled, several
measurements at one energy combined). :func:`change_record` does not trust any single stage's
own list: it compares the repaired table with the values as read, point by point, so nothing
that moved can be missing, and then names the stage(s) that explain each difference.

Re-applying the record to the inputs gives the repaired table exactly
(:func:`apply_record`): a value is the record's ``new`` where there is one, else the input's.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass

import numpy as np

from .spectrum import Flag

__all__ = ["RecordedChange", "change_record", "apply_record", "record_counts", "record_frame"]


@dataclass(frozen=True)
class RecordedChange:
    """One value of the repaired table that is not the input's value (one row of
    repair_changes.csv).

    Attributes
    ----------
    energy_ev : float
        Photon energy of the value [eV] (the input point's, or the added point's).
    source : str
        Source the input value came from ("" for an added point).
    row : int
        File row of the input value (-1 for an added point or when the reader kept none).
    component : str
        ``"eps1"`` or ``"eps2"``.
    old, new : float
        The value as read (NaN for an added point) and in the repaired table (NaN when the
        point is not in the table because binning folded it into a neighbour).
    stage : str
        Stage(s) that changed it, joined by "+": ``merge``, ``clean``, ``binning``, ``repair``.
    reason : str
        Why, joined by "+": ``scale_offset``, ``blend``, ``level``, ``binned``, ``spike``,
        ``step``, ``kk_region``, ``model``, ``fill``, ``combined`` (several measurements at
        one energy, inverse-variance mean), ``other`` (none of these: a bug to report).
    """

    energy_ev: float
    source: str
    row: int
    component: str
    old: float
    new: float
    stage: str
    reason: str


def _levelled(result, name: str, e: np.ndarray) -> np.ndarray:
    """Mask of the energies ``e`` of source ``name`` shifted by an applied step levelling."""
    m = np.zeros(e.size, bool)
    for c in result.steps:
        if c.applied and c.source == name:
            m |= (e >= c.energy_ev) if c.kept == "below" else (e < c.energy_ev)
    return m


def _match(grid: np.ndarray, e: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Per energy: nearest grid index and whether it equals that grid energy (1e-12 rel)."""
    pos = np.clip(np.searchsorted(grid, e), 0, grid.size - 1)
    lower = np.clip(pos - 1, 0, grid.size - 1)
    pick = np.where(np.abs(grid[lower] - e) < np.abs(grid[pos] - e), lower, pos)
    return pick, np.abs(grid[pick] - e) <= 1e-12 * e


def _repair_reasons(rep) -> dict:
    """{(energy, component): reason} of the repair's own replacements."""
    return {(c.energy_ev, c.component): c.reason for c in rep.changes if c.reason != "fill"}


def _why(result, i, name, e, comp, g, blended, levelled, n_at, rep_reasons):
    """(stage, reason) explaining why input point (source i, energy e) differs in ``comp``."""
    parts = []
    src = result.merge.sources[i]
    if src.applied:
        parts.append(("merge", "scale_offset"))
    if blended:
        parts.append(("merge", "blend"))
    if levelled:
        parts.append(("clean", "level"))
    r = rep_reasons.get((float(result.repair.energy_ev[g]), comp))
    if r is not None:
        parts.append(("repair", r))
    elif n_at > 1:
        parts.append(("repair", "combined"))
    if not parts:
        parts.append(("other", "other"))
    stages = "+".join(dict.fromkeys(p[0] for p in parts))
    return stages, "+".join(p[1] for p in parts)


def _input_changes(result, out: list, covered: np.ndarray) -> None:
    """Records for every input value that differs in (or is missing from) the repaired table."""
    rep = result.repair
    grid, eps = rep.energy_ev, rep.eps
    names = result.merge.spectrum.source_names
    merged = result.merge.spectrum
    rep_reasons = _repair_reasons(rep)
    picks = [_match(grid, d.energy_ev) for d in result.datasets]
    n_at = np.zeros(grid.size, int)
    for pick, match in picks:
        np.add.at(n_at, pick[match], 1)
    for i, d in enumerate(result.datasets):
        pick, match = picks[i]
        covered[pick[match]] = True
        rows = d.provenance.rows if d.provenance.rows.size == len(d) else np.full(len(d), -1)
        mp, mm = _match(merged.energy_ev, d.energy_ev)
        blended = mm & ((merged.flags[mp] & int(Flag.BLENDED)) != 0)
        levelled = _levelled(result, names[i], d.energy_ev)
        for j in range(len(d)):
            for comp, old in (("eps1", d.eps.real[j]), ("eps2", d.eps.imag[j])):
                if not match[j]:
                    new, stage, why = float("nan"), "binning", "binned"
                else:
                    g = pick[j]
                    new = float(eps[g].real if comp == "eps1" else eps[g].imag)
                    if new == old:
                        continue
                    stage, why = _why(
                        result, i, names[i], d.energy_ev[j], comp, g,
                        bool(blended[j]), bool(levelled[j]), n_at[g], rep_reasons,
                    )  # fmt: skip
                out.append(
                    RecordedChange(
                        float(d.energy_ev[j]),
                        names[i],
                        int(rows[j]),
                        comp,
                        float(old),
                        new,
                        stage,
                        why,
                    )  # fmt: skip
                )


def change_record(result) -> tuple[RecordedChange, ...]:
    """Every value of ``result.repair``'s table that differs from the inputs, with why.

    Parameters
    ----------
    result : kkcheck.result.JobResult
        A job result with a repair (``result.repair`` not None).

    Returns
    -------
    tuple of RecordedChange
        In energy order (then source, component). Empty without a repair.

    Notes
    -----
    For every input point (source, file row) the repaired table's value at the same energy
    (to 1e-12 relative) is compared with the value as read, component by component; a
    difference is recorded with the stages that explain it: ``merge`` when the source's
    correction was applied or the point was blended, ``clean`` when an applied step
    levelling shifted that side of the source (:class:`kkcheck.clean.StepCorrection`),
    ``repair`` for the repair's own replacements or for several measurements combined at one
    energy. An input point whose energy is not in the table was folded into a bin
    (``binned``, new = NaN). Table points at no input energy are added (``fill``, or
    ``binned`` for a bin's own energy), old = NaN.
    """
    if result.repair is None:
        return ()
    rep = result.repair
    out: list[RecordedChange] = []
    covered = np.zeros(rep.energy_ev.size, bool)
    _input_changes(result, out, covered)
    binned_e = set(np.asarray(result.analysed.energy_ev, float).tolist())
    for g in np.nonzero(~covered)[0]:
        e = float(rep.energy_ev[g])
        stage, why = ("binning", "binned") if e in binned_e else ("repair", "fill")
        for comp, new in (("eps1", rep.eps.real[g]), ("eps2", rep.eps.imag[g])):
            out.append(RecordedChange(e, "", -1, comp, float("nan"), float(new), stage, why))
    out.sort(key=lambda c: (c.energy_ev, c.source, c.component, c.row))
    return tuple(out)


def apply_record(datasets, record, grid_ev) -> np.ndarray:
    """The table the record describes: input values with the record's ``new`` values applied.

    Parameters
    ----------
    datasets : sequence of Dataset
        The inputs as read.
    record : sequence of RecordedChange
    grid_ev : array_like
        Energies of the repaired table [eV].

    Returns
    -------
    numpy.ndarray
        Complex eps on ``grid_ev``: where a record gives a (non-NaN) new value at that
        energy, that value; else the input value at that energy; NaN where neither exists.
    """
    grid = np.asarray(grid_ev, float)
    e1 = np.full(grid.size, np.nan)
    e2 = np.full(grid.size, np.nan)
    for d in datasets:
        pick, match = _match(grid, d.energy_ev)
        e1[pick[match]] = d.eps.real[match]
        e2[pick[match]] = d.eps.imag[match]
    for c in record:
        if np.isnan(c.new):
            continue
        pick, match = _match(grid, np.array([c.energy_ev]))
        if match[0]:
            (e1 if c.component == "eps1" else e2)[pick[0]] = c.new
    return e1 + 1j * e2


def record_counts(record) -> dict:
    """Counts for summary.json: values changed, by reason and by stage."""
    return {
        "values": len(record),
        "by_reason": dict(sorted(Counter(c.reason for c in record).items())),
        "by_stage": dict(sorted(Counter(c.stage for c in record).items())),
    }


def record_frame(record, axis: str = "energy_ev"):
    """The record as a table: the axis (named by its unit), energy_ev (when the axis is not
    eV), source, row, component, old, new, stage, reason."""
    import pandas as pd

    from .units import from_energy_ev

    e = np.array([c.energy_ev for c in record], float)
    cols = {axis: from_energy_ev(e, axis) if e.size else e}
    if axis != "energy_ev":
        cols["energy_ev"] = e
    for f in ("source", "row", "component", "old", "new", "stage", "reason"):
        cols[f] = [getattr(c, f) for c in record]
    return pd.DataFrame(cols)
