"""Writing a job's outputs: plan, check, then write, so a user's files are never lost.

A command's outputs are first written into a private staging folder inside the output folder
(``.kkcheck-staging-<pid>-<token>``, every file through the atomic writer of
:mod:`kkcheck.io.write`, figures included). That gives the complete list of files the command
will write. Every target is then checked, before anything under a final name is touched:

* no target may be one of the run's inputs (real paths compared, symlinks and hard links
  included);
* no target may lead out of the output folder (through a symlinked subfolder or file);
* a target that exists must be a file kkcheck wrote there and nobody changed since: the folder's
  manifest ``.kkcheck-outputs.json`` lists every file of the last run with its sha256. Anything
  else (a user's own file of that name, a symlink, a changed file) is refused unless
  ``overwrite=True`` (``--overwrite``).

Only then are the staged files renamed into place, the previous files moved aside first; if a
rename fails, everything is moved back (the previous results, or none, never a mix). Files of
the previous run that this run does not produce (e.g. a report from an earlier ``fit``) are
removed with it, so the folder holds one run's results. The manifest is written last. A run
killed with SIGKILL during the renames leaves its staging folder and journal; the next run into
the folder puts the previous results back first. The whole write holds the folder's lock
(:mod:`kkcheck.folderlock`).
"""

from __future__ import annotations

import contextlib
import contextvars
import dataclasses
import hashlib
import json
import os
import secrets
import shutil
import sys
import time
from pathlib import Path
from typing import TYPE_CHECKING

from ._version import __version__
from .errors import InputError, OutputError
from .folderlock import folder_lock, pid_running

if TYPE_CHECKING:
    from .result import JobResult

__all__ = [
    "MANIFEST_NAME",
    "OutputPlan",
    "reserve_folder",
    "staged_outputs",
    "plan_outputs",
    "read_manifest",
    "write_outputs",
    "overwriting",
]

MANIFEST_NAME = ".kkcheck-outputs.json"
_MANIFEST_SCHEMA = "kkcheck-outputs/1"
_STAGING_PREFIX = ".kkcheck-staging-"
_JOURNAL = "journal.json"
_BACKUP = ".previous"

#: Default of ``overwrite`` for :func:`write_outputs` called without it (the command line's
#: ``--overwrite``, set with :func:`overwriting` around a pipeline call).
_OVERWRITE: contextvars.ContextVar[bool] = contextvars.ContextVar(
    "kkcheck_overwrite", default=False
)


@contextlib.contextmanager
def overwriting(allowed: bool = True):
    """Within the block, :func:`write_outputs` replaces files kkcheck did not write.

    Inputs and symlinks out of the output folder stay refused.
    """
    token = _OVERWRITE.set(bool(allowed))
    try:
        yield
    finally:
        _OVERWRITE.reset(token)


@dataclasses.dataclass(frozen=True)
class OutputPlan:
    """The checked list of files one command writes into ``out_dir``.

    Attributes
    ----------
    out_dir : pathlib.Path
        The output folder.
    names : tuple of str
        Paths relative to ``out_dir`` (``/``-separated) of every file the command writes.
    replaced : tuple of str
        Those of ``names`` that exist now (written by an earlier kkcheck run, or allowed by
        ``overwrite``).
    removed : tuple of str
        Files of the previous run (from its manifest, unchanged since) that this run does not
        write: moved away with the commit so the folder holds one run's results.
    """

    out_dir: Path
    names: tuple
    replaced: tuple
    removed: tuple


def _sha256(path: Path) -> str:
    h = hashlib.sha256()
    with open(path, "rb") as f:
        for chunk in iter(lambda: f.read(1 << 20), b""):
            h.update(chunk)
    return h.hexdigest()


def read_manifest(out_dir) -> dict:
    """The manifest of ``out_dir`` (``{}`` when there is none or it is not kkcheck's)."""
    try:
        data = json.loads((Path(out_dir) / MANIFEST_NAME).read_text(encoding="utf-8"))
    except (OSError, ValueError):
        return {}
    if not isinstance(data, dict) or data.get("schema") != _MANIFEST_SCHEMA:
        return {}
    return data


def _is_ours(out: Path, rel: str, manifest: dict) -> bool:
    """True when ``out/rel`` is a regular file the last run wrote and nobody changed since."""
    p = out / rel
    if p.is_symlink() or not p.is_file():
        return False
    if rel == MANIFEST_NAME:
        return bool(manifest)
    sha = manifest.get("files", {}).get(rel)
    return sha is not None and _sha256(p) == sha


def _inputs_real(inputs) -> list[tuple[str, Path]]:
    out = []
    for q in inputs:
        if q:
            out.append((str(q), Path(os.path.realpath(q))))
    return out


def _check_target(out: Path, out_real: Path, rel: str, inputs, manifest, overwrite) -> bool:
    """Refuse ``out/rel`` (OutputError) or return whether it exists now."""
    target = out / rel
    real = Path(os.path.realpath(target))
    for given, q in inputs:
        same = real == q
        if not same and target.exists() and q.exists():
            with contextlib.suppress(OSError):
                same = os.path.samefile(target, q)
        if same:
            raise OutputError(
                f"is the input file {given}; refusing to write over it (choose another "
                "output folder)",
                target,
            )
    if out_real != real and out_real not in real.parents:
        raise OutputError(
            f"leads out of the output folder (to {real}) through a symlink; refusing to write",
            target,
        )
    if not os.path.lexists(target):
        return False
    if target.is_dir() and not target.is_symlink():
        raise OutputError("is a folder where kkcheck writes a file; refusing", target)
    if not overwrite and not _is_ours(out, rel, manifest):
        what = "a symlink" if target.is_symlink() else "a file kkcheck did not write"
        if not target.is_symlink() and rel in manifest.get("files", {}):
            what = "a file changed since kkcheck wrote it"
        raise OutputError(
            f"exists and is {what}; refusing to replace it (pass --overwrite to replace it)",
            target,
        )
    return True


def plan_outputs(out_dir, names, inputs=(), *, overwrite: bool = False) -> OutputPlan:
    """Check every target of a command before anything is written; see the module docstring.

    Parameters
    ----------
    out_dir : path
        The (existing) output folder.
    names : iterable of str
        Files to write, relative to ``out_dir``.
    inputs : iterable of path
        The run's input files (never written).
    overwrite : bool
        Replace existing files that kkcheck did not write (inputs and symlinks out of the
        folder are refused all the same).

    Raises
    ------
    OutputError
        The first target refused, with the reason.
    """
    out = Path(out_dir)
    out_real = Path(os.path.realpath(out))
    manifest = read_manifest(out)
    ins = _inputs_real(inputs)
    names = tuple(sorted(set(names) | {MANIFEST_NAME}))
    replaced = tuple(
        rel for rel in names if _check_target(out, out_real, rel, ins, manifest, overwrite)
    )
    removed = []
    for rel in sorted(manifest.get("files", {})):
        if rel in names or rel == MANIFEST_NAME:
            continue
        p = out / rel
        inside = out_real in Path(os.path.realpath(p)).parents
        is_input = any(Path(os.path.realpath(p)) == q for _, q in ins)
        if inside and not is_input and _is_ours(out, rel, manifest):
            removed.append(rel)
    return OutputPlan(out, names, replaced, tuple(removed))


# ---------------------------------------------------------------------------- staging


class _Staging:
    """A private folder inside the output folder where a command's files are written first."""

    def __init__(self, out: Path):
        self.out = out
        self.dir = out / f"{_STAGING_PREFIX}{os.getpid()}-{secrets.token_hex(4)}"
        try:
            self.dir.mkdir()
        except OSError as exc:
            raise OutputError.from_os_error(
                exc, out, "cannot write into the output folder"
            ) from None

    def names(self) -> list[str]:
        out = []
        for root, dirs, files in os.walk(self.dir):
            dirs[:] = [d for d in dirs if d != _BACKUP]
            rel_root = Path(root).relative_to(self.dir)
            out += [(rel_root / f).as_posix() for f in files if not f.endswith(".tmp")]
        return sorted(n for n in out if n != _JOURNAL)


def _journal(st: _Staging, plan: OutputPlan) -> None:
    from .io.write import atomic_write_bytes

    entries = {"names": list(plan.names), "replaced": list(plan.replaced)}
    entries["removed"] = list(plan.removed)
    atomic_write_bytes(st.dir / _JOURNAL, json.dumps(entries).encode("utf-8"))


def _move(src: Path, dst: Path) -> None:
    dst.parent.mkdir(parents=True, exist_ok=True)
    os.replace(src, dst)


def _commit(st: _Staging, plan: OutputPlan, manifest: dict) -> None:
    """Move the previous files aside and the staged ones into place; undo all on failure."""
    from .io.write import atomic_write_bytes, fsync_dir

    out, backup = plan.out_dir, st.dir / _BACKUP
    atomic_write_bytes(st.dir / MANIFEST_NAME, json.dumps(manifest, indent=1).encode("utf-8"))
    _journal(st, plan)
    done: list[tuple[Path, Path | None]] = []
    names = [n for n in plan.names if n != MANIFEST_NAME] + [MANIFEST_NAME]
    try:
        for rel in plan.removed:
            _move(out / rel, backup / rel)
            done.append((out / rel, backup / rel))
        for rel in names:
            final = out / rel
            bak = None
            if os.path.lexists(final):
                bak = backup / rel
                _move(final, bak)
            done.append((final, bak))
            _move(st.dir / rel, final)
        for folder in sorted({(out / n).parent for n in names}, reverse=True):
            fsync_dir(folder)  # the renames are durable before the old files go
    except BaseException as exc:
        _undo(done, was_staged={out / n for n in names})
        if isinstance(exc, OSError):
            raise OutputError.from_os_error(
                exc, out, "cannot replace the previous results"
            ) from None
        raise


def _undo(done, was_staged) -> None:
    for final, bak in reversed(done):
        with contextlib.suppress(OSError):
            if bak is not None and bak.exists():
                os.replace(bak, final)
            elif final in was_staged and os.path.lexists(final):
                os.unlink(final)


def recover_interrupted(out_dir) -> list[str]:
    """Undo the commit of a run that was killed while renaming; remove dead runs' staging.

    Returns the names put back (for a note on stderr). Staging folders of live processes are
    left alone.
    """
    restored: list[str] = []
    out = Path(out_dir)
    for d in sorted(out.glob(_STAGING_PREFIX + "*")):
        try:
            pid = int(d.name[len(_STAGING_PREFIX) :].split("-")[0])
        except ValueError:
            continue
        if pid == os.getpid() or pid_running(pid):
            continue
        try:
            journal = json.loads((d / _JOURNAL).read_text(encoding="utf-8"))
        except (OSError, ValueError):
            journal = None
        if journal is not None:
            restored += _roll_back(out, d, journal)
        shutil.rmtree(d, ignore_errors=True)
    return restored


def _roll_back(out: Path, d: Path, journal: dict) -> list[str]:
    if not (d / MANIFEST_NAME).exists():
        return []  # the new manifest went into place last: that commit had finished
    back = []
    names = [n for n in journal.get("names", []) if n != MANIFEST_NAME]
    for rel in names:
        staged, bak, final = d / rel, d / _BACKUP / rel, out / rel
        if not staged.exists() and os.path.lexists(final) and not bak.exists():
            if rel not in journal.get("replaced", []):
                with contextlib.suppress(OSError):
                    os.unlink(final)  # new file of the killed run, nothing before it
    for rel in names + list(journal.get("removed", [])):
        bak = d / _BACKUP / rel
        if bak.exists() or bak.is_symlink():
            with contextlib.suppress(OSError):
                _move(bak, out / rel)
                back.append(rel)
    return back


# ---------------------------------------------------------------------------- the command


@contextlib.contextmanager
def reserve_folder(out_dir, command: str = ""):
    """Create ``out_dir`` if needed and hold its lock for the ``with`` block.

    A run killed during an earlier commit into the folder is undone first (said on stderr).
    When the block fails and the folder was created here and is empty, it is removed again,
    so a refused or failed run leaves nothing behind.

    Raises
    ------
    InputError
        ``out_dir`` is a file.
    OutputError
        The folder cannot be created or locked, or another run holds it.
    """
    out = Path(out_dir)
    if out.exists() and not out.is_dir():
        raise InputError("expected a folder for --out, found a file", path=str(out))
    created = not out.exists()
    try:
        out.mkdir(parents=True, exist_ok=True)
    except OSError as exc:
        raise OutputError.from_os_error(exc, out, "cannot create the output folder") from None
    ok = False
    try:
        with folder_lock(out, command):
            back = recover_interrupted(out)
            if back:
                print(
                    f"kkcheck: {out}: a previous run was killed while replacing its results; "
                    f"put back the files before it ({len(back)})",
                    file=sys.stderr,
                )
            yield out
            ok = True
    finally:
        if created and not ok:
            with contextlib.suppress(OSError):
                out.rmdir()  # only if empty


@contextlib.contextmanager
def staged_outputs(out_dir, inputs=(), *, overwrite: bool = False, command: str = "", extra=None):
    """Write into the yielded staging folder; on a clean exit, check everything and commit.

    Every file the block writes into the staging folder (any depth) is one output. On exit
    the plan is checked (:func:`plan_outputs`) and only then committed; on any failure or
    refusal the staging folder is removed and the output folder is as before.

    Parameters
    ----------
    out_dir : path
        Output folder (created; locked for the block).
    inputs : iterable of path
        The run's input files (never written; their sha256 is recorded in the manifest).
    overwrite : bool
        Replace existing files kkcheck did not write.
    command : str
        Recorded in the lock and the manifest.
    extra : dict, optional
        Further keys for the manifest (e.g. a batch row).
    """
    with reserve_folder(out_dir, command) as out:
        st = _Staging(out)
        try:
            yield st.dir
            plan = plan_outputs(out, st.names(), inputs, overwrite=overwrite)
            manifest = _manifest(st, plan, inputs, command, extra)
            _commit(st, plan, manifest)
        finally:
            shutil.rmtree(st.dir, ignore_errors=True)


def _manifest(st: _Staging, plan: OutputPlan, inputs, command: str, extra) -> dict:
    from .io.write import sha256_file

    ins = {}
    for q in inputs:
        with contextlib.suppress(OSError):
            ins[str(q)] = sha256_file(q)
    return {
        "schema": _MANIFEST_SCHEMA,
        "kkcheck": __version__,
        "command": command,
        "written_utc": time.strftime("%Y-%m-%dT%H:%M:%SZ", time.gmtime()),
        "complete": True,
        "inputs": ins,
        "files": {rel: _sha256(st.dir / rel) for rel in plan.names if rel != MANIFEST_NAME},
        **(extra or {}),
    }


def _write_files(result: JobResult, out: Path, protect, command: str) -> None:
    """Every output of ``result`` into ``out`` (the staging folder)."""
    from .io import write_json, write_table_csv, write_text
    from .io.write import spreadsheet_safe

    prov = [f"options: {result.options.as_dict()}"]  # version and digests: from the writer
    write_json(out / "summary.json", result.summary, overwrite_protect=protect)
    write_table_csv(
        out / "cleaned.csv",
        result.clean.spectrum,
        provenance_lines=prov + ["merged and flagged (flags: bit mask, see kkcheck.spectrum.Flag)"],
        overwrite_protect=protect,
    )
    model_doc = result.model_json
    if model_doc is not None:
        from .rational.io import parameter_table

        # only a certified passive, stable model is written as "the fit" (model.json); the
        # best candidate otherwise goes under a name that says what it is
        good = bool(result.fit.passivity.certified and result.fit.stable)
        name = "model.json" if good else "model_uncertified.json"
        write_json(out / name, model_doc, overwrite_protect=protect)
        txt = out / "model_parameters.txt"
        write_text(txt, parameter_table(result.fit.model), overwrite_protect=protect)
    if result.repair is not None:
        _write_repaired(result, out, prov, protect)
        from .changes import change_record, record_frame

        changes = record_frame(change_record(result))
        for c in changes.columns:
            if changes[c].dtype == object:
                changes[c] = changes[c].map(spreadsheet_safe)
        text = (
            f"# kkcheck {__version__}: every value of repaired.csv that differs from the input "
            "as read (kkcheck.changes.change_record), with the stage(s) and reason(s)\n"
            "# reason: scale_offset / blend (merge), level (step levelling), binned, spike / "
            "step / kk_region / model (replaced by the KK-consistent prediction), fill (gap), "
            "combined (several measurements at one energy); old is nan for added points, new "
            "is nan for points folded into a bin\n"
            + changes.to_csv(index=False, lineterminator="\n")
        )
        write_text(out / "repair_changes.csv", text, overwrite_protect=protect)
    if result.options.html:
        from .report.assemble import write_report

        write_report(result, out, command=command)


def write_outputs(
    result: JobResult,
    out_dir,
    *,
    command: str = "",
    overwrite: bool | None = None,
    extra: dict | None = None,
) -> JobResult:
    """Write summary.json, tables, model.json, and (when asked) the report into ``out_dir``.

    Plan, check, then write (see the module docstring): nothing under a final name is written
    unless every target passed the checks. ``overwrite`` (default: as set by
    :func:`overwriting`, else False) replaces existing files kkcheck did not write.
    ``extra`` adds keys to the folder's manifest (the batch records its row there).

    Raises
    ------
    OutputError
        A target is refused (an input, a symlink out of the folder, a file kkcheck did not
        write without ``overwrite``), another run holds the folder, or the file system
        refused (no permission, read-only, disk full, path too long).
    """
    protect = [d.provenance.path for d in result.datasets if d.provenance.path]
    overwrite = _OVERWRITE.get() if overwrite is None else overwrite
    with staged_outputs(
        out_dir, protect, overwrite=overwrite, command=command, extra=extra
    ) as stage:
        _write_files(result, stage, protect, command)
    out = Path(out_dir)
    names = [n for n in _last_plan_names(out) if n != MANIFEST_NAME]
    return dataclasses.replace(result, out_dir=out, files=tuple(out / n for n in names))


def _last_plan_names(out: Path) -> list[str]:
    return sorted(read_manifest(out).get("files", {}))


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
