"""summary.json (schema ``kkcheck.summary/1``) built from each stage result's own ``to_dict()``.

The layout is the contract of DESIGN.md: ``inputs``, ``convention``, ``merge``, ``outliers``,
``step_corrections``, ``kk``, ``sum_rules``, ``parameters``, ``warnings``, and with a fit
``repair``, ``fit`` and ``slab``. This module only arranges the blocks; what each holds is
decided by the stage that computed it.
"""

from __future__ import annotations

import datetime as _dt

from .._version import __version__
from ..jsonsafe import json_float

__all__ = ["SUMMARY_SCHEMA", "build_summary"]

SUMMARY_SCHEMA = "kkcheck.summary/1"


def _convention_block(datasets) -> dict:
    converted = any(d.converted for d in datasets)
    return {
        "detected": "exp(+iwt)" if converted else "exp(-iwt)",
        "converted": converted,
        "per_input": [
            {"path": d.provenance.path, "detected": d.convention, "converted": d.converted}
            for d in datasets
        ],
    }


def _kk_block(kk, analysed, binning) -> dict:
    """The KK test's block plus what only the job knows: the window and the binning."""
    block = kk.to_dict()
    regions = block.pop("regions")
    notes = block.pop("notes")
    block["range_ev"] = [json_float(analysed.energy_ev[0]), json_float(analysed.energy_ev[-1])]
    block["regions"] = regions
    block["notes"] = notes
    block["points_analysed"] = len(analysed)
    note = binning.note()
    if note is not None:
        block["notes"].append(note)
    return block


def build_summary(result) -> dict:
    """The summary.json document of a :class:`kkcheck.result.JobResult`."""
    summary = {
        "schema": SUMMARY_SCHEMA,
        "version": __version__,
        "created_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "inputs": [d.to_dict() for d in result.datasets],
        "convention": _convention_block(result.datasets),
        "merge": result.merge.to_dict(result.options.overlap, result.ranking),
        "outliers": [o.to_dict() for o in result.clean.outliers],
        "step_corrections": [c.to_dict() for c in result.steps],
        "kk": _kk_block(result.kk, result.analysed, result.binning),
        "sum_rules": result.sum_rules.to_dict(),
        "parameters": result.options.as_dict(),
        "warnings": list(result.warnings),
    }
    if result.mskk is not None:
        summary["mskk"] = result.mskk.to_dict()
    if result.reflectance:
        summary["reflectance"] = [r.to_dict() for r in result.reflectance]
    if result.repair is not None:
        from ..changes import change_record, record_counts

        summary["repair"] = result.repair.to_dict()
        summary["repair"]["recorded_changes"] = record_counts(change_record(result))
    if result.fit is not None:
        summary["fit"] = result.fit.to_dict()
    if result.slab is not None:
        summary["slab"] = result.slab.to_dict()
    return summary
