"""The whole job, stage by stage: read, merge, clean, KK test, sum rules, repair, fit, slab, report.

Each stage is a plain function of :mod:`kkcheck`; this module only chains them, collects
their warnings, builds ``summary.json`` (schema ``kkcheck.summary/1``) and writes the outputs.
:func:`analyse` is the pure part (no files written); :func:`write_outputs` writes; the
public entry points :func:`check`, :func:`fit`, :func:`run` and :func:`demo` combine both.

Config file (TOML) keys, all optional except ``inputs``::

    title = "ZX-7 film"                # shown in the report
    out = "reports/zx7"                # output folder (relative to the config file)
    inputs = ["uv.csv", {path = "ir.txt", axis = "wavenumber_cm-1", quantity = "nk",
              name = "FTIR", convention = "auto"}]

    [merge]
    reference = "uv"                   # source name; default: the rule of kkcheck.merge
    correct = true                     # apply the estimated scale/offset
    overlap = "blend"                  # or "side_by_side"
    rank_sources = true                # use KK consistency to say which source is off

    [clean]
    flagged = "replace"                # keep | downweight | replace
    steps = "level"                    # level | keep (detector-changeover steps)

    [kk]
    anchors_ev = [1.5, 2.5]
    max_points = 3000                  # bin smooth stretches of larger spectra first

    [fit]
    enabled = true
    pairs = 4                          # or: tol = 0.01 (rms relative error)
    chi2_target = 1.5                  # noise floor for the automatic order choice
    frequency_unit = "eV"              # or "rad/s"

    [slab]
    thickness_nm = 100.0

    [report]
    html = true
"""

from __future__ import annotations

import dataclasses
import datetime as _dt
import sys
import time
import warnings
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ._version import __version__
from .errors import InputError
from .spectrum import Dataset, Flag, Spectrum

__all__ = [
    "JobOptions",
    "JobResult",
    "read_inputs",
    "analyse",
    "build_summary",
    "write_outputs",
    "check",
    "fit",
    "run",
    "demo",
    "load_config",
    "run_job",
]

SUMMARY_SCHEMA = "kkcheck.summary/1"
#: Fewest points a job accepts (the KK test needs at least this many).
MIN_POINTS = 8


@dataclass(frozen=True)
class InputSpec:
    """One input file and how to read it (options override what the header says)."""

    path: str
    axis: str | None = None
    quantity: str | None = None
    name: str | None = None
    convention: str = "auto"


@dataclass(frozen=True)
class JobOptions:
    """Every setting of a job (all recorded in the report's provenance).

    Attributes
    ----------
    axis, quantity, convention : str or None
        Reading defaults for inputs without a usable header (see :func:`kkcheck.io.read_table`).
    reference : str or None
        Name of the source the others are scaled to (default: the merge's rule).
    correct : bool
        Apply the estimated scale/offset of each source (they are reported either way).
    overlap : str
        ``"blend"`` or ``"side_by_side"`` (see :func:`kkcheck.merge.merge`).
    rank_sources : bool
        With several sources, try each as reference and compare KK consistency.
    flagged : str
        ``"keep"`` (flags only), ``"downweight"`` (flagged points get 10x their sigma in the
        KK test and the fit) or ``"replace"`` (default: down-weighted in the KK test, then
        replaced by the KK-consistent prediction before the fit; every change is recorded).
    steps : str
        ``"level"`` (default: shift one side of each detected changeover step to meet the
        other before the KK test, see :func:`kkcheck.clean.level_steps`; every shift is
        reported) or ``"keep"`` (flag only).
    anchors_ev : tuple of float
        Energies [eV] where eps1 is trusted.
    max_points : int
        Above this many points, smooth stretches are binned before the KK test
        (:func:`kkcheck.clean.bin_spectrum`); sharp features, spikes and steps stay unbinned.
    do_fit : bool
        Run repair, pole-pair fit and slab check.
    pairs : int or None
        Number of pole pairs (None: automatic order selection).
    tol : float or None
        Target rms relative error for the order selection.
    chi2_target : float
        Without ``tol``: the chi2/dof at which the fit counts as at the noise floor. The noise
        is estimated from the data (to some 10-20 %), so 1.5 by default rather than the
        purely statistical 1 + 3 sqrt(2/dof).
    frequency_unit : str
        ``"eV"`` or ``"rad/s"`` for model.json.
    thickness_nm : float
        Film thickness for the slab check [nm].
    html : bool
        Write the HTML report, Markdown summary and figures.
    title : str
        Report title.
    """

    axis: str | None = None
    quantity: str | None = None
    convention: str = "auto"
    reference: str | None = None
    correct: bool = True
    overlap: str = "side_by_side"
    rank_sources: bool = True
    flagged: str = "replace"
    steps: str = "level"
    anchors_ev: tuple[float, ...] = ()
    max_points: int = 3000
    do_fit: bool = False
    pairs: int | None = None
    tol: float | None = None
    chi2_target: float = 1.5
    frequency_unit: str = "eV"
    thickness_nm: float = 100.0
    html: bool = False
    title: str = "kkcheck report"

    def as_dict(self) -> dict:
        return dataclasses.asdict(self)


@dataclass(frozen=True)
class JobResult:
    """Everything one job produced (stage results are the stages' own frozen types).

    Attributes
    ----------
    options : JobOptions
    inputs : tuple of InputSpec
    datasets : tuple of Dataset
    merge : kkcheck.merge.MergeResult
    ranking : tuple or None
        KK-based reference trials (best first), when run.
    clean : kkcheck.clean.CleanResult
    steps : tuple of kkcheck.clean.StepCorrection
        Level shifts applied before the KK test (empty with ``steps="keep"``).
    analysed : kkcheck.spectrum.Spectrum
        The spectrum the KK test, repair and fit ran on: the cleaned (and levelled) one, with
        smooth stretches binned when it had more than ``options.max_points`` points.
    binning : kkcheck.clean.BinRecord
    kk : kkcheck.kk.consistency.KKTestResult
    sum_rules : object
        :mod:`kkcheck.kk.sumrules` result.
    repair, fit, slab : objects or None
        Present when the fit was asked for.
    summary : dict
        The content of summary.json.
    model : dict or None
        The content of model.json.
    warnings : tuple of str
        Every warning raised by a stage.
    out_dir : pathlib.Path or None
    files : tuple of pathlib.Path
        Files written.
    seconds : float
        Wall time of the analysis.
    """

    options: JobOptions
    inputs: tuple
    datasets: tuple
    merge: object
    ranking: object
    clean: object
    steps: tuple
    analysed: object
    binning: object
    kk: object
    sum_rules: object
    repair: object = None
    fit: object = None
    slab: object = None
    summary: dict = field(default_factory=dict)
    model: dict | None = None
    warnings: tuple = ()
    out_dir: Path | None = None
    files: tuple = ()
    seconds: float = 0.0

    def text_summary(self) -> str:
        """A few lines for the terminal."""
        kk = self.kk
        lines = []
        for ds in self.datasets:
            lo, hi = ds.range_ev
            conv = " (converted from exp(+iwt))" if ds.converted else ""
            lines.append(
                f"  read {ds.provenance.path or ds.name}: {len(ds)} points, "
                f"{lo:.4g}-{hi:.4g} eV, {ds.quantity}{conv}"
            )
        for s in self.summary.get("merge", {}).get("sources", []):
            if s.get("reference"):
                how = "reference"
            elif s["scale"] is None and s.get("overlap_points", 0) == 0:
                how = "no overlap with another source: scale and offset unknown"
            elif s["scale"] is None:
                how = "too little overlap to link it to the reference: scale and offset unknown"
            else:
                how = f"scale {s['scale']:.4f}, eps1 offset {s['eps1_offset']:+.4f}"
                how += "" if s.get("applied") else " (not applied)"
            lines.append(f"  source {s['name']}: {how}")
        suspect = self.summary.get("merge", {}).get("suspect_source")
        if suspect:
            lines.append(f"  KK consistency points at source {suspect} as the one that is off")
        for lo, hi in self.summary.get("merge", {}).get("gaps_ev", []):
            lines.append(f"  gap: {lo:.4g}-{hi:.4g} eV")
        kinds: dict[str, int] = {}
        for o in self.summary.get("outliers", []):
            kinds[o["kind"]] = kinds.get(o["kind"], 0) + 1
        if kinds:
            lines.append(
                "  flagged: "
                + ", ".join(f"{v} {k}{'s' if v > 1 else ''}" for k, v in kinds.items())
            )
        for c in self.steps:
            side = "above" if c.kept == "below" else "below"
            what = f"the side {side} it was shifted to match" if c.applied else c.reason
            lines.append(
                f"  step in {c.source} at {c.energy_ev:.4g} eV: {c.component} jumps "
                f"{c.jump:+.4g} ({c.relative:+.1%}); {what}"
            )
        b = self.binning
        if b is not None and b.points_out != b.points_in:
            lines.append(
                f"  binned {b.points_in} points to {b.points_out} for the KK test "
                "(sharp features, spikes and steps kept as measured)"
            )
        lines.append(
            f"KK test: {kk.verdict.upper()} (chi2/dof {kk.chi2_dof:.3g}, "
            f"{len(kk.regions)} region{'s' if len(kk.regions) != 1 else ''})"
        )
        for r in kk.regions:
            lines.append(
                f"  {r.component} inconsistent {r.from_ev:.4g}-{r.to_ev:.4g} eV "
                f"({1239.841984 / r.to_ev:.0f}-{1239.841984 / r.from_ev:.0f} nm), "
                f"peak {r.severity:.1f} sigma"
            )
        if self.fit is not None:
            f = self.fit
            cert = "certified passive" if f.passivity.certified else "NOT certified passive"
            lines.append(
                f"model: {f.n_pairs} pole entr{'ies' if f.n_pairs != 1 else 'y'}, rms rel. error "
                f"{f.rms_rel:.2%}, {cert}, {'stable' if f.stable else 'UNSTABLE'}; valid only "
                f"over {f.range_ev[0]:.4g}-{f.range_ev[1]:.4g} eV"
            )
        if self.slab is not None:
            s = self.slab
            lines.append(
                f"slab check ({s.thickness_nm:g} nm film): max |dR| {s.max_dR:.2e} at "
                f"{s.at_dR_ev:.4g} eV, max |dT| {s.max_dT:.2e} at {s.at_dT_ev:.4g} eV"
            )
        for w in self.warnings:
            lines.append(f"  warning: {w}")
        if self.out_dir is not None:
            lines.append(f"wrote {len(self.files)} files to {self.out_dir}")
        return "\n".join(lines)


# ------------------------------------------------------------------------------------ reading


def _as_specs(inputs, options: JobOptions) -> tuple[InputSpec, ...]:
    specs = []
    for item in inputs:
        if isinstance(item, InputSpec):
            specs.append(item)
        elif isinstance(item, dict):
            if "path" not in item:
                raise InputError(f"an input entry has no 'path': {item!r}")
            unknown = set(item) - {"path", "axis", "quantity", "name", "convention"}
            if unknown:
                raise InputError(
                    f"unknown key(s) {sorted(unknown)} in input entry for {item['path']}; "
                    "expected path, axis, quantity, name, convention"
                )
            specs.append(InputSpec(**{k: str(v) for k, v in item.items()}))
        else:
            specs.append(
                InputSpec(
                    str(item),
                    axis=options.axis,
                    quantity=options.quantity,
                    convention=options.convention,
                )
            )
    if not specs:
        raise InputError("no input files given; expected at least one table")
    return tuple(specs)


def read_inputs(specs: Sequence[InputSpec]) -> tuple[Dataset, ...]:
    """Read every input (first error stops, naming the file and line)."""
    from .io import read_table

    out = []
    names: set[str] = set()
    for s in specs:
        ds = read_table(
            s.path, axis=s.axis, quantity=s.quantity, name=s.name, convention=s.convention
        )
        if ds.name in names:  # two files with one stem: keep both apart
            ds = dataclasses.replace(ds, name=f"{ds.name}#{len(out) + 1}")
        names.add(ds.name)
        out.append(ds)
    return tuple(out)


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


def _kk_score(options_kk, max_points: int = JobOptions.max_points) -> Callable[[Spectrum], float]:
    """KK chi2/dof of a trial merge, binned like the main test (the dense fit is M^2 in memory:
    unbinned, two 5000-point sources took 4.6 GB and minutes per trial)."""
    from .clean import clean as _clean
    from .kk.binning import bin_spectrum
    from .kk.consistency import kk_test

    def score(spectrum: Spectrum) -> float:
        cleaned = _clean(spectrum, policy="keep").spectrum
        binned, _ = bin_spectrum(cleaned, max_points)
        return float(kk_test(binned, options=options_kk).chi2_dof)

    return score


def analyse(
    datasets: Sequence[Dataset],
    options: JobOptions = JobOptions(),
    *,
    progress: Callable[[str], None] | None = None,
) -> JobResult:
    """Run every stage on datasets already read; write nothing.

    Returns a :class:`JobResult` whose ``summary`` (and ``model`` when fitted) are the JSON
    documents of the contract.
    """
    from .clean import clean as clean_stage
    from .kk.consistency import KKTestOptions, kk_test
    from .kk.sumrules import sum_rules as sum_rule_stage
    from .merge import merge, rank_references

    say = progress or (lambda s: None)
    t0 = time.perf_counter()
    total = sum(len(d) for d in datasets)
    if total < MIN_POINTS:
        where = ", ".join(d.provenance.path or d.name for d in datasets)
        raise InputError(
            f"{total} data points in all; the Kramers-Kronig test needs at least {MIN_POINTS}",
            path=where,
        )
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        say("merging sources")
        merged = merge(
            datasets,
            reference=options.reference,
            correct=options.correct,
            overlap=options.overlap,
        )
        kk_opts = KKTestOptions()
        if options.flagged == "keep":
            kk_opts = dataclasses.replace(kk_opts, flagged_sigma_factor=1.0)
        ranking = None
        if options.rank_sources and len(datasets) > 1 and options.correct:
            say("ranking sources by KK consistency")
            ranking = rank_references(
                datasets, _kk_score(kk_opts, options.max_points), overlap=options.overlap
            )
        say("finding spikes, steps and noise")
        cleaned = clean_stage(merged.spectrum, policy="keep")
        from .kk.binning import bin_spectrum

        corrections: tuple = ()
        kk = None
        steps = [o for o in cleaned.outliers if o.kind == "step"]
        if options.steps == "level" and steps:
            say("levelling steps")
            cleaned, corrections, kk = _level_steps_if_consistent(cleaned, steps, options, kk_opts)
        analysed, binning = bin_spectrum(cleaned.spectrum, options.max_points)
        if kk is None:
            say("Kramers-Kronig test")
            kk = kk_test(analysed, anchors_ev=options.anchors_ev or None, options=kk_opts)
        say("sum rules")
        sp = analysed
        e_u, first = np.unique(sp.energy_ev, return_index=True)
        rules = sum_rule_stage(e_u, sp.eps.real[first], sp.eps.imag[first])
        repaired = fitted = slab = None
        if options.do_fit:
            from .rational import fit_pole_pairs
            from .repair import repair

            say("repairing")
            policy = "replace_flagged" if options.flagged == "replace" else "none"
            repaired = repair(analysed, kk, policy=policy)
            say("fitting pole pairs")
            s1, s2 = repaired.sigma_eps1, repaired.sigma_eps2
            # A pole-pair model is KK consistent by construction: it cannot follow data the
            # KK test found inconsistent, and trying adds spurious narrow poles. Those points
            # (and flagged ones still in the data) weigh 1/100 in the fit.
            bits = int(Flag.SPIKE | Flag.STEP) if options.flagged != "keep" else 0
            flags = np.asarray(repaired.flags)
            bad = (flags & bits) != 0
            for g in kk.regions:
                bad |= (repaired.energy_ev >= g.from_ev) & (repaired.energy_ev <= g.to_ev)
            bad &= (flags & int(Flag.REPLACED)) == 0
            # gap fills are the KK model's guess, not measurements: they steer the fit little
            bad |= (flags & int(Flag.FILLED)) != 0
            s1 = np.where(bad, 10.0 * s1, s1)
            s2 = np.where(bad, 10.0 * s2, s2)
            fitted = _fit(repaired, s1, s2, options, fit_pole_pairs)
            say("slab check")
            slab = _slab(repaired, fitted, options)
    msgs = tuple(dict.fromkeys(f"{w.category.__name__}: {w.message}" for w in caught))
    result = JobResult(
        options=options,
        inputs=(),
        datasets=tuple(datasets),
        merge=merged,
        ranking=ranking,
        clean=cleaned,
        steps=corrections,
        analysed=analysed,
        binning=binning,
        kk=kk,
        sum_rules=rules,
        repair=repaired,
        fit=fitted,
        slab=slab,
        warnings=msgs,
        seconds=time.perf_counter() - t0,
    )
    model = None
    if fitted is not None:
        from .rational.io import model_to_dict

        model = model_to_dict(fitted, frequency_unit=options.frequency_unit)
    return dataclasses.replace(result, summary=build_summary(result), model=model)


def _level_steps_if_consistent(cleaned, steps, options: JobOptions, kk_opts):
    """Level each detected step only if that makes the data more KK consistent.

    A step found by :func:`kkcheck.clean.find_steps` is an instrument artefact when one side
    of the source is offset; but on sparse data a sharp feature can look like a jump, and
    shifting half a source then creates the inconsistency it meant to remove. So each step
    (largest first, at most five) is levelled on trial and kept only when chi2/dof of the KK
    test drops. Returns (clean result, corrections incl. rejected ones, KK result of the
    accepted spectrum).
    """
    from .clean import level_steps
    from .kk.binning import bin_spectrum
    from .kk.consistency import kk_test

    def test(spectrum):
        binned, _ = bin_spectrum(spectrum, options.max_points)
        return kk_test(binned, anchors_ev=options.anchors_ev or None, options=kk_opts)

    current = cleaned.spectrum
    kk = test(current)
    records = []
    order = sorted(steps, key=lambda o: -abs(o.value - o.expected) / max(abs(o.value), 1e-300))
    for i, st in enumerate(order):
        trial, (rec,) = level_steps(current, [st])
        if i >= 5:
            records.append(dataclasses.replace(rec, applied=False, reason="not tried (> 5 steps)"))
            continue
        kk_trial = test(trial)
        if kk_trial.chi2_dof < kk.chi2_dof:
            current, kk = trial, kk_trial
            records.append(rec)
        else:
            records.append(
                dataclasses.replace(
                    rec,
                    applied=False,
                    reason=f"left as measured: levelling it did not lower the KK chi2/dof "
                    f"({kk_trial.chi2_dof:.3g} vs {kk.chi2_dof:.3g}), so it may be a real "
                    "feature",
                )
            )
    records.sort(key=lambda r: r.energy_ev)
    return dataclasses.replace(cleaned, spectrum=current), tuple(records), kk


def _fit(repaired, s1, s2, options: JobOptions, fit_pole_pairs):
    e = np.asarray(repaired.energy_ev, float)
    eps = np.asarray(repaired.eps)
    keep = np.r_[True, np.diff(e) > 0]  # the fitter needs a strictly increasing axis
    # The repair's band is exactly 0 where the nonnegative basis pins eps2 at 0 (a filled
    # transparent gap); the fit weights by 1/sigma, so floor it at the KK test's noise floor
    # (relative 1e-4 of |eps|, absolute 1e-6).
    floor = 1e-4 * np.abs(eps) + 1e-6
    s1 = np.maximum(np.nan_to_num(np.asarray(s1, float), nan=np.inf), floor)
    s2 = np.maximum(np.nan_to_num(np.asarray(s2, float), nan=np.inf), floor)
    return fit_pole_pairs(
        e[keep],
        eps[keep],
        s1[keep],
        s2[keep],
        pairs=options.pairs,
        tol=options.tol,
        chi2_target=options.chi2_target,
    )


def _slab(repaired, fitted, options: JobOptions):
    from .slab import compare_slab

    lo, hi = fitted.range_ev
    e = np.asarray(repaired.energy_ev, float)
    inside = (e >= lo) & (e <= hi)
    return compare_slab(
        e[inside], np.asarray(repaired.eps)[inside], fitted.model, options.thickness_nm
    )


# ------------------------------------------------------------------------------------ summary


def _f(x) -> float | None:
    """A JSON-safe float: NaN and infinities become None, -0.0 becomes 0.0."""
    x = float(x)
    return x + 0.0 if np.isfinite(x) else None


def build_summary(result: JobResult) -> dict:
    """The summary.json document (schema ``kkcheck.summary/1``, DESIGN.md contract)."""
    ds = result.datasets
    inputs = [
        {
            "path": d.provenance.path,
            "name": d.name,
            "sha256": d.provenance.sha256,
            "points": len(d),
            "axis": d.axis,
            "quantity": d.quantity,
            "range_ev": [_f(d.range_ev[0]), _f(d.range_ev[1])],
            "convention": d.convention,
            "converted": bool(d.converted),
            "notes": list(d.provenance.notes),
        }
        for d in ds
    ]
    converted = any(d.converted for d in ds)
    m = result.merge
    merge_block = {
        "reference": m.reference,
        "sources": [
            {
                "name": s.name,
                "range_ev": [_f(s.range_ev[0]), _f(s.range_ev[1])],
                "eps1_offset": _f(s.eps1_offset),
                "eps1_offset_sigma": _f(s.eps1_offset_sigma),
                "scale": _f(s.scale),
                "scale_sigma": _f(s.scale_sigma),
                "reference": bool(s.reference),
                "overlap_points": int(s.n_overlap),
                "applied": bool(s.applied),
            }
            for s in m.sources
        ],
        "gaps_ev": [[_f(lo), _f(hi)] for lo, hi in m.gaps_ev],
        "overlap": result.options.overlap,
        "notes": list(m.notes),
    }
    if result.ranking:
        from .merge import off_source

        merge_block["reference_ranking"] = [
            {
                "hypothesis": t.hypothesis,
                "source": t.source,
                "score": _f(t.score),
                "ratio": _f(t.ratio),
            }
            for t in result.ranking
        ]
        merge_block["suspect_source"] = off_source(result.ranking)
    outliers = [
        {
            "energy_ev": _f(o.energy_ev),
            "source": o.source,
            "component": o.component,
            "kind": o.kind,
            "size_sigma": _f(o.size),
        }
        for o in result.clean.outliers
    ]
    steps = [
        {
            "energy_ev": _f(c.energy_ev),
            "source": c.source,
            "component": c.component,
            "jump": _f(c.jump),
            "relative": _f(c.relative),
            "kept_side": c.kept,
            "points_shifted": c.points if c.applied else 0,
            "applied": c.applied,
            "reason": c.reason,
        }
        for c in result.steps
    ]
    kk = result.kk
    spec = result.analysed
    kk_block = {
        "method": kk.method,
        "anchors_ev": [float(a) for a in kk.anchors_ev],
        "rms": _f(kk.rms),
        "max": _f(kk.max),
        "noise": _f(kk.noise),
        "chi2_dof": _f(kk.chi2_dof),
        "verdict": kk.verdict,
        "range_ev": [_f(spec.energy_ev[0]), _f(spec.energy_ev[-1])],
        "regions": [
            {
                "from_ev": _f(r.from_ev),
                "to_ev": _f(r.to_ev),
                "component": r.component,
                "severity": _f(r.severity),
                "label": r.label,
            }
            for r in kk.regions
        ],
        "notes": list(kk.notes),
        "points_analysed": len(spec),
    }
    b = result.binning
    if b.points_out != b.points_in:
        kk_block["notes"].append(
            f"{b.points_in} points were binned to {b.points_out} for the test (up to "
            f"{b.bin_size} neighbours averaged where the data are straight within the noise; "
            f"{b.kept_sharp} points at sharp features and {b.kept_flagged} flagged points "
            "kept as measured)"
        )
    summary = {
        "schema": SUMMARY_SCHEMA,
        "version": __version__,
        "created_utc": _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"),
        "inputs": inputs,
        "convention": {
            "detected": "exp(+iwt)" if converted else "exp(-iwt)",
            "converted": converted,
            "per_input": [
                {"path": d.provenance.path, "detected": d.convention, "converted": d.converted}
                for d in ds
            ],
        },
        "merge": merge_block,
        "outliers": outliers,
        "step_corrections": steps,
        "kk": kk_block,
        "sum_rules": _sum_rule_block(result.sum_rules),
        "parameters": result.options.as_dict(),
        "warnings": list(result.warnings),
    }
    if result.repair is not None:
        summary["repair"] = {
            "points": len(result.repair.energy_ev),
            "changed": len(result.repair.changes),
            "notes": list(result.repair.notes),
        }
    if result.fit is not None:
        f = result.fit
        summary["fit"] = {
            "pairs": int(f.n_pairs),
            "rms_rel": _f(f.rms_rel),
            "max_rel": _f(f.max_rel),
            "certified_passive": bool(f.passivity.certified),
            "stable": bool(f.stable),
            "range_ev": [_f(f.range_ev[0]), _f(f.range_ev[1])],
            "weighting": "1/sigma of the repaired data; points in KK-inconsistent regions "
            "and flagged points still in the data weigh 1/100",
            "notes": list(f.warnings),
        }
    if result.slab is not None:
        s = result.slab
        summary["slab"] = {
            "thickness_nm": s.thickness_nm,
            "geometry": s.geometry,
            "max_abs_dR": _f(s.max_dR),
            "max_abs_dT": _f(s.max_dT),
            "at_dR_ev": _f(s.at_dR_ev),
            "at_dT_ev": _f(s.at_dT_ev),
        }
    return summary


def _sum_rule_block(r) -> dict:
    """Scalars of the sum-rule result plus its running f-sum on at most 25 energies."""
    pick = np.unique(np.linspace(0, r.energy_ev.size - 1, 25).round().astype(int))
    return {
        "window_ev": [_f(r.window_ev[0]), _f(r.window_ev[1])],
        "fsum_ev2": _f(r.fsum_ev2[-1]),
        "effective_plasma_energy_ev": _f(r.plasma_energy_ev[-1]),
        "inertial_n_ev": _f(r.inertial_n_ev),
        "inertial_eps1_ev": _f(r.inertial_eps1_ev),
        "expected_inertial_eps1_ev": _f(r.expected_inertial_eps1_ev),
        "caution": r.caution,
        "running": {
            "energy_ev": [_f(x) for x in r.energy_ev[pick]],
            "effective_plasma_energy_ev": [_f(x) for x in r.plasma_energy_ev[pick]],
        },
        "notes": "integrals over the measured window only: int_{x0}^{E} E' eps2 dE' "
        "(fsum_ev2), sqrt((2/pi) fsum) (effective plasma energy), int (n - 1) dE and "
        "int (eps1 - 1) dE; the full-axis inertial values are 0 (insulator) or "
        "-(pi/2) sigma0/eps0 (conductor)",
    }


# ------------------------------------------------------------------------------------ writing


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
    if result.model is not None:
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
    if result.datasets and result.datasets[0].axis != "energy_ev":
        axes.append(result.datasets[0].axis)
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


# ------------------------------------------------------------------------------- entry points


def _options(**kw) -> JobOptions:
    known = {f.name for f in dataclasses.fields(JobOptions)}
    bad = set(kw) - known
    if bad:
        raise TypeError(f"unknown option(s): {', '.join(sorted(bad))}")
    if "anchors_ev" in kw and kw["anchors_ev"] is not None:
        kw["anchors_ev"] = tuple(float(a) for a in kw["anchors_ev"])
    return JobOptions(**kw)


def run_job(
    inputs, out_dir, options: JobOptions, progress: bool = False, command: str = ""
) -> JobResult:
    """Read ``inputs``, run every stage ``options`` asks for, write to ``out_dir`` if given.

    The common core of :func:`check`, :func:`fit`, :func:`run` and :func:`demo` (and of a
    batch item); ``inputs`` are paths or ``{"path", "axis", "quantity", "name",
    "convention"}`` dicts.
    """
    bar = _Progress(progress)
    bar("reading")
    specs = _as_specs(inputs, options)
    datasets = read_inputs(specs)
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
    opts = _options(**options)
    return run_job(inputs, out_dir, opts, progress, "kkcheck check")


def fit(
    inputs, out_dir=None, *, report: bool = False, progress: bool = False, **options
) -> JobResult:
    """Everything :func:`check` does, then repair, pole-pair fit and slab check."""
    opts = _options(**{**options, "do_fit": True, "html": report or options.get("html", False)})
    return run_job(inputs, out_dir, opts, progress, "kkcheck fit")


def load_config(path) -> tuple[list, Path | None, JobOptions]:
    """Read a TOML job file; returns (inputs, out_dir, options). Paths are relative to it."""
    try:
        import tomllib
    except ModuleNotFoundError:  # Python 3.10
        import tomli as tomllib  # type: ignore[no-redef]

    p = Path(path)
    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise InputError("config file not found", path=str(p)) from None
    except OSError as exc:
        raise InputError(f"cannot read config file ({exc.strerror})", path=str(p)) from None
    try:
        cfg = tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError:
        raise InputError("config file is not UTF-8 text", path=str(p)) from None
    except tomllib.TOMLDecodeError as exc:
        line = getattr(exc, "lineno", None)
        msg = str(exc).split(" (at line")[0]
        raise InputError(f"not valid TOML: {msg}", path=str(p), line=line) from None
    base = p.parent
    known = {"title", "out", "inputs", "merge", "clean", "kk", "fit", "slab", "report"}
    unknown = set(cfg) - known
    if unknown:
        raise InputError(
            f"unknown key(s) {sorted(unknown)}; expected {', '.join(sorted(known))}", path=str(p)
        )
    if "inputs" not in cfg or not cfg["inputs"]:
        raise InputError("no 'inputs' list; expected inputs = [\"file.csv\", ...]", path=str(p))
    inputs = []
    for item in cfg["inputs"]:
        if isinstance(item, str):
            inputs.append(str(base / item))
        elif isinstance(item, dict) and "path" in item:
            inputs.append({**item, "path": str(base / item["path"])})
        else:
            raise InputError(
                f"an input must be a path or a table with 'path', got {item!r}", path=str(p)
            )
    sections = {
        "merge": {
            "reference": "reference",
            "correct": "correct",
            "overlap": "overlap",
            "rank_sources": "rank_sources",
        },
        "clean": {"flagged": "flagged", "steps": "steps"},
        "kk": {"anchors_ev": "anchors_ev", "max_points": "max_points"},
        "fit": {
            "enabled": "do_fit",
            "pairs": "pairs",
            "tol": "tol",
            "chi2_target": "chi2_target",
            "frequency_unit": "frequency_unit",
        },
        "slab": {"thickness_nm": "thickness_nm"},
        "report": {"html": "html"},
    }
    kw: dict = {"do_fit": True, "html": True}
    if "title" in cfg:
        kw["title"] = str(cfg["title"])
    for sec, mapping in sections.items():
        table = cfg.get(sec, {})
        if not isinstance(table, dict):
            raise InputError(f"[{sec}] must be a table", path=str(p))
        bad = set(table) - set(mapping)
        if bad:
            raise InputError(
                f"unknown key(s) {sorted(bad)} in [{sec}]; expected {', '.join(sorted(mapping))}",
                path=str(p),
            )
        for k, v in table.items():
            kw[mapping[k]] = v
    out = Path(base / cfg["out"]) if "out" in cfg else None
    try:
        return inputs, out, _options(**kw)
    except TypeError as exc:
        raise InputError(str(exc), path=str(p)) from None


def run(config, out_dir=None, *, progress: bool = False) -> JobResult:
    """The whole job as a TOML config describes (see the module docstring for the keys)."""
    inputs, cfg_out, opts = load_config(config)
    out = out_dir if out_dir is not None else cfg_out
    if out is None:
        out = Path(config).with_suffix("").name + "_results"
    return run_job(inputs, out, opts, progress, f"kkcheck run {config}")


def demo_inputs() -> list[str]:
    """Paths of the bundled demo tables (reference_data/demo)."""
    root = Path(__file__).resolve().parent.parent / "reference_data" / "demo"
    names = ("uvvis_ellipsometry.csv", "nir_ellipsometry.tsv", "handbook_ir.txt")
    paths = [root / n for n in names]
    missing = [str(p) for p in paths if not p.exists()]
    if missing:
        raise InputError(
            "demo data not found (run from a source checkout, or regenerate it with "
            "python reference_data/make_demo.py)",
            path=missing[0],
        )
    return [_short_path(p) for p in paths]


def _short_path(p: Path) -> str:
    """``p`` relative to the working directory when it lies below it (shorter, portable)."""
    try:
        return str(p.resolve().relative_to(Path.cwd().resolve()))
    except ValueError:
        return str(p)


def demo(out_dir=None, *, progress: bool = False) -> JobResult:
    """The whole job on the bundled demo data; writes to the checkout's reports/demo by default."""
    repo = Path(__file__).resolve().parent.parent
    out = Path(out_dir) if out_dir is not None else Path(_short_path(repo / "reports" / "demo"))
    opts = JobOptions(do_fit=True, html=True, title="ZX-7 film (invented demo data)")
    return run_job(demo_inputs(), out, opts, progress, "kkcheck demo")
