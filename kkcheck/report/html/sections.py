"""The sections of the HTML report, one function each: context in, an HTML fragment out.

Every user string is escaped (:func:`~kkcheck.report.html.tables.escape`); figures are
embedded as base64 ``data:image/png`` URIs, so a fragment never refers to another file.
"""

from __future__ import annotations

import base64
import datetime as _dt
import shlex
import struct
import warnings
from collections.abc import Mapping
from pathlib import Path

from ..context import ReportContext, library_versions
from ..format import (
    REGION_HEADERS,
    all_cautions,
    data_window_ev,
    flatten,
    fmt,
    fmt_range,
    key_numbers,
    pair_rows,
    region_cells,
    source_rows,
    verdict_word,
)
from .tables import escape, generic_table, kv_table, none_note, table

__all__ = [
    "lead_sentence",
    "provenance_record",
    "section_verdict",
    "section_cautions",
    "section_sources",
    "section_flags",
    "section_regions",
    "section_sum_rules",
    "section_repair",
    "section_model",
    "section_slab",
    "section_figures",
    "section_provenance",
]

_KK_SETTINGS = ("method", "anchors_ev", "threshold", "rms", "max", "noise", "chi2_dof", "range_ev")


def _verdict_class(word: str) -> str:
    w = word.strip().lower()
    if w == "consistent":
        return "ok"
    if w in ("inconsistent", "failed", "fail"):
        return "bad"
    return "neutral"


def lead_sentence(ctx: ReportContext) -> str:
    """The sentence under the verdict word."""
    word = verdict_word(ctx).lower()
    n_regions = len((ctx.kk or {}).get("regions") or ())
    window = data_window_ev(ctx)
    where = f" over {fmt_range(window)}" if window else ""
    if word == "consistent":
        return (
            f"The real and imaginary parts agree with each other under the Kramers–Kronig "
            f"relations within the noise{where}."
        )
    if word == "inconsistent":
        return (
            f"The real and imaginary parts disagree beyond the noise{where}, in {n_regions} "
            f"inconsistent region{'s' if n_regions != 1 else ''}."
        )
    if word == "not tested":
        return "No Kramers–Kronig test was run."
    return f"Kramers–Kronig test result: {word}."


def _convention_note(conv: Mapping) -> str:
    if not conv.get("converted"):
        return ""
    which = [
        Path(str(p.get("path", ""))).name for p in conv.get("per_input") or () if p.get("converted")
    ]
    who = (
        f"Input{'s' if len(which) > 1 else ''} {', '.join(which)} used"
        if which
        else "The input used"
    )
    return (
        f"<p>{escape(who)} the {escape(conv.get('detected', 'opposite'))} sign convention and "
        "{verb} converted to exp(−iωt) (ε₂ ≥ 0 for absorption) before every test.</p>"
    ).replace("{verb}", "were" if len(which) > 1 else "was")


def _verdict_text(ctx: ReportContext) -> str:
    """The KK verdict in one phrase with its size (``kk.verdict_text``), or ""."""
    text = (ctx.kk or {}).get("verdict_text")
    return f'<p class="vtext">{escape(text)}</p>' if text else ""


def section_verdict(ctx: ReportContext) -> str:
    """The verdict box: word, lead sentence, key numbers, sign-convention note."""
    word = verdict_word(ctx)
    cls = _verdict_class(word)
    nums = "".join(
        f'<li><span class="k">{escape(k)}</span><span class="v">{escape(v)}</span></li>'
        for k, v in key_numbers(ctx)
    )
    return (
        f'<section id="verdict" class="verdict {cls}">'
        f'<div class="word">{escape(word.upper() if cls != "neutral" else word)}</div>'
        f"{_verdict_text(ctx)}"
        f'<p class="lead">{escape(lead_sentence(ctx))}</p>'
        f'<ul class="keynums">{nums}</ul>{_convention_note(ctx.convention or {})}</section>'
    )


def section_cautions(ctx: ReportContext) -> str:
    """The caution box shown before any table."""
    items = "".join(f"<li>{escape(c)}</li>" for c in all_cautions(ctx))
    return (
        '<aside id="cautions" class="caution" role="note"><strong>Read this before using the '
        f"results</strong><ul>{items}</ul></aside>"
    )


def section_sources(ctx: ReportContext) -> str:
    """Sources with scale and offset, then the gaps."""
    rows = source_rows(ctx)
    if not rows:
        return none_note("No sources recorded.")
    body = []
    for r in rows:
        sha = str(r["sha256"] or "")
        body.append(
            [
                escape(r["name"]),
                f'<span class="mono">{escape(r["path"])}</span>',
                f'<span class="mono" title="{escape(sha)}">{escape(sha[:12]) or "—"}</span>',
                escape(fmt(r["points"])),
                escape(fmt(r["axis"])),
                escape(fmt(r["quantity"])),
                escape(fmt_range(r["range_ev"])),
                escape(fmt(r["scale"])),
                escape(fmt(r["eps1_offset"])),
            ]
        )
    html_ = table(
        ["name", "file", "sha256", "points", "axis", "quantity", "range", "scale", "ε₁ offset"],
        body,
        [False, False, False, True, False, False, True, True, True],
        caption="Scale and offset relate each source to the reference: "
        "ε_source ≈ scale · ε_reference + offset.",
    )
    gaps = (ctx.merge or {}).get("gaps_ev")
    if gaps:
        html_ += table(
            ["gap from [eV]", "gap to [eV]"],
            [[escape(fmt(lo)), escape(fmt(hi))] for lo, hi in gaps],
            [True, True],
            caption="Energy ranges no source covers.",
        )
    return html_


def section_flags(ctx: ReportContext) -> str:
    """Flagged points, one row each."""
    outliers = list(ctx.outliers or ())
    if not outliers:
        return none_note("No points were flagged.")
    return generic_table(outliers, caption=f"{len(outliers)} flagged point(s), energies in eV.")


def section_regions(ctx: ReportContext) -> str:
    """KK test settings, residual statistics, the inconsistent regions and those below the
    tolerance (significant, but too small to count), each with its size in % of |eps|."""
    kk = ctx.kk or {}
    parts = []
    settings = [(k, kk[k]) for k in _KK_SETTINGS if k in kk]
    if settings:
        parts.append(kv_table(settings, caption="Test settings and residual statistics."))
    tol = kk.get("tolerance_percent")
    tol_txt = f" (tolerance {fmt(tol, 3)} %)" if tol is not None else ""
    regions = list(kk.get("regions") or ())
    if regions:
        parts.append(
            table(
                REGION_HEADERS,
                [[escape(c) for c in region_cells(r)] for r in regions],
                [True, True, False, True, True, False, True, True, False],
                caption="Inconsistent regions: energy ranges where ε₁ and ε₂ disagree beyond "
                f"the noise by more than the tolerance{tol_txt}; deviation in % of "
                "max(|ε|, 1).",
            )
        )
    else:
        parts.append(none_note("No inconsistent regions were found."))
    small = list(kk.get("regions_within_tolerance") or ())
    if small:
        parts.append(
            table(
                REGION_HEADERS,
                [[escape(c) for c in region_cells(r)] for r in small],
                [True, True, False, True, True, False, True, True, False],
                caption="Significant beyond the noise but smaller than the tolerance"
                f"{tol_txt}: not counted in the verdict.",
            )
        )
    return "".join(parts)


def section_sum_rules(ctx: ReportContext) -> str:
    """Sum rules as one table (mapping of values, mapping of rows, or rows)."""
    sr = ctx.sum_rules
    if not sr:
        return none_note("No sum rules were evaluated.")
    if isinstance(sr, Mapping):
        rows = []
        for name, v in sr.items():
            if isinstance(v, Mapping):
                rows.append({"rule": name, **v})
            else:
                rows.append({"rule": name, "value": v})
        return generic_table(rows)
    return generic_table(list(sr))


def section_repair(ctx: ReportContext) -> str:
    """The repair summary as quantity/value rows."""
    return kv_table(flatten(ctx.repair or {}))


def _pair_table(rows: list[dict]) -> str:
    body = [
        [
            str(r["index"]),
            escape(fmt(r["pole"].real, 6)),
            escape(fmt(r["pole"].imag, 6)),
            escape(fmt(r["residue"].real, 6)),
            escape(fmt(r["residue"].imag, 6)),
            escape(fmt(r["resonance_ev"])),
            escape(fmt(r["damping_ev"])),
            escape(fmt(r["static"])),
        ]
        for r in rows
    ]
    return table(
        [
            "pair",
            "Re a [eV]",
            "Im a [eV]",
            "Re c [eV]",
            "Im c [eV]",
            "|a| [eV]",
            "γ = −2 Re a [eV]",
            "static Δε",
        ],
        body,
        [True] * 8,
        caption="ε(ω) = ε∞ + Σ [c/(s − a) + c*/(s − a*)], s = −iω, time dependence "
        "exp(−iωt); ω, a, c in eV. Static Δε = −2 Re(c/a) is the pair's "
        "contribution at ω = 0.",
    )


def section_model(ctx: ReportContext) -> str:
    """Model summary, the pole-pair table and its physical reading."""
    model = ctx.model or {}
    parts = [
        kv_table(
            [
                ("ε∞", model.get("eps_inf")),
                ("fitted range", fmt_range(model.get("range_ev"))),
                ("pole pairs", len(model.get("pairs") or ())),
                ("stable (all Re a < 0)", model.get("stable")),
                *[(f"passivity: {k}", v) for k, v in (model.get("passivity") or {}).items()],
                *[(f"fit: {k}", v) for k, v in (model.get("metrics") or {}).items()],
            ]
        )
    ]
    rows = pair_rows(model)
    if rows:
        parts.append(_pair_table(rows))
    eq = model.get("equivalents")
    if eq:
        parts.append(generic_table(list(eq), caption="The same pairs read as physical terms (eV)."))
    return "".join(parts)


def section_slab(ctx: ReportContext) -> str:
    """The slab check numbers."""
    slab = ctx.slab or {}
    items = [("thickness [nm]", slab.get("thickness_nm"))] if "thickness_nm" in slab else []
    items += [(k, v) for k, v in slab.items() if k != "thickness_nm"]
    return kv_table(
        items,
        caption="Reflectance and transmittance of a slab computed with the "
        "data and with the model.",
    )


def _png_size(data: bytes) -> tuple[int, int] | None:
    """(width, height) from the IHDR chunk (PNG spec, ISO/IEC 15948, 11.2.2), else None."""
    if data[:8] != b"\x89PNG\r\n\x1a\n" or data[12:16] != b"IHDR":
        return None
    return struct.unpack(">II", data[16:24])


def section_figures(ctx: ReportContext) -> str:
    """Every figure embedded as a data URI; an unreadable file is named in its place."""
    parts = []
    for i, fig in enumerate(ctx.figures, start=1):
        path = fig.path
        title = fig.title or path.stem
        try:
            data = path.read_bytes()
        except OSError as exc:
            warnings.warn(
                f"figure {path} could not be read ({exc}); the report says so in its place",
                RuntimeWarning,
                stacklevel=3,
            )
            parts.append(
                f'<figure><p class="missing">Figure {i} ({escape(title)}) is missing: '
                f"{escape(path)} could not be read.</p></figure>"
            )
            continue
        size = _png_size(data)
        if size is None:
            raise ValueError(f"figure {path} is not a PNG file")
        w, h = size
        uri = "data:image/png;base64," + base64.b64encode(data).decode("ascii")
        parts.append(
            f'<figure id="fig{i}"><img src="{uri}" width="{w}" height="{h}" '
            f'alt="{escape(title)}"><figcaption><b>Figure {i}. {escape(title)}.</b> '
            f"{escape(fig.caption)}</figcaption></figure>"
        )
    return "".join(parts)


def provenance_record(ctx: ReportContext) -> dict:
    """``ctx.provenance`` with its defaults (date now, library versions, command joined)."""
    prov = dict(ctx.provenance or {})
    prov.setdefault("date_utc", _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"))
    prov.setdefault("versions", library_versions())
    cmd = prov.get("command")
    if isinstance(cmd, (list, tuple)):
        prov["command"] = shlex.join(str(c) for c in cmd)
    return prov


def section_provenance(ctx: ReportContext, prov: Mapping) -> str:
    """Date, command, input digests, software versions and every parameter.

    ``prov`` is :func:`provenance_record` of ``ctx`` (computed once per page, so the date in
    the header and here agree).
    """
    items = [("date (UTC)", prov.get("date_utc"))]
    for key, label in (
        ("command", "command line"),
        ("config_path", "configuration file"),
        ("cwd", "working directory"),
    ):
        if prov.get(key):
            items.append((label, prov[key]))
    dl = "".join(f'<dt>{escape(k)}</dt><dd class="mono">{escape(v)}</dd>' for k, v in items)
    parts = [f'<dl class="prov">{dl}</dl>']
    if ctx.inputs:
        parts.append("<h3>Input files</h3>")
        cell = '<span class="mono">{}</span>'
        parts.append(
            table(
                ["file", "sha256"],
                [
                    [
                        cell.format(escape(a.get("path", ""))),
                        cell.format(escape(a.get("sha256", ""))),
                    ]
                    for a in ctx.inputs
                ],
            )
        )
    parts.append("<h3>Software</h3>")
    parts.append(
        table(
            ["package", "version"],
            [[escape(k), escape(v)] for k, v in dict(prov["versions"]).items()],
        )
    )
    params = prov.get("parameters") or {}
    parts.append("<h3>Parameters</h3>")
    if params:
        parts.append(
            table(
                ["parameter", "value"],
                [
                    [f'<span class="mono">{escape(k)}</span>', escape(fmt(v, 8))]
                    for k, v in flatten(params)
                ],
            )
        )
    else:
        parts.append(none_note("No parameters were recorded."))
    return "".join(parts)
