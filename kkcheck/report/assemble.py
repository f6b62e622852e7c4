"""Turn a pipeline result into the report: figures, report.html and summary.md.

This is the only place that knows both the stage result types and the report's interface
(:mod:`kkcheck.report.figures` takes plain arrays, :mod:`kkcheck.report.html` and
:mod:`kkcheck.report.markdown` a :class:`~kkcheck.report.context.ReportContext`); the
numerical stages never import it. Nothing here recomputes a stage: the figures draw the
arrays the stages kept (the KK reconstruction, the repair, the slab R/T).
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

from .._version import __version__
from ..spectrum import Flag
from . import figures
from .context import ReportContext, ReportFigure, library_versions
from .html import write_html_report
from .markdown import write_markdown_summary

__all__ = ["report_context", "report_figures", "write_report"]

#: KK note codes (:attr:`kkcheck.kk.consistency.KKTestResult.note_codes`) left out of the
#: cautions because the report states them in its standard cautions.
_NOTES_SHOWN_ELSEWHERE = frozenset({"constant_offset"})

#: Flagging threshold of the residual figure and the KK section [sigma].
_Z_THRESHOLD = 3.0


def _data_figures(result, fig_dir: Path) -> list[ReportFigure]:
    summary = result.summary
    sources = [
        {"name": d.name, "energy_ev": d.energy_ev, "eps1": d.eps.real, "eps2": d.eps.imag}
        for d in result.datasets
    ]
    path = figures.plot_sources(
        fig_dir / "sources", sources, summary["outliers"], summary["merge"]["gaps_ev"]
    )
    return [
        ReportFigure(
            path,
            "Every source as read (converted to eps, exp(-iwt)), before any scale "
            "correction; flagged spikes (x) and steps (dashed) marked, gaps hatched.",
            "Sources as read",
        )
    ]


def _kk_figures(result, fig_dir: Path) -> list[ReportFigure]:
    spec, kk = result.analysed, result.kk
    regions = result.summary["kk"]["regions"]
    kk_png = figures.plot_kk(
        fig_dir / "kk_reconstruction",
        spec.energy_ev,
        spec.eps.real,
        spec.eps.imag,
        kk.eps1_model,
        kk.eps2_model,
        regions,
        kk.verdict,
        sigma1=kk.sigma_eps1,
        sigma2=kk.sigma_eps2,
        verdict_text=getattr(kk, "verdict_text", ""),
    )
    res_png = figures.plot_residuals(
        fig_dir / "kk_residuals", spec.energy_ev, kk.resid1, kk.resid2, _Z_THRESHOLD, regions
    )
    return [
        ReportFigure(
            kk_png,
            "Merged data against the KK-consistent reconstruction (nonnegative "
            "piecewise-linear eps2 basis extending beyond the window); inconsistent regions "
            "shaded; the bottom panel zooms on the worst one, data with ±1σ bars.",
            "Kramers–Kronig reconstruction",
        ),
        ReportFigure(
            res_png,
            "(data − reconstruction)/σ for eps1 and eps2 on a linear scale, with the ±3σ "
            "lines; residuals beyond the axis are triangles on its edge.",
            "Normalised residuals",
        ),
    ]


def _repair_figure(result, fig_dir: Path) -> ReportFigure:
    rep, spec = result.repair, result.analysed
    replaced, filled = _repair_masks(rep)
    path = figures.plot_repaired(
        fig_dir / "repaired",
        rep.energy_ev,
        rep.eps,
        rep.sigma_eps1,
        rep.sigma_eps2,
        replaced,
        spec.energy_ev,
        spec.eps,
        filled_mask=filled,
    )
    return ReportFigure(
        path,
        "KK-consistent repair with its ±1σ band (its half-width in the bottom panel); "
        "points replaced by the KK prediction circled, points filled inside a gap as "
        "squares (counted as points, as in the Repair table); merged data in grey.",
        "Repaired spectrum",
    )


def _repair_masks(rep) -> tuple[np.ndarray, np.ndarray]:
    """(replaced, filled) point masks of the repair grid: one source for figure and table."""
    flags = np.asarray(rep.flags)
    filled = (flags & int(Flag.FILLED)) != 0
    replaced = ((flags & int(Flag.REPLACED)) != 0) & ~filled
    return replaced, filled


def _passivity_grid(fit) -> tuple[np.ndarray, np.ndarray]:
    """1 meV - 1 keV grid with the certificate's minimum energy in it, and eps2 there.

    The figure's title reads the smallest eps2 on its grid; putting the certificate's
    ``min_energy_ev`` on the grid makes the title and the Model table show one number (the
    certificate's), instead of a sampled one that is larger.
    """
    wide = np.geomspace(1e-3, 1e3, 2000)
    e_min = float(getattr(fit.passivity, "min_energy_ev", np.nan))
    if np.isfinite(e_min) and e_min > 0:
        wide = np.union1d(wide, [e_min])
    return wide, fit.model.eps(wide).imag


def _slab_figure(slab, fig_dir: Path) -> ReportFigure:
    d = slab.thickness_nm
    t, m = slab.table_rt, slab.model_rt
    path = figures.plot_slab(fig_dir / "slab", slab.energy_ev, t.R, t.T, m.R, m.T, d)
    where = "free-standing " if slab.geometry == "free-standing" else ""
    on = "" if slab.geometry == "free-standing" else " on its substrate"
    return ReportFigure(
        path,
        f"Normal-incidence R and T of a {where}{d:g} nm film{on} "
        "computed from the repaired data and from the model.",
        "What the fit error does to a film",
    )


def _model_figures(result, fig_dir: Path) -> list[ReportFigure]:
    f = result.fit
    e = np.asarray(result.repair.energy_ev)
    out = [
        ReportFigure(
            figures.plot_fit(fig_dir / "fit", e, result.repair.eps, f.model.eps(e), f.range_ev),
            "The fitted pole-pair model and its relative error over the fitted range.",
            "Pole-pair model against the data",
        )
    ]
    wide, eps2_wide = _passivity_grid(f)
    out.append(
        ReportFigure(
            figures.plot_passivity(fig_dir / "passivity", wide, eps2_wide, f.range_ev),
            "eps2 of the model from 1 meV to 1 keV; any negative value (gain) "
            "would be filled red. The certificate covers the whole axis.",
            "Passivity at a glance",
        )
    )
    if result.slab is not None:
        out.append(_slab_figure(result.slab, fig_dir))
    return out


def _mskk_figure(view, fig_dir: Path) -> ReportFigure:
    """The MSKK view's figure; the caption says what the anchors are and what the hold-out found."""
    path = figures.plot_mskk(
        fig_dir / "kk_mskk",
        view.energy_ev,
        view.eps1_measured,
        view.sigma_eps1,
        view.eps1_mskk,
        view.sigma_mskk,
        view.anchors_ev,
        view.anchors_eps1,
        holdout_ev=view.holdout_ev,
        holdout_residual=view.holdout_residual,
        holdout_z=view.holdout_z,
        regions=view.regions_ev,
    )
    at = ", ".join(f"{a:.4g}" for a in view.anchors_ev)
    if np.isfinite(view.holdout_z):
        ok = abs(view.holdout_z) <= _Z_THRESHOLD
        held = (
            f" The anchor at {view.holdout_ev:.4g} eV was held out and predicted from the "
            f"others: measured − predicted = {view.holdout_residual:+.3g} "
            f"({view.holdout_z:+.1f}σ), "
            + ("within ±3σ." if ok else "NOT within ±3σ: the anchors and eps2 disagree.")
        )
    else:
        held = " Fewer than two anchors: nothing was held out, so the anchors are unchecked."
    return ReportFigure(
        path,
        "eps1 rebuilt from the measured eps2 by multiply subtractive KK (absorption outside "
        "the window from the basis fit), with ±2σ bands. Anchors (diamonds) are energies where "
        f"the reconstruction is pinned to the measured eps1, here {at} eV "
        f"(rule: {view.rule}).{held} Bottom: (measured − MSKK)/combined σ with the ±3 lines.",
        "Multiply subtractive KK",
    )


def report_figures(result, fig_dir) -> list[ReportFigure]:
    """Draw every figure of ``result`` (a :class:`kkcheck.result.JobResult`) into ``fig_dir``.

    Returns
    -------
    list of ReportFigure
        In report order: sources, KK reconstruction, residuals, and when present the MSKK
        view, the repair, the fit, passivity and the slab check.
    """
    fig_dir = Path(fig_dir)
    fig_dir.mkdir(parents=True, exist_ok=True)
    out = _data_figures(result, fig_dir) + _kk_figures(result, fig_dir)
    if getattr(result, "mskk", None) is not None:
        out.append(_mskk_figure(result.mskk, fig_dir))
    if result.repair is not None:
        out.append(_repair_figure(result, fig_dir))
    if result.fit is not None:
        out.extend(_model_figures(result, fig_dir))
    return out


def _kk_cautions(result) -> list[str]:
    """The KK test's notes, except those the standard cautions already state (by code)."""
    kk = result.kk
    out = [n for n, c in zip(kk.notes, kk.note_codes) if c not in _NOTES_SHOWN_ELSEWHERE]
    binning = getattr(result, "binning", None)
    binned = binning.note() if binning is not None else None
    if binned is not None:
        out.append(binned)
    return out


def _step_caution(c: dict) -> str:
    if not c["applied"]:
        return (
            f"Possible step in '{c['source']}' at {c['energy_ev']:.4g} eV "
            f"({c['component']} jumps {c['jump']:+.4g}): {c['reason']}."
        )
    side = "higher" if c["kept_side"] == "below" else "lower"
    return (
        f"Detector-changeover step in '{c['source']}' at {c['energy_ev']:.4g} eV: "
        f"{c['component']} jumps {c['jump']:+.4g} ({100 * c['relative']:+.1f} %); "
        f"{c['points_shifted']} points on the {side}-energy side were shifted to match "
        f"({c['reason']}). The KK test, repair and fit use the shifted values; the "
        "sources figure shows them as measured."
    )


def _cautions(result) -> list[str]:
    """Every run-specific caution, in report order."""
    s = result.summary
    out = _kk_cautions(result)
    # JobResult.warnings are "<category>: <message>"; the report shows the message
    out += [w.split(": ", 1)[-1] for w in result.warnings]
    out += [_step_caution(c) for c in s.get("step_corrections", [])]
    suspect = s["merge"].get("suspect_source")
    if suspect:
        out.append(
            f"KK consistency points at source '{suspect}' as the one that is off "
            "(see merge.reference_ranking in summary.json)."
        )
    if result.fit is not None and result.kk.regions:
        out.append(
            "The model was fitted with the KK-inconsistent regions weighing 1/100: a pole-pair "
            "model is KK consistent by construction and cannot follow them there."
        )
    return out


def _repair_rows(rep) -> dict:
    """The Repair table: points (as in the figure's legend) and values (eps1, eps2 apart)."""
    replaced, filled = _repair_masks(rep)
    return {
        "grid points": len(rep.energy_ev),
        "points replaced by the KK prediction": int(replaced.sum()),
        "points filled inside gaps": int(filled.sum()),
        "values changed (eps1 and eps2 counted apart)": len(rep.changes),
        **{f"note {i + 1}": n for i, n in enumerate(rep.notes)},
    }


def _model_block(result) -> dict:
    from ..rational.model import physical_terms

    model = dict(result.model_json)
    cert = result.fit.passivity
    if "passivity" in model and np.isfinite(getattr(cert, "min_energy_ev", np.nan)):
        # where the certificate's min eps2 lies: the passivity figure marks the same point
        model["passivity"] = {**model["passivity"], "min_energy_ev": cert.min_energy_ev}
    model["equivalents"] = [
        {"kind": t.kind, **t.as_dict()} for t in physical_terms(result.fit.model)
    ]
    return model


def _sum_rule_rows(r) -> dict:
    return {
        "window_ev": f"{r.window_ev[0]:.4g}-{r.window_ev[1]:.4g}",
        "effective plasma energy at window top [eV]": float(r.plasma_energy_ev[-1]),
        "int (n-1) dE over window [eV]": float(r.inertial_n_ev),
        "int (eps1-1) dE over window [eV]": float(r.inertial_eps1_ev),
        "full-axis value of int (eps1-1) dE [eV]": float(r.expected_inertial_eps1_ev),
        "caution": r.caution or "none",
    }


def report_context(result, figure_list=(), *, command: str = "") -> ReportContext:
    """The :class:`ReportContext` of ``result`` (a :class:`kkcheck.result.JobResult`).

    Parameters
    ----------
    result : kkcheck.result.JobResult
    figure_list : sequence of ReportFigure (or mappings with ``path``, ``caption``, ``title``)
        The figures to embed, e.g. from :func:`report_figures`.
    command : str
        The command line recorded in the provenance; default ``sys.argv`` joined.
    """
    s = result.summary
    return ReportContext(
        title=result.options.title,
        version=__version__,
        inputs=s["inputs"],
        convention=s["convention"],
        merge=s["merge"],
        outliers=s["outliers"],
        kk={**s["kk"], "threshold": _Z_THRESHOLD},
        sum_rules=_sum_rule_rows(result.sum_rules),
        repair=_repair_rows(result.repair) if result.repair is not None else None,
        model=_model_block(result) if result.model_json is not None else None,
        slab=result.slab.to_dict() if result.slab is not None else None,
        figures=tuple(figure_list),
        cautions=tuple(_cautions(result)),
        provenance={
            "command": command or " ".join(sys.argv),
            "versions": library_versions(),
            "parameters": s["parameters"],
            "date_utc": s.get("created_utc"),
        },
    )


def write_report(result, out_dir, *, command: str = "") -> list[Path]:
    """Write figures/ (PNG and PDF), report.html and summary.md into ``out_dir``."""
    out = Path(out_dir)
    figs = report_figures(result, out / "figures")
    ctx = report_context(result, figs, command=command)
    files = [f.path for f in figs]
    files += [f.path.with_suffix(".pdf") for f in figs]
    files.append(write_html_report(out / "report.html", ctx))
    files.append(write_markdown_summary(out / "summary.md", ctx))
    return files
