"""One self-contained HTML report: verdict first, cautions, tables, figures, provenance.

The page has no external reference of any kind: the style sheet (``report.css``, package
data) is inlined, figures are embedded as base64 ``data:image/png`` URIs, and the page carries
no script. Every string that comes from the user or from input files (source names, paths,
column names, parameters, command line) is escaped with :func:`html.escape`.

The context dict
----------------
:func:`write_html_report` and :func:`kkcheck.report.markdown.write_markdown_summary` read one
plain dict. Its top-level keys mirror ``summary.json`` and ``model.json`` (DESIGN.md), so a
caller can start from ``{**summary, "model": model}`` and add the rest. Every key is
optional; a missing section is left out of the page (and the table of contents).

``title`` : str
    Page title; default ``"kkcheck report"``.
``material`` : str
    Sample or material name, shown under the title.
``version`` : str
    kkcheck version; default :data:`kkcheck.__version__`.
``verdict`` : str
    Overrides ``kk["verdict"]`` as the headline word.
``inputs`` : list of dict
    One per input file, in input order: ``path``, ``sha256`` (hex), ``points`` (int),
    ``axis`` (e.g. ``"wavelength_nm"``), ``quantity`` (``"nk"`` or ``"eps"``), ``range_ev``
    ([lo, hi] in eV), and optionally ``name``.
``convention`` : dict
    ``detected`` (``"exp(-iwt)"`` or ``"exp(+iwt)"``) and ``converted`` (bool), optionally
    ``per_input`` (list of ``path``, ``detected``, ``converted``) to name the converted files.
``merge`` : dict
    ``sources``: list, in input order, of ``name``, ``range_ev``, ``eps1_offset``, ``scale``
    (eps_source ~ scale * eps_reference + eps1_offset); ``gaps_ev``: list of [lo, hi] [eV].
``outliers`` : list of dict
    ``energy_ev``, ``source``, ``component``, ``kind`` (``"spike"``, ``"step"``, ...), and
    any further keys (shown as extra columns, e.g. ``score``).
``kk`` : dict
    ``method``, ``anchors_ev`` (list), ``rms``, ``max``, ``noise`` (residual statistics in eps
    units), ``verdict`` (``"consistent"`` / ``"inconsistent"``), ``regions`` (list of
    ``from_ev``, ``to_ev``, ``component``, ``severity``), optionally ``chi2_dof`` and
    ``threshold`` (sigma) and ``range_ev`` (the window tested [eV]).
``sum_rules`` : dict or list of dict
    Free form: ``{name: value}``, ``{name: {field: value}}`` or a list of row dicts.
``repair`` : dict
    Free-form key/value summary of the repair (e.g. ``points_replaced``, ``points_filled``).
``model`` : dict
    As ``model.json``: ``eps_inf``, ``pairs`` (list of ``{"pole": [re, im], "residue":
    [re, im]}`` in eV), ``range_ev``, ``metrics`` (dict, e.g. ``rms_rel``, ``max_rel``),
    ``passivity`` (``certified``, ``min_eps2``, ``method``), ``stable`` (bool), and
    optionally ``equivalents``: list of dicts ``{"kind": "lorentz"|"drude"|..., <param>:
    value, ...}`` (physical-model reading of the pairs, parameters in eV).
``slab`` : dict
    ``thickness_nm`` and any further numbers (e.g. ``max_abs_dR``, ``max_abs_dT``).
``figures`` : list of dict
    ``path`` (PNG file), ``caption`` (str) and optionally ``title``.
``cautions`` : list of str
    Extra cautions appended to the standard ones.
``provenance`` : dict
    ``command`` (str or list of argv), ``date_utc`` (ISO 8601; default: now),
    ``versions`` ({package: version}; default :func:`library_versions`), ``parameters``
    (nested dict of every setting; flattened to dotted keys), ``config_path``, ``cwd``.

References
----------
.. [1] WHATWG, "HTML Living Standard", section 13.1 (syntax) — the characters escaped by
   :func:`html.escape` (``& < > " '``) are the ones that can end text or attribute content.
"""

from __future__ import annotations

import base64
import datetime as _dt
import html
import importlib.metadata
import importlib.resources
import math
import numbers
import os
import platform
import shlex
import struct
import warnings
from collections.abc import Iterable, Mapping, Sequence
from pathlib import Path

__all__ = ["write_html_report", "build_html", "library_versions", "STANDARD_CAUTIONS"]

#: Cautions shown in every report (the range-specific ones are added from the context).
STANDARD_CAUTIONS = (
    "A constant offset in ε₁ cannot be detected: the Kramers–Kronig relations fix ε₁ only up "
    "to the constant ε∞, so a uniform shift of ε₁ passes every test here.",
    "This report supports, and does not replace, licensed or professional judgment where "
    "safety depends on the result.",
)

_LIBRARIES = ("kkcheck", "numpy", "scipy", "pandas", "matplotlib", "statsmodels")


# ---------------------------------------------------------------------------------------------
# small formatting helpers (shared with markdown.py)
# ---------------------------------------------------------------------------------------------


def _e(value) -> str:
    """Escape any value for HTML text or a double-quoted attribute."""
    return html.escape("" if value is None else str(value), quote=True)


def _fmt(value, digits: int = 4) -> str:
    """Plain-text rendering of a value from the context (not escaped)."""
    if value is None:
        return "—"
    if isinstance(value, bool):
        return "yes" if value else "no"
    if isinstance(value, numbers.Integral):
        return str(int(value))
    if isinstance(value, numbers.Real):
        v = float(value)
        if math.isnan(v):
            return "NaN"
        if math.isinf(v):
            return "∞" if v > 0 else "−∞"
        return f"{v:.{digits}g}"
    if isinstance(value, numbers.Complex):
        sign = "+" if value.imag >= 0 else "−"
        return f"{_fmt(value.real, digits)} {sign} {_fmt(abs(value.imag), digits)}i"
    if isinstance(value, Mapping):
        return ", ".join(f"{k}={_fmt(v, digits)}" for k, v in value.items())
    if isinstance(value, (list, tuple)) or (
        hasattr(value, "tolist") and not isinstance(value, str)
    ):
        seq = value.tolist() if hasattr(value, "tolist") else value
        if isinstance(seq, (list, tuple)):
            return ", ".join(_fmt(v, digits) for v in seq) if seq else "(none)"
        return _fmt(seq, digits)
    return str(value)


def _range(r, unit: str = "eV") -> str:
    if r is None:
        return "—"
    try:
        lo, hi = r
    except (TypeError, ValueError):
        return _fmt(r)
    return f"{_fmt(lo)} – {_fmt(hi)} {unit}"


def _num(value) -> float | None:
    if isinstance(value, bool) or value is None:
        return None
    if isinstance(value, numbers.Real):
        return float(value)
    return None


def _flatten(d: Mapping, prefix: str = "") -> list[tuple[str, object]]:
    out: list[tuple[str, object]] = []
    for k, v in d.items():
        key = f"{prefix}.{k}" if prefix else str(k)
        if isinstance(v, Mapping) and v:
            out.extend(_flatten(v, key))
        else:
            out.append((key, v))
    return out


def _verdict_word(ctx: Mapping) -> str:
    v = ctx.get("verdict")
    if not v:
        v = (ctx.get("kk") or {}).get("verdict")
    return str(v) if v else "not tested"


def _verdict_class(word: str) -> str:
    w = word.strip().lower()
    if w == "consistent":
        return "ok"
    if w in ("inconsistent", "failed", "fail"):
        return "bad"
    return "neutral"


def _lead_sentence(ctx: Mapping) -> str:
    word = _verdict_word(ctx).lower()
    kk = ctx.get("kk") or {}
    n_regions = len(kk.get("regions") or ())
    window = _window_ev(ctx)
    where = f" over {_range(window)}" if window else ""
    if word == "consistent":
        return (
            f"The real and imaginary parts agree with each other under the Kramers–Kronig "
            f"relations within the noise{where}."
        )
    if word == "inconsistent":
        return (
            f"The real and imaginary parts disagree beyond the noise{where}, in {n_regions} "
            f"flagged region{'s' if n_regions != 1 else ''}."
        )
    if word == "not tested":
        return "No Kramers–Kronig test was run."
    return f"Kramers–Kronig test result: {word}."


def _window_ev(ctx: Mapping):
    kk = ctx.get("kk") or {}
    if kk.get("range_ev") is not None:
        return kk["range_ev"]
    lows, highs = [], []
    for src in list(ctx.get("inputs") or ()) + list((ctx.get("merge") or {}).get("sources") or ()):
        r = src.get("range_ev") if isinstance(src, Mapping) else None
        if r is not None and len(r) == 2:
            lows.append(float(r[0]))
            highs.append(float(r[1]))
    if lows:
        return (min(lows), max(highs))
    return None


def _key_numbers(ctx: Mapping) -> list[tuple[str, str]]:
    """(label, formatted value) pairs for the verdict box, most important first."""
    out: list[tuple[str, str]] = []
    kk = ctx.get("kk") or {}
    # kk rms and max are normalised residuals (units of sigma); noise is in eps units
    rms, noise = _num(kk.get("rms")), _num(kk.get("noise"))
    if rms is not None:
        out.append(("KK residual, rms [σ]", _fmt(rms, 3)))
    if _num(kk.get("max")) is not None:
        out.append(("KK residual, max [σ]", _fmt(kk["max"], 3)))
    if noise is not None:
        out.append(("noise, median σ(ε₁)", _fmt(noise, 3)))
    if _num(kk.get("chi2_dof")) is not None:
        out.append(("χ²/dof", _fmt(kk["chi2_dof"], 3)))
    if "regions" in kk:
        out.append(("flagged regions", str(len(kk.get("regions") or ()))))
    if "outliers" in ctx:
        out.append(("flagged points", str(len(ctx.get("outliers") or ()))))
    window = _window_ev(ctx)
    if window is not None:
        out.append(("data range", _range(window)))
    n_src = len(ctx.get("inputs") or (ctx.get("merge") or {}).get("sources") or ())
    if n_src:
        out.append(("sources", str(n_src)))
    model = ctx.get("model") or {}
    if model:
        out.append(("model pole pairs", str(len(model.get("pairs") or ()))))
        metrics = model.get("metrics") or {}
        if _num(metrics.get("rms_rel")) is not None:
            out.append(("model error, rms", f"{100 * float(metrics['rms_rel']):.3g} %"))
        if _num(metrics.get("max_rel")) is not None:
            out.append(("model error, max", f"{100 * float(metrics['max_rel']):.3g} %"))
        pas = model.get("passivity") or {}
        if "certified" in pas:
            out.append(("passivity certified", _fmt(bool(pas["certified"]))))
        if "stable" in model:
            out.append(("stable", _fmt(bool(model["stable"]))))
    return out


def _cautions(ctx: Mapping) -> list[str]:
    model = ctx.get("model") or {}
    fit_range = model.get("range_ev")
    out = []
    if model:
        where = f" ({_range(fit_range)})" if fit_range is not None else ""
        out.append(
            f"The fitted model holds only over its fitted range{where}. Outside that range it "
            "is an extrapolation, however smooth and passive it looks."
        )
    else:
        out.append(
            "Any model built from these data holds only over the range it was fitted to; "
            "outside it, it is an extrapolation."
        )
    window = _window_ev(ctx)
    where = f" ({_range(window)})" if window is not None else ""
    out.append(
        f"The Kramers–Kronig verdict is drawn from the measured window{where}. It cannot see "
        "absorption far outside that window, and the narrower the window, the weaker the test."
    )
    out.extend(STANDARD_CAUTIONS)
    out.extend(str(c) for c in ctx.get("cautions") or ())
    return out


def _source_rows(ctx: Mapping) -> list[dict]:
    """Join ``inputs`` and ``merge.sources`` by position (both are in input order)."""
    inputs = list(ctx.get("inputs") or ())
    merged = list((ctx.get("merge") or {}).get("sources") or ())
    rows = []
    for i in range(max(len(inputs), len(merged))):
        a = inputs[i] if i < len(inputs) else {}
        b = merged[i] if i < len(merged) else {}
        path = a.get("path", "")
        name = b.get("name") or a.get("name") or (Path(str(path)).name if path else f"#{i + 1}")
        rows.append(
            {
                "name": name,
                "path": path,
                "sha256": a.get("sha256", ""),
                "points": a.get("points"),
                "axis": a.get("axis"),
                "quantity": a.get("quantity"),
                "range_ev": b.get("range_ev", a.get("range_ev")),
                "scale": b.get("scale"),
                "eps1_offset": b.get("eps1_offset"),
            }
        )
    return rows


def _pair_rows(model: Mapping) -> list[dict]:
    """Pole pairs with derived quantities.

    Notes
    -----
    For one pair p(s) = c/(s - a) + conj(c)/(s - conj(a)) with s = -i w:
    resonance energy |a|, damping (full width) gamma = -2 Re a, and the static contribution
    p(0) = -2 Re(c / a) (infinite for a pole at 0, a conductor term).
    """
    rows = []
    for i, pair in enumerate(model.get("pairs") or ()):
        a = complex(*pair["pole"])
        c = complex(*pair["residue"])
        static = math.inf if a == 0 else -2.0 * (c / a).real
        rows.append(
            {
                "index": i + 1,
                "pole": a,
                "residue": c,
                "resonance_ev": abs(a),
                "damping_ev": -2.0 * a.real,
                "static": static,
            }
        )
    return rows


def library_versions() -> dict[str, str]:
    """Versions of Python, kkcheck and the libraries it computes with."""
    out = {"python": platform.python_version()}
    for name in _LIBRARIES:
        try:
            out[name] = importlib.metadata.version(name)
        except importlib.metadata.PackageNotFoundError:
            if name == "kkcheck":
                from .._version import __version__

                out[name] = __version__
            else:
                out[name] = "not installed"
    return out


# ---------------------------------------------------------------------------------------------
# HTML pieces
# ---------------------------------------------------------------------------------------------


def _table(
    headers: Sequence[str],
    rows: Iterable[Sequence],
    numeric: Sequence[bool] = (),
    caption: str | None = None,
) -> str:
    """Rows are sequences of already-escaped HTML cell contents."""
    num = list(numeric) + [False] * (len(headers) - len(numeric))
    head = "".join(f"<th>{_e(h)}</th>" for h in headers)
    body = []
    for row in rows:
        cells = "".join(
            f'<td class="num">{c}</td>' if num[j] else f"<td>{c}</td>" for j, c in enumerate(row)
        )
        body.append(f"<tr>{cells}</tr>")
    cap = f"<caption>{_e(caption)}</caption>" if caption else ""
    return (
        f'<div class="tablewrap"><table>{cap}<thead><tr>{head}</tr></thead>'
        f"<tbody>{''.join(body)}</tbody></table></div>"
    )


def _generic_table(rows: Sequence[Mapping], caption: str | None = None) -> str:
    keys: list[str] = []
    for r in rows:
        for k in r:
            if k not in keys:
                keys.append(k)
    body = [[_e(_fmt(r.get(k))) for k in keys] for r in rows]
    numeric = [all(_num(r.get(k)) is not None for r in rows if k in r) for k in keys]
    return _table(keys, body, numeric, caption)


def _kv_table(items: Iterable[tuple[str, object]], caption: str | None = None) -> str:
    body = [[_e(k), _e(_fmt(v))] for k, v in items]
    return _table(["quantity", "value"], body, [False, False], caption)


def _none(text: str) -> str:
    return f'<p class="none">{_e(text)}</p>'


def _section_verdict(ctx: Mapping) -> str:
    word = _verdict_word(ctx)
    cls = _verdict_class(word)
    nums = "".join(
        f'<li><span class="k">{_e(k)}</span><span class="v">{_e(v)}</span></li>'
        for k, v in _key_numbers(ctx)
    )
    conv = ctx.get("convention") or {}
    conv_note = ""
    if conv.get("converted"):
        which = [
            Path(str(p.get("path", ""))).name
            for p in conv.get("per_input") or ()
            if p.get("converted")
        ]
        who = (
            f"Input{'s' if len(which) > 1 else ''} {', '.join(which)} used"
            if which
            else "The input used"
        )
        conv_note = (
            f"<p>{_e(who)} the {_e(conv.get('detected', 'opposite'))} sign convention and "
            "{verb} converted to exp(−iωt) (ε₂ ≥ 0 for absorption) before every test.</p>"
        ).replace("{verb}", "were" if len(which) > 1 else "was")
    return (
        f'<section id="verdict" class="verdict {cls}">'
        f'<div class="word">{_e(word.upper() if cls != "neutral" else word)}</div>'
        f'<p class="lead">{_e(_lead_sentence(ctx))}</p>'
        f'<ul class="keynums">{nums}</ul>{conv_note}</section>'
    )


def _section_cautions(ctx: Mapping) -> str:
    items = "".join(f"<li>{_e(c)}</li>" for c in _cautions(ctx))
    return (
        '<aside id="cautions" class="caution" role="note"><strong>Read this before using the '
        f"results</strong><ul>{items}</ul></aside>"
    )


def _section_sources(ctx: Mapping) -> str:
    rows = _source_rows(ctx)
    if not rows:
        return _none("No sources recorded.")
    body = []
    for r in rows:
        sha = str(r["sha256"] or "")
        body.append(
            [
                _e(r["name"]),
                f'<span class="mono">{_e(r["path"])}</span>',
                f'<span class="mono" title="{_e(sha)}">{_e(sha[:12]) or "—"}</span>',
                _e(_fmt(r["points"])),
                _e(_fmt(r["axis"])),
                _e(_fmt(r["quantity"])),
                _e(_range(r["range_ev"])),
                _e(_fmt(r["scale"])),
                _e(_fmt(r["eps1_offset"])),
            ]
        )
    html_ = _table(
        ["name", "file", "sha256", "points", "axis", "quantity", "range", "scale", "ε₁ offset"],
        body,
        [False, False, False, True, False, False, True, True, True],
        caption="Scale and offset relate each source to the reference: "
        "ε_source ≈ scale · ε_reference + offset.",
    )
    gaps = (ctx.get("merge") or {}).get("gaps_ev")
    if gaps:
        html_ += _table(
            ["gap from [eV]", "gap to [eV]"],
            [[_e(_fmt(lo)), _e(_fmt(hi))] for lo, hi in gaps],
            [True, True],
            caption="Energy ranges no source covers.",
        )
    return html_


def _section_flags(ctx: Mapping) -> str:
    outliers = list(ctx.get("outliers") or ())
    if not outliers:
        return _none("No points were flagged.")
    return _generic_table(outliers, caption=f"{len(outliers)} flagged point(s), energies in eV.")


def _section_regions(ctx: Mapping) -> str:
    kk = ctx.get("kk") or {}
    parts = []
    settings = [
        (k, kk[k])
        for k in (
            "method",
            "anchors_ev",
            "threshold",
            "rms",
            "max",
            "noise",
            "chi2_dof",
            "range_ev",
        )
        if k in kk
    ]
    if settings:
        parts.append(_kv_table(settings, caption="Test settings and residual statistics."))
    regions = list(kk.get("regions") or ())
    if regions:
        parts.append(
            _generic_table(
                regions, caption="Energy ranges where ε₁ and ε₂ disagree beyond the noise."
            )
        )
    else:
        parts.append(_none("No inconsistent regions were found."))
    return "".join(parts)


def _section_sum_rules(ctx: Mapping) -> str:
    sr = ctx.get("sum_rules")
    if not sr:
        return _none("No sum rules were evaluated.")
    if isinstance(sr, Mapping):
        rows = []
        for name, v in sr.items():
            if isinstance(v, Mapping):
                rows.append({"rule": name, **v})
            else:
                rows.append({"rule": name, "value": v})
        return _generic_table(rows)
    return _generic_table(list(sr))


def _section_model(ctx: Mapping) -> str:
    model = ctx.get("model") or {}
    parts = [
        _kv_table(
            [
                ("ε∞", model.get("eps_inf")),
                ("fitted range", _range(model.get("range_ev"))),
                ("pole pairs", len(model.get("pairs") or ())),
                ("stable (all Re a < 0)", model.get("stable")),
                *[(f"passivity: {k}", v) for k, v in (model.get("passivity") or {}).items()],
                *[(f"fit: {k}", v) for k, v in (model.get("metrics") or {}).items()],
            ]
        )
    ]
    rows = _pair_rows(model)
    if rows:
        body = [
            [
                str(r["index"]),
                _e(_fmt(r["pole"].real, 6)),
                _e(_fmt(r["pole"].imag, 6)),
                _e(_fmt(r["residue"].real, 6)),
                _e(_fmt(r["residue"].imag, 6)),
                _e(_fmt(r["resonance_ev"])),
                _e(_fmt(r["damping_ev"])),
                _e(_fmt(r["static"])),
            ]
            for r in rows
        ]
        parts.append(
            _table(
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
        )
    eq = model.get("equivalents")
    if eq:
        parts.append(
            _generic_table(list(eq), caption="The same pairs read as physical terms (eV).")
        )
    return "".join(parts)


def _section_slab(ctx: Mapping) -> str:
    slab = ctx.get("slab") or {}
    items = [("thickness [nm]", slab.get("thickness_nm"))] if "thickness_nm" in slab else []
    items += [(k, v) for k, v in slab.items() if k != "thickness_nm"]
    return _kv_table(
        items,
        caption="Reflectance and transmittance of a slab computed with the "
        "data and with the model.",
    )


def _section_repair(ctx: Mapping) -> str:
    return _kv_table(_flatten(ctx.get("repair") or {}))


def _png_size(data: bytes) -> tuple[int, int] | None:
    if data[:8] != b"\x89PNG\r\n\x1a\n" or data[12:16] != b"IHDR":
        return None
    return struct.unpack(">II", data[16:24])


def _section_figures(ctx: Mapping) -> str:
    parts = []
    for i, fig in enumerate(ctx.get("figures") or (), start=1):
        path = Path(os.fspath(fig["path"]))
        title = fig.get("title") or path.stem
        caption = fig.get("caption", "")
        try:
            data = path.read_bytes()
        except OSError as exc:
            warnings.warn(
                f"figure {path} could not be read ({exc}); the report says so in its place",
                RuntimeWarning,
                stacklevel=3,
            )
            parts.append(
                f'<figure><p class="missing">Figure {i} ({_e(title)}) is missing: '
                f"{_e(path)} could not be read.</p></figure>"
            )
            continue
        size = _png_size(data)
        if size is None:
            raise ValueError(f"figure {path} is not a PNG file")
        w, h = size
        uri = "data:image/png;base64," + base64.b64encode(data).decode("ascii")
        parts.append(
            f'<figure id="fig{i}"><img src="{uri}" width="{w}" height="{h}" '
            f'alt="{_e(title)}"><figcaption><b>Figure {i}. {_e(title)}.</b> {_e(caption)}'
            "</figcaption></figure>"
        )
    return "".join(parts)


def _provenance(ctx: Mapping) -> dict:
    prov = dict(ctx.get("provenance") or {})
    prov.setdefault("date_utc", _dt.datetime.now(_dt.timezone.utc).isoformat(timespec="seconds"))
    prov.setdefault("versions", library_versions())
    cmd = prov.get("command")
    if isinstance(cmd, (list, tuple)):
        prov["command"] = shlex.join(str(c) for c in cmd)
    return prov


def _section_provenance(ctx: Mapping) -> str:
    prov = _provenance(ctx)
    items = [("date (UTC)", prov.get("date_utc"))]
    for key, label in (
        ("command", "command line"),
        ("config_path", "configuration file"),
        ("cwd", "working directory"),
    ):
        if prov.get(key):
            items.append((label, prov[key]))
    dl = "".join(f'<dt>{_e(k)}</dt><dd class="mono">{_e(v)}</dd>' for k, v in items)
    parts = [f'<dl class="prov">{dl}</dl>']
    inputs = list(ctx.get("inputs") or ())
    if inputs:
        parts.append("<h3>Input files</h3>")
        parts.append(
            _table(
                ["file", "sha256"],
                [
                    [
                        f'<span class="mono">{_e(a.get("path", ""))}</span>',
                        f'<span class="mono">{_e(a.get("sha256", ""))}</span>',
                    ]
                    for a in inputs
                ],
            )
        )
    parts.append("<h3>Software</h3>")
    parts.append(
        _table(
            ["package", "version"],
            [[_e(k), _e(v)] for k, v in dict(prov["versions"]).items()],
        )
    )
    params = prov.get("parameters") or {}
    parts.append("<h3>Parameters</h3>")
    if params:
        parts.append(
            _table(
                ["parameter", "value"],
                [
                    [f'<span class="mono">{_e(k)}</span>', _e(_fmt(v, 8))]
                    for k, v in _flatten(params)
                ],
            )
        )
    else:
        parts.append(_none("No parameters were recorded."))
    return "".join(parts)


def _css() -> str:
    return importlib.resources.files("kkcheck.report").joinpath("report.css").read_text("utf-8")


# ---------------------------------------------------------------------------------------------
# public
# ---------------------------------------------------------------------------------------------


def build_html(context: Mapping) -> str:
    """The report page as a string (see the module docstring for ``context``).

    Parameters
    ----------
    context : dict
        Plain values only; every key optional.

    Returns
    -------
    str
        A complete HTML5 document with no external references.
    """
    if not isinstance(context, Mapping):
        raise ValueError("context must be a mapping (dict)")
    ctx = context
    version = ctx.get("version")
    if not version:
        from .._version import __version__ as version
    title = ctx.get("title") or "kkcheck report"
    sub = []
    if ctx.get("material"):
        sub.append(str(ctx["material"]))
    sub.append(f"kkcheck {version}")
    prov = _provenance(ctx)
    sub.append(f"generated {prov['date_utc']}")

    sections: list[tuple[str, str, str]] = []  # (id, heading, html)
    if ctx.get("inputs") or (ctx.get("merge") or {}).get("sources"):
        sections.append(("sources", "Sources", _section_sources(ctx)))
    if "outliers" in ctx:
        sections.append(("flags", "Flagged points", _section_flags(ctx)))
    if ctx.get("kk"):
        sections.append(("kk", "Kramers–Kronig test", _section_regions(ctx)))
    if "sum_rules" in ctx:
        sections.append(("sumrules", "Sum rules", _section_sum_rules(ctx)))
    if ctx.get("repair"):
        sections.append(("repair", "Repair", _section_repair(ctx)))
    if ctx.get("model"):
        sections.append(("model", "Model parameters", _section_model(ctx)))
    if ctx.get("slab"):
        sections.append(("slab", "Slab check", _section_slab(ctx)))
    if ctx.get("figures"):
        sections.append(("figures", "Figures", _section_figures(ctx)))
    sections.append(("provenance", "Provenance", _section_provenance(ctx)))

    toc = " ".join(f'<a href="#{sid}">{_e(head)}</a>' for sid, head, _ in sections)
    body = "".join(
        f'<section id="{sid}"><h2>{_e(head)}</h2>{h}</section>' for sid, head, h in sections
    )
    return (
        "<!DOCTYPE html>\n"
        '<html lang="en"><head><meta charset="utf-8">'
        '<meta name="viewport" content="width=device-width, initial-scale=1">'
        '<meta name="generator" content="kkcheck">'
        f"<title>{_e(title)}</title><style>{_css()}</style></head><body>"
        f'<header><h1>{_e(title)}</h1><p class="subtitle">{_e(" · ".join(sub))}</p>'
        f'<nav class="toc">{toc}</nav></header>'
        f"<main>{_section_verdict(ctx)}{_section_cautions(ctx)}{body}</main>"
        "<footer>Self-contained report written by kkcheck: figures and styles are embedded; "
        "nothing is loaded from elsewhere.</footer></body></html>\n"
    )


def write_html_report(path, context: Mapping) -> Path:
    """Write the self-contained HTML report.

    Parameters
    ----------
    path : str or os.PathLike
        Output file (parent directories are created).
    context : dict
        Report content; keys in the module docstring, every key optional.

    Returns
    -------
    pathlib.Path
        The written file.
    """
    return _write_document(path, build_html(context))


def _write_document(path, text: str) -> Path:
    """Create the parent folder and write ``text`` atomically (shared with markdown.py)."""
    from ..io import write_text  # atomic: a half-written report never replaces a good one

    out = Path(os.fspath(path))
    out.parent.mkdir(parents=True, exist_ok=True)
    return write_text(out, text)
