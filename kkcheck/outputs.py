"""Writing a job's outputs: summary.json, the tables, model.json and (when asked) the report.

Every file goes through the input-protecting writers of :mod:`kkcheck.io` (nothing is written
over an input file).
"""

from __future__ import annotations

import dataclasses
from pathlib import Path
from typing import TYPE_CHECKING

from ._version import __version__
from .errors import InputError

if TYPE_CHECKING:
    from .result import JobResult

__all__ = ["write_outputs"]


def write_outputs(result: JobResult, out_dir, *, command: str = "") -> JobResult:
    """Write summary.json, tables, model.json, and (when asked) the report into ``out_dir``."""
    from .io import write_json, write_table_csv, write_text

    out = Path(out_dir)
    protect = {d.provenance.path for d in result.datasets if d.provenance.path}
    if out.exists() and not out.is_dir():
        raise InputError("expected a folder for --out, found a file", path=str(out))
    out.mkdir(parents=True, exist_ok=True)
    files = []
    prov = [
        f"options: {result.options.as_dict()}"
    ]  # version and input digests come from the writer
    files.append(write_json(out / "summary.json", result.summary, overwrite_protect=protect))
    files.append(
        write_table_csv(
            out / "cleaned.csv",
            result.clean.spectrum,
            provenance_lines=prov
            + ["merged and flagged (flags: bit mask, see kkcheck.spectrum.Flag)"],
            overwrite_protect=protect,
        )
    )
    # model.json's content (named ``model`` before the result type called it ``model_json``)
    model_doc = result.model_json if hasattr(result, "model_json") else result.model
    if model_doc is not None:
        from .rational.io import parameter_table

        files.append(write_json(out / "model.json", result.model, overwrite_protect=protect))
        txt = out / "model_parameters.txt"
        files.append(write_text(txt, parameter_table(result.fit.model), overwrite_protect=protect))
    if result.repair is not None:
        files.extend(_write_repaired(result, out, prov, protect))
        changes = result.repair.changes_frame()
        text = (
            f"# kkcheck {__version__}: every value the repair replaced or added\n"
            "# reason: spike / step (replaced by the KK-consistent prediction from the other "
            "data), fill (gap), ...; old is nan for added points\n"
            + changes.to_csv(index=False, lineterminator="\n")
        )
        files.append(write_text(out / "repair_changes.csv", text, overwrite_protect=protect))
    if result.options.html:
        from .report.assemble import write_report

        files.extend(write_report(result, out, command=command))
    return dataclasses.replace(result, out_dir=out, files=tuple(Path(f) for f in files))


def _write_repaired(result: JobResult, out: Path, prov, protect) -> list[Path]:
    """repaired.csv in eV, and repaired_<unit>.csv in the first input's axis unit."""
    from .io import write_table_csv

    lines = prov + ["KK-consistent repair: flagged points replaced, gaps filled"]
    axes = ["energy_ev"]
    axis_out = result.options.axis_out or (result.datasets[0].axis if result.datasets else None)
    if axis_out not in (None, "energy_ev"):
        axes.append(axis_out)
    paths = []
    for axis in axes:
        name = "repaired.csv" if axis == "energy_ev" else f"repaired_{axis}.csv"
        paths.append(
            write_table_csv(
                out / name,
                result.repair.to_frame(axis),
                axis=axis,
                provenance_lines=lines,
                overwrite_protect=protect,
            )
        )
    return paths
