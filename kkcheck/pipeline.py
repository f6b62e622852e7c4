"""The whole job, stage by stage: read, merge, clean, KK test, sum rules, repair, fit, slab.

This module only chains the stages: each is one call with plain values, and every numerical
decision (noise floors, weights, duplicate energies, which steps are levelled, the slab window,
which points the fit sees) belongs to the stage that makes it. :func:`analyse` is the pure part
(no files written); :func:`kkcheck.outputs.write_outputs` writes; the public entry points
:func:`check`, :func:`fit`, :func:`run` and :func:`demo` combine both. The job file and the
options are described in :mod:`kkcheck.job`; the result type is :class:`kkcheck.result.JobResult`.

Data flow::

    read_table ─> merge ─> clean ─> level_steps_if_better ─> bin_spectrum ─> kk_test
       (io)      (merge)   (clean)        (clean.steps)        (kk.binning)    (kk)
                   └─ rank_references (KK score of each trial merge)
    kk_test ─> spectrum_sum_rules ─> repair ─> fit_points ─> fit_pole_pairs ─> compare_slab_over
                (kk.sumrules)        (repair)  (rational.data)  (rational)        (slab)
    summary.json <─ report.summary.build_summary (each stage result's to_dict())
"""

from __future__ import annotations

import dataclasses
import sys
import time
import warnings
from collections.abc import Callable, Sequence
from pathlib import Path

from .errors import InputError
from .job import InputSpec, JobOptions, job_options, load_config
from .noise import MIN_POINTS
from .outputs import write_outputs
from .result import JobResult
from .spectrum import Dataset, Spectrum

__all__ = [
    "InputSpec",
    "JobOptions",
    "JobResult",
    "read_inputs",
    "analyse",
    "write_outputs",
    "check",
    "fit",
    "run",
    "demo",
    "load_config",
    "run_job",
]


# ------------------------------------------------------------------------------------ reading


def read_inputs(specs: Sequence[InputSpec], options: JobOptions | None = None) -> tuple:
    """Read every input (first error stops, naming the file and line); see
    :func:`kkcheck.api.read_any`, which this is with the specs already made."""
    from .api import read_any

    return read_any(list(specs), options)[1]


# ----------------------------------------------------------------------------------- analysis


class _Progress:
    """Stage messages on stderr when it is a terminal (silent otherwise or with quiet)."""

    def __init__(self, enabled: bool):
        self.enabled = enabled and sys.stderr.isatty()
        self.t0 = time.perf_counter()

    def __call__(self, stage: str) -> None:
        if self.enabled:
            dt = time.perf_counter() - self.t0
            print(f"\r[{dt:6.1f} s] {stage:<40}", end="", file=sys.stderr, flush=True)

    def done(self) -> None:
        if self.enabled:
            print("\r" + " " * 52 + "\r", end="", file=sys.stderr, flush=True)


def _kk_tester(options: JobOptions):
    """The KK test as the job runs it, as a function of a spectrum: binned first (the dense fit
    is M^2 in memory), with the job's anchors and flag policy."""
    from .kk.binning import bin_spectrum
    from .kk.consistency import KKTestOptions, kk_test

    kk_opts = KKTestOptions(
        flagged_sigma_factor=options.flag_policy.kk_sigma_factor, tolerance=options.tolerance
    )
    anchors = options.anchors_ev or None

    def test(spectrum: Spectrum):
        binned, _ = bin_spectrum(spectrum, options.max_points)
        return kk_test(binned, anchors_ev=anchors, options=kk_opts)

    return test, kk_opts


def _kk_score(options: JobOptions) -> Callable[[Spectrum], float]:
    """KK chi2/dof of a trial merge (for the source ranking): cleaned, binned, tested."""
    from .clean import clean
    from .kk.binning import bin_spectrum
    from .kk.consistency import kk_test

    _, kk_opts = _kk_tester(options)

    def score(spectrum: Spectrum) -> float:
        binned, _ = bin_spectrum(clean(spectrum, policy="keep").spectrum, options.max_points)
        return float(kk_test(binned, options=kk_opts).chi2_dof)

    return score


def _check_size(datasets: Sequence[Dataset]) -> None:
    total = sum(len(d) for d in datasets)
    if total < MIN_POINTS:
        where = ", ".join(d.provenance.path or d.name for d in datasets)
        raise InputError(
            f"{total} data points in all; the Kramers-Kronig test needs at least {MIN_POINTS}",
            path=where,
        )


def _reflectance_stage(inputs, options: JobOptions, say):
    """Reflectance tables -> n,k Datasets (KK phase), anchored on the other sources merged."""
    from .io.reflectance import ReflectanceTable
    from .merge import merge
    from .reflectance import retrieve_table

    tables = [d for d in inputs if isinstance(d, ReflectanceTable)]
    if not tables:
        return tuple(inputs), ()
    say("reflectance phase")
    others = [d for d in inputs if not isinstance(d, ReflectanceTable)]
    spectrum = None
    if others:
        spectrum = merge(
            others, reference=options.reference, correct=options.correct, overlap=options.overlap
        ).spectrum
    label = "the merge of " + ", ".join(d.name for d in others) if others else ""
    out, results = [], []
    for d in inputs:
        if isinstance(d, ReflectanceTable):
            ds, res = retrieve_table(d, spectrum, label)
            out.append(ds)
            results.append(res)
        else:
            out.append(d)
    return tuple(out), tuple(results)


def _mskk_stage(analysed: Spectrum, kk, options: JobOptions, say):
    """The MSKK view beside the basis-fit verdict (None when ``options.mskk`` is off)."""
    if not options.mskk:
        return None
    from .kk.mskk import mskk_view

    say("MSKK view")
    try:
        return mskk_view(analysed, kk, anchors_ev=options.anchors_ev or None)
    except InputError as exc:  # a view beside the verdict: its failure is said, not fatal
        warnings.warn(f"no MSKK view: {exc.message}", RuntimeWarning, stacklevel=2)
        return None


def _merge_stage(datasets, options: JobOptions, say):
    from .merge import cannot_tell, merge, rank_references, ranking_note

    say("merging sources")
    score = _kk_score(options) if len(datasets) > 1 else None
    merged = merge(
        datasets,
        reference=options.reference,
        correct=options.correct,
        overlap=options.overlap,
        max_correction=options.max_correction,
        kk_score=score,
    )
    ranking = None
    if options.rank_sources and len(datasets) > 1 and options.correct:
        say("ranking sources by KK consistency")
        ranking = rank_references(datasets, score, overlap=options.overlap)
        if cannot_tell(ranking):
            warnings.warn(ranking_note(ranking), RuntimeWarning, stacklevel=2)
    return merged, ranking


def _clean_stage(spectrum: Spectrum, options: JobOptions, say):
    """Flags, then (with steps="level") each step levelled on trial; then the KK test."""
    from .clean import clean, level_steps_if_better
    from .kk.binning import bin_spectrum
    from .kk.consistency import kk_test

    say("finding spikes, steps and noise")
    cleaned = clean(spectrum, policy="keep")
    test, kk_opts = _kk_tester(options)
    corrections: tuple = ()
    kk = None
    steps = [o for o in cleaned.outliers if o.kind == "step"]
    if options.steps == "level" and steps:
        say("levelling steps")
        levelled, corrections, kk = level_steps_if_better(cleaned.spectrum, steps, test)
        cleaned = dataclasses.replace(cleaned, spectrum=levelled)
    analysed, binning = bin_spectrum(cleaned.spectrum, options.max_points)
    if kk is None:
        say("Kramers-Kronig test")
        kk = kk_test(analysed, anchors_ev=options.anchors_ev or None, options=kk_opts)
    return cleaned, corrections, analysed, binning, kk


def _fit_stage(analysed: Spectrum, kk, options: JobOptions, say):
    from .rational import fit_pole_pairs
    from .rational.data import fit_points
    from .repair import repair
    from .slab import FilmSpec, compare_slab_over

    say("repairing")
    repaired = repair(analysed, kk, policy=options.flag_policy.repair_choice)
    say("fitting pole pairs")
    pts = fit_points(repaired, kk.regions, options.flag_policy)
    film = FilmSpec(options.thickness_nm, options.substrate_n, options.coherent)
    fitted = fit_pole_pairs(
        pts.energy_ev,
        pts.eps,
        pts.sigma_eps1,
        pts.sigma_eps2,
        pairs=options.pairs,
        tol=options.tol,
        chi2_target=options.chi2_target,
        film=film if options.slab_tolerance is not None else None,
        slab_tolerance=options.slab_tolerance or 0.01,
    )
    say("slab check")
    slab = compare_slab_over(
        fitted.range_ev, repaired.energy_ev, repaired.eps, fitted.model, film=film
    )
    return repaired, fitted, slab


def analyse(
    datasets: Sequence[Dataset],
    options: JobOptions | None = None,
    *,
    progress: Callable[[str], None] | None = None,
) -> JobResult:
    """Run every stage on datasets already read; write nothing.

    Returns a :class:`JobResult` whose ``summary`` (and ``model`` when fitted) are the JSON
    documents of the contract.
    """
    from .kk.sumrules import spectrum_sum_rules
    from .report.summary import build_summary

    options = options if options is not None else JobOptions()
    say = progress or (lambda s: None)
    t0 = time.perf_counter()
    repaired = fitted = slab = None
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        datasets, reflectance = _reflectance_stage(datasets, options, say)
        _check_size(datasets)
        merged, ranking = _merge_stage(datasets, options, say)
        cleaned, steps, analysed, binning, kk = _clean_stage(merged.spectrum, options, say)
        mskk = _mskk_stage(analysed, kk, options, say)
        say("sum rules")
        rules = spectrum_sum_rules(analysed)
        if options.do_fit:
            repaired, fitted, slab = _fit_stage(analysed, kk, options, say)
    msgs = tuple(dict.fromkeys(f"{w.category.__name__}: {w.message}" for w in caught))
    result = JobResult(
        options=options,
        inputs=(),
        datasets=tuple(datasets),
        merge=merged,
        ranking=ranking,
        clean=cleaned,
        steps=steps,
        analysed=analysed,
        binning=binning,
        kk=kk,
        sum_rules=rules,
        repair=repaired,
        fit=fitted,
        slab=slab,
        warnings=msgs,
        seconds=time.perf_counter() - t0,
        mskk=mskk,
        reflectance=reflectance,
    )
    model = None
    if fitted is not None:
        from .rational.io import model_to_dict

        model = model_to_dict(fitted, frequency_unit=options.frequency_unit)
    return dataclasses.replace(result, summary=build_summary(result), model_json=model)


# ------------------------------------------------------------------------------- entry points


def run_job(
    inputs, out_dir, options: JobOptions, progress: bool = False, command: str = ""
) -> JobResult:
    """Read ``inputs``, run every stage ``options`` asks for, write to ``out_dir`` if given.

    The common core of :func:`check`, :func:`fit`, :func:`run` and :func:`demo` (and of a
    batch item); ``inputs`` are paths or ``{"path", "axis", "quantity", "name",
    "convention"}`` dicts.
    """
    from .api import one_blas_thread, read_any

    bar = _Progress(progress)
    bar("reading")
    with one_blas_thread():
        specs, datasets = read_any(inputs, options)
        result = analyse(datasets, options, progress=bar)
        result = dataclasses.replace(result, inputs=specs)
        if out_dir is not None:
            bar("writing outputs")
            result = write_outputs(result, out_dir, command=command)
    bar.done()
    return result


def check(inputs, out_dir=None, *, progress: bool = False, **options) -> JobResult:
    """Read, merge, clean and KK-test ``inputs``; write summary.json when ``out_dir`` is given.

    ``options`` are :class:`JobOptions` fields (e.g. ``reference="uv"``, ``anchors_ev=[2.0]``).
    """
    opts = job_options(**options)
    return run_job(inputs, out_dir, opts, progress, "kkcheck check")


def fit(
    inputs, out_dir=None, *, report: bool = False, progress: bool = False, **options
) -> JobResult:
    """Everything :func:`check` does, then repair, pole-pair fit and slab check."""
    opts = job_options(**{**options, "do_fit": True, "html": report or options.get("html", False)})
    return run_job(inputs, out_dir, opts, progress, "kkcheck fit")


def run(config, out_dir=None, *, progress: bool = False) -> JobResult:
    """The whole job as a TOML config describes (see the module docstring for the keys)."""
    inputs, cfg_out, opts = load_config(config)
    out = out_dir if out_dir is not None else cfg_out
    if out is None:
        out = Path(config).with_suffix("").name + "_results"
    return run_job(inputs, out, opts, progress, f"kkcheck run {config}")


#: Where ``kkcheck demo`` writes unless told otherwise (below the working directory).
DEMO_OUT = "kkcheck-demo"


def demo_inputs() -> list:
    """The bundled demo tables (package data in kkcheck/demo_data): three n,k / eps tables and
    an FTIR reflectance table (quantity R)."""
    root = Path(__file__).resolve().parent / "demo_data"
    names = (
        "uvvis_ellipsometry.csv",
        "nir_ellipsometry.tsv",
        "handbook_ir.txt",
        "ftir_reflectance.csv",
    )
    paths = [root / n for n in names]
    missing = [str(p) for p in paths if not p.exists()]
    if missing:
        raise InputError(
            "demo data not found in the installed package (reinstall kkcheck, or regenerate "
            "it from a checkout with python reference_data/make_demo.py)",
            path=missing[0],
        )
    inputs: list = [_short_path(p) for p in paths[:3]]
    return inputs + [{"path": _short_path(paths[3]), "quantity": "R"}]


def _short_path(p: Path) -> str:
    """``p`` relative to the working directory when it lies below it (shorter, portable)."""
    try:
        return str(p.resolve().relative_to(Path.cwd().resolve()))
    except ValueError:
        return str(p)


def committed_demo_dir() -> Path:
    """The checkout's reports/demo (the committed example report).

    Raises
    ------
    kkcheck.errors.InputError
        kkcheck is not running from a source checkout (an installed package has no such folder).
    """
    repo = Path(__file__).resolve().parent.parent
    target = repo / "reports" / "demo"
    if not (repo / "pyproject.toml").is_file() or not target.is_dir():
        raise InputError(
            "not a source checkout: there is no committed demo report to refresh; expected "
            "kkcheck run from a clone of its repository",
            path=str(target),
        )
    return target


def demo(out_dir=None, *, progress: bool = False, refresh_committed: bool = False) -> JobResult:
    """The whole job on the bundled demo data.

    Writes to ``out_dir``, by default ``./kkcheck-demo`` below the working directory. Only
    ``refresh_committed=True`` writes the checkout's committed example in reports/demo.
    """
    if refresh_committed:
        if out_dir is not None:
            raise InputError("give either an output folder or refresh_committed, not both")
        out = Path(_short_path(committed_demo_dir()))
    else:
        out = Path(out_dir) if out_dir is not None else Path(DEMO_OUT)
    opts = JobOptions(do_fit=True, html=True, title="ZX-7 film (invented demo data)")
    return run_job(demo_inputs(), out, opts, progress, "kkcheck demo")
