"""Turn a pipeline result into the report: figures, report.html and summary.md.

This is the only place that knows both the stage result types and the report's plain-value
interface (:mod:`kkcheck.report.figures`, :mod:`kkcheck.report.html`); the numerical stages
never import it.
"""

from __future__ import annotations

import sys
from pathlib import Path

import numpy as np

from .._version import __version__
from ..slab import coherent_slab
from ..spectrum import Flag
from ..units import HC_EV_NM
from . import figures
from .html import library_versions, write_html_report
from .markdown import write_markdown_summary

__all__ = ["report_context", "write_report"]


def _figures(result, fig_dir: Path) -> list[dict]:
    fig_dir.mkdir(parents=True, exist_ok=True)
    out = []
    summary = result.summary
    sources = [
        {"name": d.name, "energy_ev": d.energy_ev, "eps1": d.eps.real, "eps2": d.eps.imag}
        for d in result.datasets
    ]
    out.append(
        {
            "path": figures.plot_sources(
                fig_dir / "sources", sources, summary["outliers"], summary["merge"]["gaps_ev"]
            ),
            "title": "Sources as read",
            "caption": "Every source as read (converted to eps, exp(-iwt)), before any scale "
            "correction; flagged spikes (x) and steps (dashed) marked, gaps hatched.",
        }
    )
    spec = result.analysed
    kk = result.kk
    regions = summary["kk"]["regions"]
    out.append(
        {
            "path": figures.plot_kk(
                fig_dir / "kk_reconstruction",
                spec.energy_ev,
                spec.eps.real,
                spec.eps.imag,
                kk.eps1_model,
                kk.eps2_model,
                regions,
                kk.verdict,
            ),
            "title": "Kramers–Kronig reconstruction",
            "caption": "Merged data against the KK-consistent reconstruction (nonnegative "
            "piecewise-linear eps2 basis extending beyond the window); inconsistent regions "
            "shaded.",
        }
    )
    out.append(
        {
            "path": figures.plot_residuals(
                fig_dir / "kk_residuals", spec.energy_ev, kk.resid1, kk.resid2, 3.0, regions
            ),
            "title": "Normalised residuals",
            "caption": "(data − reconstruction)/σ for eps1 and eps2, with the ±3σ lines.",
        }
    )
    if result.repair is not None:
        rep = result.repair
        changed = (np.asarray(rep.flags) & int(Flag.REPLACED | Flag.FILLED)) != 0
        out.append(
            {
                "path": figures.plot_repaired(
                    fig_dir / "repaired",
                    rep.energy_ev,
                    rep.eps,
                    rep.sigma_eps1,
                    rep.sigma_eps2,
                    changed,
                    spec.energy_ev,
                    spec.eps,
                ),
                "title": "Repaired spectrum",
                "caption": "KK-consistent repair with its ±1σ band; replaced and filled points "
                "circled, raw merged data in grey.",
            }
        )
    if result.fit is not None:
        f = result.fit
        e = np.asarray(result.repair.energy_ev)
        out.append(
            {
                "path": figures.plot_fit(
                    fig_dir / "fit", e, result.repair.eps, f.model.eps(e), f.range_ev
                ),
                "title": "Pole-pair model against the data",
                "caption": "The fitted pole-pair model and its relative error over the fitted "
                "range.",
            }
        )
        wide = np.geomspace(1e-3, 1e3, 2000)
        out.append(
            {
                "path": figures.plot_passivity(
                    fig_dir / "passivity", wide, f.model.eps(wide).imag, f.range_ev
                ),
                "title": "Passivity at a glance",
                "caption": "eps2 of the model from 1 meV to 1 keV; any negative value (gain) "
                "would be filled red. The certificate covers the whole axis.",
            }
        )
        if result.slab is not None:
            lo, hi = f.range_ev
            inside = (e >= lo) & (e <= hi)
            ee = e[inside]
            lam = HC_EV_NM / ee
            d = result.slab.thickness_nm
            a = coherent_slab(np.sqrt(result.repair.eps[inside]), d, lam)
            b = coherent_slab(np.sqrt(f.model.eps(ee)), d, lam)
            out.append(
                {
                    "path": figures.plot_slab(fig_dir / "slab", ee, a.R, a.T, b.R, b.T, d),
                    "title": "What the fit error does to a film",
                    "caption": f"Normal-incidence R and T of a free-standing {d:g} nm film "
                    "computed from the repaired data and from the model.",
                }
            )
    return out


def report_context(result, figure_list, *, command: str = "") -> dict:
    """The plain dict that :func:`kkcheck.report.html.write_html_report` reads."""
    s = result.summary
    ctx = {
        "title": result.options.title,
        "version": __version__,
        "inputs": s["inputs"],
        "convention": s["convention"],
        "merge": s["merge"],
        "outliers": s["outliers"],
        "kk": {**s["kk"], "threshold": 3.0},
        "sum_rules": _sum_rule_rows(result.sum_rules),
        "figures": [{**f, "path": str(f["path"])} for f in figure_list],
        "cautions": [n for n in s["kk"].get("notes", []) if not n.startswith("a constant offset")]
        + [w.split(": ", 1)[-1] for w in s.get("warnings", [])],
        "provenance": {
            "command": command or " ".join(sys.argv),
            "versions": library_versions(),
            "parameters": s["parameters"],
            "date_utc": s.get("created_utc"),
        },
    }
    for c in s.get("step_corrections", []):
        side = "higher" if c["kept_side"] == "below" else "lower"
        if not c["applied"]:
            ctx["cautions"].append(
                f"Possible step in '{c['source']}' at {c['energy_ev']:.4g} eV "
                f"({c['component']} jumps {c['jump']:+.4g}): {c['reason']}."
            )
            continue
        ctx["cautions"].append(
            f"Detector-changeover step in '{c['source']}' at {c['energy_ev']:.4g} eV: "
            f"{c['component']} jumps {c['jump']:+.4g} ({100 * c['relative']:+.1f} %); "
            f"{c['points_shifted']} points on the {side}-energy side were shifted to match "
            f"({c['reason']}). The KK test, repair and fit use the shifted values; the "
            "sources figure shows them as measured."
        )
    suspect = s["merge"].get("suspect_source")
    if suspect:
        ctx["cautions"].append(
            f"KK consistency points at source '{suspect}' as the one that is off "
            "(see merge.reference_ranking in summary.json)."
        )
    if result.repair is not None:
        ctx["repair"] = {
            "points": len(result.repair.energy_ev),
            "values changed": len(result.repair.changes),
            **{f"note {i + 1}": n for i, n in enumerate(result.repair.notes)},
        }
    if result.model is not None:
        from ..rational.model import physical_terms

        model = dict(result.model)
        model["equivalents"] = [
            {"kind": t.kind, **t.as_dict()} for t in physical_terms(result.fit.model)
        ]
        ctx["model"] = model
    if result.fit is not None and result.kk.regions:
        ctx["cautions"].append(
            "The model was fitted with the KK-inconsistent regions weighing 1/100: a pole-pair "
            "model is KK consistent by construction and cannot follow them there."
        )
    if "slab" in s:
        ctx["slab"] = s["slab"]
    return ctx


def _sum_rule_rows(r) -> dict:
    return {
        "window_ev": f"{r.window_ev[0]:.4g}-{r.window_ev[1]:.4g}",
        "effective plasma energy at window top [eV]": float(r.plasma_energy_ev[-1]),
        "int (n-1) dE over window [eV]": float(r.inertial_n_ev),
        "int (eps1-1) dE over window [eV]": float(r.inertial_eps1_ev),
        "full-axis value of int (eps1-1) dE [eV]": float(r.expected_inertial_eps1_ev),
        "caution": r.caution or "none",
    }


def write_report(result, out_dir, *, command: str = "") -> list[Path]:
    """Write figures/ (PNG and PDF), report.html and summary.md into ``out_dir``."""
    out = Path(out_dir)
    figs = _figures(result, out / "figures")
    ctx = report_context(result, figs, command=command)
    files = [Path(f["path"]) for f in figs]
    files += [Path(f["path"]).with_suffix(".pdf") for f in figs]
    files.append(write_html_report(out / "report.html", ctx))
    files.append(write_markdown_summary(out / "summary.md", ctx))
    return files
