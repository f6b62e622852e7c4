"""What one job produced: :class:`JobResult`, typed with each stage's own frozen result."""

from __future__ import annotations

from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

from .units import HC_EV_NM

if TYPE_CHECKING:  # annotations only: importing the stages here would slow start-up
    from .clean import CleanResult, StepCorrection
    from .job import InputSpec, JobOptions
    from .kk.binning import BinRecord
    from .kk.consistency import KKTestResult
    from .kk.mskk import MSKKView
    from .kk.sumrules import SumRuleResult
    from .merge import MergeResult, ReferenceTrial
    from .rational import FitResult
    from .repair import RepairResult
    from .slab import SlabComparison
    from .spectrum import Dataset, Spectrum

__all__ = ["JobResult"]


@dataclass(frozen=True)
class JobResult:
    """Everything one job produced (stage results are the stages' own frozen types).

    Attributes
    ----------
    options : JobOptions
    inputs : tuple of InputSpec
    datasets : tuple of Dataset
    merge : MergeResult
    ranking : tuple of ReferenceTrial or None
        KK-based reference trials (best first), when run.
    clean : CleanResult
    steps : tuple of StepCorrection
        Level shifts tried before the KK test (empty with ``steps="keep"``).
    analysed : Spectrum
        The spectrum the KK test, repair and fit ran on: the cleaned (and levelled) one, with
        smooth stretches binned when it had more than ``options.max_points`` points.
    binning : BinRecord
    kk : KKTestResult
    sum_rules : SumRuleResult
    repair : RepairResult or None
    fit : FitResult or None
    slab : SlabComparison or None
        The last three are present when the fit was asked for.
    mskk : MSKKView or None
        The multiply subtractive KK view beside the basis-fit verdict (``options.mskk``).
    reflectance : tuple
        One phase-retrieval result per reflectance input (quantity ``"R"``).
    summary : dict
        The content of summary.json.
    model_json : dict or None
        The content of model.json (plain JSON values). The model object, a
        :class:`~kkcheck.rational.PolePairModel` that evaluates eps, is :attr:`model`
        (the same as ``fit.model``).
    warnings : tuple of str
        Every warning raised by a stage.
    out_dir : pathlib.Path or None
    files : tuple of pathlib.Path
        Files written.
    seconds : float
        Wall time of the analysis.
    """

    options: JobOptions
    inputs: tuple[InputSpec, ...]
    datasets: tuple[Dataset, ...]
    merge: MergeResult
    ranking: tuple[ReferenceTrial, ...] | None
    clean: CleanResult
    steps: tuple[StepCorrection, ...]
    analysed: Spectrum
    binning: BinRecord
    kk: KKTestResult
    sum_rules: SumRuleResult
    repair: RepairResult | None = None
    fit: FitResult | None = None
    slab: SlabComparison | None = None
    mskk: MSKKView | None = None
    reflectance: tuple = ()
    summary: dict = field(default_factory=dict, repr=False)
    model_json: dict | None = field(default=None, repr=False)
    warnings: tuple[str, ...] = ()
    out_dir: Path | None = None
    files: tuple[Path, ...] = ()
    seconds: float = 0.0

    @property
    def model(self):
        """The fitted pole-pair model (:class:`~kkcheck.rational.PolePairModel`), or None.

        ``result.model(energy_ev)`` is not a call: use ``result.model.eps(energy_ev)``; the
        JSON form written to model.json is :attr:`model_json`.
        """
        return None if self.fit is None else self.fit.model

    @property
    def verdict(self) -> str:
        """The KK test's verdict (``"consistent"``, ``"inconsistent"``, ...)."""
        return self.kk.verdict

    def __repr__(self) -> str:
        return _short_repr(self)

    def report(self) -> str:
        """The text the command line prints (same as :meth:`text_summary`)."""
        return self.text_summary()

    def to_frame(self):
        """The analysed spectrum beside its KK reconstruction, one row per point.

        Columns ``energy_ev, eps1, eps2, sigma_eps1, sigma_eps2, eps1_kk, eps2_kk, z1, z2,
        source, flags`` (``z`` = residual / sigma; ``*_kk`` the KK-consistent reconstruction of
        the test) and, after a fit, ``eps1_model, eps2_model`` (the pole-pair model).
        """
        from .result_views import result_frame

        return result_frame(self)

    def plot(self, ax=None):
        """Data, KK reconstruction and (after a fit) the model; returns the matplotlib figure."""
        from .report.figures.overview import overview_figure

        return overview_figure(self, ax=ax)

    def _repr_html_(self) -> str:
        from .result_views import result_html

        return result_html(self)

    def text_summary(self, warnings: bool = True) -> str:
        """A few lines for the terminal (the command line prints warnings on stderr instead)."""
        lines = (
            self._input_lines()
            + self._merge_lines()
            + self._clean_lines()
            + self._kk_lines()
            + self._fit_lines()
        )
        if warnings:
            lines += [f"  warning: {w}" for w in self.warnings]
        if self.out_dir is not None:
            lines.append(f"wrote {len(self.files)} files to {self.out_dir}")
        return "\n".join(lines)

    def _input_lines(self) -> list[str]:
        lines = []
        for ds in self.datasets:
            lo, hi = ds.range_ev
            conv = " (converted from exp(+iwt))" if ds.converted else ""
            lines.append(
                f"  read {ds.provenance.path or ds.name}: {len(ds)} points, "
                f"{lo:.4g}-{hi:.4g} eV, {ds.quantity}{conv}"
            )
        return lines

    def _merge_lines(self) -> list[str]:
        merge = self.summary.get("merge", {})
        lines = [f"  source {s['name']}: {_source_text(s)}" for s in merge.get("sources", [])]
        suspect = merge.get("suspect_source")
        if suspect:
            lines.append(f"  KK consistency points at source {suspect} as the one that is off")
        for lo, hi in merge.get("gaps_ev", []):
            lines.append(f"  gap: {lo:.4g}-{hi:.4g} eV")
        return lines

    def _clean_lines(self) -> list[str]:
        lines = []
        kinds: dict[str, int] = {}
        for o in self.summary.get("outliers", []):
            kinds[o["kind"]] = kinds.get(o["kind"], 0) + 1
        if kinds:
            lines.append(
                "  flagged points: "
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
        return lines

    def _kk_lines(self) -> list[str]:
        kk = self.kk
        n = len(kk.regions)
        text = getattr(kk, "verdict_text", "") or kk.verdict
        if text.startswith(kk.verdict):  # the verdict word in capitals, then its size
            text = kk.verdict.upper() + text[len(kk.verdict) :]
        lines = [
            f"KK test: {text} (chi2/dof {kk.chi2_dof:.3g}, "
            f"{n} inconsistent region{'s' if n != 1 else ''})"
        ]
        for r in kk.regions:
            size = getattr(r, "deviation_rel", float("nan"))
            size_txt = f"{100 * size:.2g} % of |eps|, " if size == size else ""
            lines.append(
                f"  inconsistent region: {r.component} {r.from_ev:.4g}-{r.to_ev:.4g} eV "
                f"({HC_EV_NM / r.to_ev:.0f}-{HC_EV_NM / r.from_ev:.0f} nm), "
                f"{size_txt}peak {r.severity:.1f} sigma"
            )
        return lines

    def _fit_lines(self) -> list[str]:
        lines = []
        if self.fit is not None:
            f = self.fit
            cert = "certified passive" if f.passivity.certified else "NOT certified passive"
            lines.append(
                f"model: {_pairs_text(f.n_pairs)}, rms rel. error "
                f"{f.rms_rel:.2%}, {cert}, {'stable' if f.stable else 'UNSTABLE'}; valid only "
                f"over {f.range_ev[0]:.4g}-{f.range_ev[1]:.4g} eV"
            )
        if self.slab is not None:
            s = self.slab
            lines.append(
                f"slab check ({s.thickness_nm:g} nm film): max |dR| {s.max_dR:.2e} at "
                f"{s.at_dR_ev:.4g} eV, max |dT| {s.max_dT:.2e} at {s.at_dT_ev:.4g} eV"
            )
        return lines


def _source_text(s: dict) -> str:
    """How one source of the merge block was placed, in words."""
    if s.get("reference"):
        return "reference"
    if s["scale"] is None and s.get("overlap_points", 0) == 0:
        return "no overlap with another source: scale and offset unknown"
    if s["scale"] is None:
        return "too little overlap to link it to the reference: scale and offset unknown"
    how = f"scale {s['scale']:.4f}, eps1 offset {s['eps1_offset']:+.4f}"
    return how + ("" if s.get("applied") else " (not applied)")


def _short_repr(r: JobResult) -> str:
    """One line: sources, points, verdict, model (never the arrays)."""
    n_pts = sum(len(d) for d in r.datasets)
    parts = [
        f"{len(r.datasets)} source{'s' if len(r.datasets) != 1 else ''}",
        f"{n_pts} points",
        f"KK {r.kk.verdict} (chi2/dof {r.kk.chi2_dof:.3g}, "
        f"{len(r.kk.regions)} inconsistent region{'s' if len(r.kk.regions) != 1 else ''})",
    ]
    if r.fit is not None:
        cert = "certified passive" if r.fit.passivity.certified else "NOT certified passive"
        parts.append(f"{_pairs_text(r.fit.n_pairs)}, {cert}")
    if r.out_dir is not None:
        parts.append(f"out_dir={str(r.out_dir)!r}")
    return f"<JobResult: {'; '.join(parts)}>"


def _pairs_text(n: int) -> str:
    """``"4 pole pairs"`` (the one term for the model's order everywhere)."""
    return f"{n} pole pair{'s' if n != 1 else ''}"
