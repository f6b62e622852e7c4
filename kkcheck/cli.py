"""The ``kkcheck`` command line: a thin layer over :mod:`kkcheck.pipeline`.

Every subcommand exits 0 when the analysis ran, whatever it found; 2 on unusable input with
one line on stderr (``kkcheck: <file>:<line>: <what was expected>``); 4 when the output folder
cannot take the results or a target is refused (``kkcheck: <path>: <cause>``); 3 on an internal
error; 130 when interrupted. ``--debug`` shows the traceback instead. With
``--fail-on-inconsistent``, ``check``/``fit``/``run``/``demo`` exit 1 when the KK verdict is not
"consistent" (for a lab's CI on data files). No command: usage on stderr, exit 2.

Results go to stdout (the terminal summary, or summary.json with ``--json``); progress,
warnings and errors go to stderr. Progress shows only when stderr is a terminal and not with
``--quiet``.
"""

from __future__ import annotations

import argparse
import json
import sys

from ._version import __version__
from .errors import OUTPUT_ERROR_EXIT, InputError, OutputError

__all__ = ["main", "build_parser"]

_AXES = ("energy_ev", "wavelength_nm", "wavelength_um", "wavenumber_cm-1", "frequency_thz")
_AXES_OUT = (*_AXES, "angular_frequency_rad_s")

_EPILOG = """\
examples:
  kkcheck demo                                   run the whole job on the bundled demo data
  kkcheck check a.csv b.tsv --out results/       read, merge, clean, KK test -> summary.json
  kkcheck fit a.csv b.tsv --out results/ --pairs 4   ... and fit a pole-pair model -> model.json
  kkcheck run job.toml                           the whole job from a config file, with report
  kkcheck batch folder/ --out index/             vet every dataset in a folder in parallel

conventions: photon energy in eV inside; time dependence exp(-i w t); eps = (n + i k)^2,
eps2 >= 0 for passive media. Tables in the exp(+i w t) convention are detected, converted
and reported.
"""


def _add_input_options(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "inputs", nargs="+", metavar="FILE", help="tables of n,k or eps1,eps2 ('-': stdin)"
    )
    p.add_argument("--out", "-o", required=True, metavar="DIR", help="folder for the results")
    p.add_argument(
        "--range",
        metavar="LO:HI[UNIT]",
        help="analyse only points inside this window, in any axis unit: 400:1000nm, 0.5:4eV, "
        "2000:8000cm-1, 10:300THz (no unit: eV)",
    )
    p.add_argument(
        "--axis-out",
        choices=_AXES_OUT,
        metavar="UNIT",
        help="axis unit of the extra repaired table repaired_<UNIT>.csv (default: the first "
        f"input's unit; one of {', '.join(_AXES_OUT)})",
    )
    _add_result_options(p)
    g = p.add_argument_group("reading")
    g.add_argument(
        "--axis",
        choices=_AXES,
        help="axis unit for files whose header does not name it (or that have no header)",
    )
    g.add_argument(
        "--quantity",
        choices=("nk", "eps", "n", "R"),
        help="value columns for files without a header (n: a table of n only, k = 0; "
        "R: normal-incidence reflectance, n,k retrieved by a KK phase)",
    )
    g.add_argument(
        "--columns",
        type=parse_columns,
        metavar="ROLE=COL,...",
        help="which column holds what, by 1-based number or header name, e.g. "
        "axis=1,n=2,k=3 or 'axis=Wavelength (nm),n=n,k=k'; other columns are left unused",
    )
    g.add_argument(
        "--convention",
        choices=("auto", "exp(-iwt)", "exp(+iwt)"),
        default="auto",
        help="time-dependence convention of the files (default: detect from the sign of k/eps2)",
    )
    g = p.add_argument_group("merging and cleaning")
    g.add_argument("--reference", metavar="NAME", help="source the others are scaled to")
    g.add_argument(
        "--no-correction",
        action="store_true",
        help="report scale/offset between sources but do not apply them",
    )
    g.add_argument(
        "--force-correction",
        action="store_true",
        help="apply every usable scale/offset, even one larger than 10 %% or one the overlap "
        "does not determine (each is a warning)",
    )
    g.add_argument(
        "--overlap",
        choices=("side_by_side", "blend"),
        default="side_by_side",
        help="overlapping sources: side_by_side (default: every point kept with its source "
        "label) or blend (inverse-variance average onto one grid)",
    )
    g.add_argument(
        "--flagged",
        choices=("keep", "downweight", "replace"),
        default="replace",
        help="flagged spikes/steps: keep (flags only), downweight (10x sigma in the KK test "
        "and fit), replace (default: downweight in the KK test, then replace by the "
        "KK-consistent prediction before the fit; every change recorded)",
    )
    g.add_argument(
        "--steps",
        choices=("level", "keep"),
        default="level",
        help="detector-changeover steps: level (default: shift one side to meet the other "
        "before the KK test, reported) or keep (flag only)",
    )
    g = p.add_argument_group("Kramers-Kronig test")
    g.add_argument(
        "--anchor",
        type=float,
        action="append",
        metavar="EV",
        help="energy [eV] where eps1 is trusted most: its sigma is cut 10x in the KK test "
        "and the MSKK view is pinned there (repeatable)",
    )
    g.add_argument(
        "--tolerance",
        type=float,
        metavar="FRACTION",
        help="inconsistencies smaller than this fraction of |eps| (default 0.01 = 1 %%) do "
        "not make the verdict inconsistent, however significant",
    )
    g.add_argument(
        "--no-mskk",
        action="store_true",
        help="skip the multiply subtractive KK view reported beside the verdict",
    )
    _add_common(p)
    _add_overwrite(p)


def _add_common(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--quiet", "-q", action="store_true", help="print nothing but errors (no progress)"
    )
    p.add_argument("--debug", action="store_true", help="show tracebacks of errors")


def _add_result_options(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--json",
        action="store_true",
        help="print summary.json on stdout instead of the text summary",
    )
    p.add_argument(
        "--fail-on-inconsistent",
        action="store_true",
        help="exit 1 when the KK verdict is not 'consistent' (default: exit 0 whatever it is)",
    )


def _add_overwrite(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--overwrite",
        action="store_true",
        help="replace files in the output folder that kkcheck did not write (inputs are "
        "never replaced)",
    )


def _add_fit_options(p: argparse.ArgumentParser) -> None:
    g = p.add_argument_group("model fit")
    x = g.add_mutually_exclusive_group()
    x.add_argument("--pairs", type=int, metavar="N", help="number of pole pairs (default: auto)")
    x.add_argument(
        "--tol",
        type=float,
        metavar="X",
        help="fewest pairs whose rms relative error is below X (default: the noise floor)",
    )
    g.add_argument(
        "--thickness-nm",
        type=float,
        metavar="NM",
        default=100.0,
        help="film thickness [nm] for the slab check of the fit (default: 100)",
    )
    g.add_argument(
        "--slab-tolerance",
        type=float,
        metavar="X",
        help="fit for the film: fewest pairs whose R and T stay within X of the data's",
    )
    g.add_argument(
        "--substrate-n", type=float, metavar="N", help="film on a thick substrate of index N"
    )
    g.add_argument("--incoherent", action="store_true", help="the film is incoherent (no fringes)")
    g.add_argument(
        "--frequency-unit",
        choices=("eV", "rad/s"),
        default="eV",
        help="unit of poles and residues in model.json (default: eV)",
    )


def build_parser() -> argparse.ArgumentParser:
    """The argument parser (exposed for documentation and tests)."""
    p = argparse.ArgumentParser(
        prog="kkcheck",
        description=(
            "Vet optical-constant data: merge sources, flag spikes and steps, test "
            "Kramers-Kronig consistency, repair, and fit a passive pole-pair model."
        ),
        epilog=_EPILOG,
        formatter_class=argparse.RawDescriptionHelpFormatter,
    )
    p.add_argument("--version", action="version", version=f"kkcheck {__version__}")
    sub = p.add_subparsers(dest="command", metavar="COMMAND")

    c = sub.add_parser(
        "check",
        help="read, merge, clean and KK-test; write summary.json",
        description="Read, merge and clean the inputs and run the Kramers-Kronig test. "
        "Writes DIR/summary.json and a cleaned table. Exit 0 whatever the verdict.",
    )
    _add_input_options(c)

    f = sub.add_parser(
        "fit",
        help="check, repair and fit a pole-pair model; write model.json",
        description="Everything 'check' does, then repair the data and fit a passive, stable "
        "pole-pair model. Writes DIR/summary.json, DIR/model.json and the repaired table.",
    )
    _add_input_options(f)
    _add_fit_options(f)
    f.add_argument("--report", action="store_true", help="also write the HTML report")

    r = sub.add_parser(
        "run",
        help="the whole job from a TOML config file, with report",
        description="Run the whole job (check, repair, fit, slab check, report) as a TOML "
        "config file describes. README.md lists the keys.",
    )
    r.add_argument("config", metavar="CONFIG", help="TOML file")
    r.add_argument("--out", "-o", metavar="DIR", help="overrides the config's output folder")
    _add_result_options(r)
    _add_common(r)
    _add_overwrite(r)
    r.add_argument(
        "--allow-outside",
        action="store_true",
        help="let the config read or write paths outside its own folder (each is reported)",
    )

    d = sub.add_parser(
        "demo",
        help="run the whole job on the bundled demo data",
        description="Run the whole job on the demo data shipped with kkcheck (an invented "
        "material measured by fictional instruments) and write the report to ./kkcheck-demo.",
    )
    x = d.add_mutually_exclusive_group()
    x.add_argument("--out", "-o", metavar="DIR", help="output folder (default: ./kkcheck-demo)")
    x.add_argument(
        "--refresh-committed",
        action="store_true",
        help="rewrite the committed example report reports/demo of a source checkout "
        "(maintainers only)",
    )
    _add_result_options(d)
    _add_common(d)
    _add_overwrite(d)

    b = sub.add_parser(
        "batch",
        help="vet every dataset in a folder in parallel",
        description="Vet every table (or TOML config) in a folder, in parallel, and write an "
        "index (HTML and CSV) of verdicts. A bad file is reported and does not stop the others.",
    )
    b.add_argument("folder", metavar="DIR", help="folder of tables and/or TOML configs")
    b.add_argument(
        "--out", "-o", required=True, metavar="DIR", help="folder for index.html and index.csv"
    )
    b.add_argument("--jobs", "-j", type=int, default=0, help="local processes (default: cores)")
    b.add_argument(
        "--engine",
        choices=("local", "dask"),
        default="local",
        help="local processes (default) or a Dask cluster",
    )
    b.add_argument("--scheduler", metavar="ADDRESS", help="Dask scheduler address")
    b.add_argument("--fit", action="store_true", help="also fit a model for each dataset")
    b.add_argument(
        "--resume",
        action="store_true",
        help="skip datasets whose outputs are complete and match their input's sha256",
    )
    _add_common(b)
    _add_overwrite(b)
    return p


def parse_columns(text: str) -> dict:
    """``--columns axis=1,n=2,k=3`` -> {"axis": 1, "n": 2, "k": 3} (numbers as int, names as
    text; roles are checked by the reader, :mod:`kkcheck.io.select`)."""
    out: dict = {}
    for part in text.split(","):
        role, eq, col = part.partition("=")
        if not eq or not role.strip() or not col.strip():
            raise argparse.ArgumentTypeError(
                f"expected ROLE=COLUMN pairs separated by commas (e.g. axis=1,n=2,k=3), "
                f"got {part.strip()!r}"
            )
        col = col.strip()
        out[role.strip()] = int(col) if col.isdigit() else col
    return out


def _inputs_from_args(args) -> list:
    """The input files, as entries with their column mapping when --columns is given."""
    columns = getattr(args, "columns", None)
    if not columns:
        return list(args.inputs)
    keep = {k: getattr(args, k) for k in ("axis", "quantity", "convention") if getattr(args, k)}
    return [{"path": p, "columns": columns, **keep} for p in args.inputs]


def _options_from_args(args) -> dict:
    keys = (
        "axis",
        "quantity",
        "convention",
        "reference",
        "overlap",
        "flagged",
        "steps",
        "anchor",
        "tolerance",
        "pairs",
        "tol",
        "thickness_nm",
        "slab_tolerance",
        "substrate_n",
        "frequency_unit",
    )
    opts = {k: getattr(args, k) for k in keys if getattr(args, k, None) is not None}
    if getattr(args, "no_mskk", False):
        opts["mskk"] = False
    if getattr(args, "incoherent", False):
        opts["coherent"] = False
    if getattr(args, "no_correction", False):
        opts["correct"] = False
    if getattr(args, "force_correction", False):
        opts["correct"] = "force"
    if "anchor" in opts:
        opts["anchors_ev"] = tuple(opts.pop("anchor"))
    if getattr(args, "range", None):
        from .api import parse_range

        opts["range_ev"] = parse_range(args.range)
    if getattr(args, "axis_out", None):
        opts["axis_out"] = args.axis_out
    return opts


def _show(res, args) -> int:
    """Print the result (text or JSON on stdout, warnings on stderr); the exit code."""
    quiet = getattr(args, "quiet", False)
    if getattr(args, "json", False):
        print(json.dumps(res.summary, indent=2, allow_nan=False))
    elif not quiet:
        print(res.text_summary(warnings=False))
    if not quiet:
        for w in res.warnings:
            print(f"kkcheck: warning: {w}", file=sys.stderr)
    if getattr(args, "fail_on_inconsistent", False) and res.kk.verdict != "consistent":
        return 1
    return 0


def _dispatch(args) -> int:
    """Run the command, holding its output folder's lock throughout (when --out is given)."""
    import contextlib

    from .outputs import overwriting, reserve_folder

    out = getattr(args, "out", None)
    command = f"kkcheck {args.command}"
    held = reserve_folder(out, command) if out is not None else contextlib.nullcontext()
    from .job import ALLOW_OUTSIDE

    token = ALLOW_OUTSIDE.set(bool(getattr(args, "allow_outside", False)))
    try:
        with overwriting(getattr(args, "overwrite", False)), held:
            return _run_command(args)
    finally:
        ALLOW_OUTSIDE.reset(token)


def _run_command(args) -> int:
    from . import pipeline

    quiet = getattr(args, "quiet", False)
    say = (lambda s: None) if quiet else (lambda s: print(s))
    if args.command == "check":
        opts = _options_from_args(args)
        res = pipeline.check(_inputs_from_args(args), out_dir=args.out, progress=not quiet, **opts)
        return _show(res, args)
    if args.command == "fit":
        opts = _options_from_args(args)
        res = pipeline.fit(
            _inputs_from_args(args),
            out_dir=args.out,
            report=args.report,
            progress=not quiet,
            **opts,
        )
        return _show(res, args)
    if args.command == "run":
        return _show(pipeline.run(args.config, out_dir=args.out, progress=not quiet), args)
    if args.command == "demo":
        res = pipeline.demo(
            out_dir=args.out, progress=not quiet, refresh_committed=args.refresh_committed
        )
        return _show(res, args)
    if args.command == "batch":
        from . import batch

        res = batch.run_batch(
            args.folder,
            args.out,
            jobs=args.jobs,
            engine=args.engine,
            scheduler=args.scheduler,
            fit=args.fit,
            progress=not quiet,
            overwrite=args.overwrite,
            resume=args.resume,
        )
        say(res.text_summary())
    return 0


def _one_line_warning(message, category, filename, lineno, file=None, line=None) -> None:
    """Show a warning as ``kkcheck: warning: <message>`` (no file path, no source line)."""
    text = " ".join(str(message).split())
    print(f"kkcheck: warning: {text}", file=file if file is not None else sys.stderr)


def main(argv=None) -> int:
    """Entry point of the ``kkcheck`` console script; returns the exit code."""
    import warnings

    # One BLAS thread: set when the kkcheck package is imported (kkcheck/__init__.py), before
    # numpy loads, for the command line and the Python API alike.
    warnings.showwarning = _one_line_warning
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_usage(sys.stderr)
        print("kkcheck: error: a command is required (kkcheck --help lists them)", file=sys.stderr)
        return 2
    debug = getattr(args, "debug", False)
    try:
        return _dispatch(args)
    except InputError as exc:
        if debug:
            raise
        print(f"kkcheck: {exc.one_line()}", file=sys.stderr)
        return 2
    except (OutputError, OSError) as exc:  # the output folder or the file system
        if debug:
            raise
        err = exc if isinstance(exc, OutputError) else OutputError.from_os_error(exc)
        print(f"kkcheck: {err.one_line()}", file=sys.stderr)
        return OUTPUT_ERROR_EXIT
    except KeyboardInterrupt:
        print("kkcheck: interrupted", file=sys.stderr)
        return 130
    except Exception as exc:  # an internal error: one line, ask for --debug
        if debug:
            raise
        first = " ".join(str(exc).split()) or type(exc).__name__
        print(
            f"kkcheck: internal error ({type(exc).__name__}: {first}); "
            "rerun with --debug for the traceback",
            file=sys.stderr,
        )
        return 3


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
