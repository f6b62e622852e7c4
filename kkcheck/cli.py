"""The ``kkcheck`` command line: a thin layer over :mod:`kkcheck.pipeline`.

Every subcommand exits 0 when the analysis ran, whatever it found; 2 on unusable input with
one line on stderr (``kkcheck: <file>:<line>: <what was expected>``); ``--debug`` shows the
traceback instead.
"""

from __future__ import annotations

import argparse
import os
import sys

from ._version import __version__
from .errors import InputError

__all__ = ["main", "build_parser"]

_AXES = ("energy_ev", "wavelength_nm", "wavelength_um", "wavenumber_cm-1", "frequency_thz")

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
    p.add_argument("inputs", nargs="+", metavar="FILE", help="tables of n,k or eps1,eps2")
    p.add_argument("--out", "-o", required=True, metavar="DIR", help="folder for the results")
    g = p.add_argument_group("reading")
    g.add_argument(
        "--axis",
        choices=_AXES,
        help="axis unit for files whose header does not name it (or that have no header)",
    )
    g.add_argument(
        "--quantity", choices=("nk", "eps"), help="value columns for files without a header"
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
        "(repeatable)",
    )
    p.add_argument("--quiet", "-q", action="store_true", help="print nothing but errors")
    p.add_argument("--debug", action="store_true", help="show tracebacks")


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
    r.add_argument("--quiet", "-q", action="store_true")
    r.add_argument("--debug", action="store_true")

    d = sub.add_parser(
        "demo",
        help="run the whole job on the bundled demo data",
        description="Run the whole job on reference_data/demo (an invented material measured "
        "by three fictional instruments) and write the report.",
    )
    d.add_argument("--out", "-o", metavar="DIR", help="output folder (default: reports/demo)")
    d.add_argument("--quiet", "-q", action="store_true")
    d.add_argument("--debug", action="store_true")

    b = sub.add_parser(
        "batch",
        help="vet every dataset in a folder in parallel",
        description="Vet every table (or TOML config) in a folder, in parallel, and write an "
        "index (HTML and CSV) of verdicts. A bad file is reported and does not stop the others.",
    )
    b.add_argument("folder", metavar="DIR")
    b.add_argument("--out", "-o", required=True, metavar="DIR")
    b.add_argument("--jobs", "-j", type=int, default=0, help="local processes (default: cores)")
    b.add_argument("--engine", choices=("local", "dask"), default="local")
    b.add_argument("--scheduler", metavar="ADDRESS", help="Dask scheduler address")
    b.add_argument("--fit", action="store_true", help="also fit a model for each dataset")
    b.add_argument("--quiet", "-q", action="store_true")
    b.add_argument("--debug", action="store_true")
    return p


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
        "pairs",
        "tol",
        "thickness_nm",
        "frequency_unit",
    )
    opts = {k: getattr(args, k) for k in keys if getattr(args, k, None) is not None}
    if getattr(args, "no_correction", False):
        opts["correct"] = False
    if getattr(args, "force_correction", False):
        opts["correct"] = "force"
    if "anchor" in opts:
        opts["anchors_ev"] = tuple(opts.pop("anchor"))
    return opts


def _dispatch(args) -> int:
    from . import pipeline

    quiet = getattr(args, "quiet", False)
    say = (lambda s: None) if quiet else (lambda s: print(s))
    if args.command == "check":
        res = pipeline.check(args.inputs, out_dir=args.out, **_options_from_args(args))
        say(res.text_summary())
    elif args.command == "fit":
        res = pipeline.fit(
            args.inputs, out_dir=args.out, report=args.report, **_options_from_args(args)
        )
        say(res.text_summary())
    elif args.command == "run":
        res = pipeline.run(args.config, out_dir=args.out, progress=not quiet)
        say(res.text_summary())
    elif args.command == "demo":
        res = pipeline.demo(out_dir=args.out, progress=not quiet)
        say(res.text_summary())
    elif args.command == "batch":
        from . import batch

        res = batch.run_batch(
            args.folder,
            args.out,
            jobs=args.jobs,
            engine=args.engine,
            scheduler=args.scheduler,
            fit=args.fit,
            progress=not quiet,
        )
        say(res.text_summary())
    return 0


def _single_threaded_blas() -> None:
    """One BLAS thread per process unless the user chose otherwise.

    The stages solve many small dense problems; threaded BLAS on them mostly contends with
    itself (and with batch workers), measured 5x slower per QR under load.
    """
    for var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
        os.environ.setdefault(var, "1")


def main(argv=None) -> int:
    """Entry point of the ``kkcheck`` console script; returns the exit code."""
    _single_threaded_blas()
    parser = build_parser()
    args = parser.parse_args(argv)
    if args.command is None:
        parser.print_help()
        return 0
    debug = getattr(args, "debug", False)
    try:
        return _dispatch(args)
    except InputError as exc:
        if debug:
            raise
        print(f"kkcheck: {exc.one_line()}", file=sys.stderr)
        return 2
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
