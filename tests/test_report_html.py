"""HTML report and Markdown summary: self-contained, escaped, verdict first, tolerant.

The page is parsed with the standard library's html.parser (an HTML tokenizer outside the
project), so the checks look at real tags and attributes, not at substrings only.
"""

from __future__ import annotations

import base64
import dataclasses
import math
from html.parser import HTMLParser
from types import SimpleNamespace

import numpy as np
import pytest

from kkcheck.materials import lorentz
from kkcheck.report import (
    ReportContext,
    ReportFigure,
    build_html,
    build_markdown,
    library_versions,
    plot_passivity,
    write_html_report,
    write_markdown_summary,
)
from kkcheck.report.assemble import _kk_cautions
from kkcheck.report.format import pair_rows

HOSTILE = "<script>alert(1)</script>"
AMP_PATH = "/data/R&D/vis & nir.csv"


class _Tags(HTMLParser):
    """Collects (tag, attrs) for every start tag and the text of the whole page."""

    def __init__(self):
        super().__init__(convert_charrefs=True)
        self.tags: list[tuple[str, dict]] = []
        self.text: list[str] = []

    def handle_starttag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_startendtag(self, tag, attrs):
        self.tags.append((tag, dict(attrs)))

    def handle_data(self, data):
        self.text.append(data)


def _parse(page: str) -> _Tags:
    p = _Tags()
    p.feed(page)
    p.close()
    return p


def _lorentz_pair(strength, w0, gamma):
    """Pole pair of a Lorentz oscillator, s = -i w (DESIGN.md convention).

    strength*w0^2/(w0^2 - w^2 - i w gamma) = strength*w0^2/(s^2 + gamma s + w0^2); its poles are
    a = -gamma/2 +- i*sqrt(w0^2 - gamma^2/4) and the residue at a is strength*w0^2/(a - conj(a)).
    """
    a = complex(-gamma / 2, math.sqrt(w0**2 - gamma**2 / 4))
    c = strength * w0**2 / (a - a.conjugate())
    return a, c


@pytest.fixture(scope="module")
def figure_png(tmp_path_factory):
    e = np.geomspace(1e-3, 1e3, 400)
    return plot_passivity(
        tmp_path_factory.mktemp("fig") / "passivity", e, lorentz(e, 3.0, 4.2, 0.6).imag
    )


def _context(figure_png):
    a, c = _lorentz_pair(3.0, 4.2, 0.6)
    return {
        "title": "Report for " + HOSTILE,
        "material": "film & substrate",
        "inputs": [
            {
                "path": AMP_PATH,
                "sha256": "a1" * 32,
                "points": 150,
                "axis": "wavelength_nm",
                "quantity": "nk",
                "range_ev": [0.6, 3.0],
            },
            {
                "path": "/data/uv.txt",
                "sha256": "b2" * 32,
                "points": 120,
                "axis": "energy_ev",
                "quantity": "eps",
                "range_ev": [2.8, 6.5],
            },
        ],
        "convention": {"detected": "exp(+iwt)", "converted": True},
        "merge": {
            "sources": [
                {"name": HOSTILE, "range_ev": [0.6, 3.0], "eps1_offset": 0.0, "scale": 1.0},
                {"name": "uv", "range_ev": [2.8, 6.5], "eps1_offset": 0.012, "scale": 1.02},
            ],
            "gaps_ev": [[3.0, 3.05]],
        },
        "outliers": [
            {"energy_ev": 1.25, "source": HOSTILE, "component": "eps1", "kind": "spike"},
        ],
        "kk": {
            "method": "pl-nnls",
            "anchors_ev": [],
            "rms": 0.031,
            "max": 0.42,
            "noise": 0.01,
            "verdict": "inconsistent",
            "regions": [{"from_ev": 0.8, "to_ev": 1.2, "component": "eps1", "severity": 8.0}],
        },
        "sum_rules": {"f-sum": {"n_eff": 3.1, "expected": 3.0}},
        "model": {
            "eps_inf": 2.0,
            "pairs": [{"pole": [a.real, a.imag], "residue": [c.real, c.imag]}],
            "range_ev": [0.6, 6.5],
            "metrics": {"rms_rel": 0.002, "max_rel": 0.004},
            "passivity": {"certified": True, "min_eps2": 0.0, "method": "test"},
            "stable": True,
        },
        "slab": {"thickness_nm": 100.0, "max_abs_dR": 0.002},
        "figures": [
            {
                "path": figure_png,
                "title": "Passivity of " + HOSTILE,
                "caption": "eps2 > 0 & no gain",
            }
        ],
        "provenance": {
            "command": ["kkcheck", "run", "cfg & more.toml"],
            "parameters": {"kk": {"threshold": 3.0}, "fit": {"max_pairs": 6}},
        },
    }


def test_lorentz_pair_helper_matches_closed_form():
    # the helper above against kkcheck.materials.lorentz (closed form), s = -i w
    a, c = _lorentz_pair(3.0, 4.2, 0.6)
    w = np.array([0.5, 2.0, 4.2, 9.0])
    s = -1j * w
    pair = c / (s - a) + np.conj(c) / (s - np.conj(a))
    np.testing.assert_allclose(pair, lorentz(w, 3.0, 4.2, 0.6), rtol=1e-12)


def test_pair_table_reads_lorentz_parameters():
    # a Lorentz term's static contribution is its strength, its pole modulus w0 and
    # -2 Re a its damping gamma (closed form of the damped oscillator)
    a, c = _lorentz_pair(3.0, 4.2, 0.6)
    row = pair_rows({"pairs": [{"pole": [a.real, a.imag], "residue": [c.real, c.imag]}]})[0]
    assert row["static"] == pytest.approx(3.0, rel=1e-12)
    assert row["resonance_ev"] == pytest.approx(4.2, rel=1e-12)
    assert row["damping_ev"] == pytest.approx(0.6, rel=1e-12)
    # a pole at zero (conductor term) has an unbounded static contribution
    assert math.isinf(pair_rows({"pairs": [{"pole": [0, 0], "residue": [1, 0]}]})[0]["static"])


def test_single_file_without_external_references(tmp_path, figure_png):
    out = write_html_report(tmp_path / "r" / "report.html", _context(figure_png))
    assert out == tmp_path / "r" / "report.html"
    assert [p.name for p in (tmp_path / "r").iterdir()] == ["report.html"]
    page = out.read_text(encoding="utf-8")
    tags = _parse(page).tags
    names = [t for t, _ in tags]
    # nothing that loads another resource or runs code
    for forbidden in ("script", "link", "iframe", "object", "embed", "base"):
        assert forbidden not in names, forbidden
    imgs = [a for t, a in tags if t == "img"]
    assert len(imgs) == 1
    prefix = "data:image/png;base64,"
    assert imgs[0]["src"].startswith(prefix)
    assert base64.b64decode(imgs[0]["src"][len(prefix) :]) == figure_png.read_bytes()
    for _, attrs in tags:
        for key in ("src", "href"):
            v = attrs.get(key)
            if v is not None:
                assert v.startswith(("data:", "#")), v
    assert "url(" not in page and "@import" not in page
    assert "http://" not in page and "https://" not in page


def test_user_strings_are_escaped(figure_png):
    page = build_html(_context(figure_png))
    assert HOSTILE not in page
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in page
    assert "R&D" not in page and "/data/R&amp;D/vis &amp; nir.csv" in page
    assert "cfg &amp; more.toml" in page
    parsed = _parse(page)
    assert "script" not in [t for t, _ in parsed.tags]
    # after the parser decodes the escapes, the original strings come back as plain text
    text = "".join(parsed.text)
    assert HOSTILE in text and AMP_PATH in text


def test_verdict_and_cautions_come_before_tables(figure_png):
    page = build_html(_context(figure_png))
    i_verdict = page.index('id="verdict"')
    i_caution = page.index('id="cautions"')
    i_table = page.index("<table")
    assert i_verdict < i_caution < i_table
    assert "INCONSISTENT" in page[i_verdict:i_caution]
    caution = page[i_caution:i_table]
    assert "holds only over its fitted range (0.6 – 6.5 eV)" in caution
    assert "cannot see absorption far outside" in caution
    assert "constant offset in ε₁" in caution
    assert "professional judgment" in caution
    # converted sign convention is stated up front
    assert "exp(+iwt)" in page[i_verdict:i_caution]
    # the evidence first (issue 16): figures right after the verdict and the cautions
    sections = ("figures", "sources", "flags", "kk", "sumrules", "model", "slab", "provenance")
    order = [page.index(f'<section id="{s}"') for s in sections]
    assert order == sorted(order)


def test_tables_and_provenance_content(figure_png):
    ctx = _context(figure_png)
    page = build_html(ctx)
    # full sha256 in provenance, 12-character short form in the sources table
    assert "a1" * 32 in page and ">" + "a1" * 6 + "<" in page
    versions = library_versions()
    import numpy

    assert versions["numpy"] == numpy.__version__
    assert f"<td>numpy</td><td>{numpy.__version__}</td>" in page
    assert "kk.threshold" in page and "fit.max_pairs" in page
    assert "kkcheck run &#x27;cfg &amp; more.toml&#x27;" in page  # shlex.join quoting
    assert "3.05" in page  # gap table
    # the derived Lorentz reading of the pair: static 3, |a| 4.2, damping 0.6
    model = page[page.index('<section id="model"') : page.index('<section id="slab"')]
    for cell in (">3<", ">4.2<", ">0.6<"):
        assert cell in model, cell


def test_missing_sections_are_tolerated(tmp_path):
    page = build_html({})
    assert "not tested" in page and 'id="provenance"' in page
    assert 'id="model"' not in page and 'id="figures"' not in page
    # check-only context: no model, caution still general
    check_only = {
        "kk": {"verdict": "consistent", "rms": 0.01, "noise": 0.01, "regions": []},
        "outliers": [],
    }
    page = build_html(check_only)
    assert "CONSISTENT" in page and 'id="model"' not in page
    assert "No points were flagged." in page and "No inconsistent regions" in page
    with pytest.warns(RuntimeWarning, match="could not be read"):
        page = build_html({"figures": [{"path": tmp_path / "nope.png", "caption": "x"}]})
    assert "is missing" in page and "<img" not in page
    with pytest.raises(ValueError, match="mapping"):
        build_html([1, 2])


def test_markdown_summary(tmp_path, figure_png):
    ctx = _context(figure_png)
    out = write_markdown_summary(tmp_path / "summary.md", ctx)
    md = out.read_text(encoding="utf-8")
    assert md.index("## Verdict") < md.index("**inconsistent**") < md.index("## Model")
    assert "| pair | Re a [eV] | Im a [eV]" in md
    a, c = _lorentz_pair(3.0, 4.2, 0.6)
    assert f"| 1 | {a.real:.8g} | {a.imag:.8g} | {c.real:.8g} | {c.imag:.8g} |" in md
    assert "holds only over its fitted range (0.6 – 6.5 eV)" in md
    assert HOSTILE not in md and r"\<script\>alert(1)\</script\>" in md
    # every table row has the same number of unescaped pipes as its header
    for block in md.split("\n\n"):
        rows = [r for r in block.splitlines() if r.startswith("|")]
        if rows:
            counts = {r.replace(r"\|", "").count("|") for r in rows}
            assert len(counts) == 1, block
    # and without a model there is no model section, the verdict is still there
    md2 = build_markdown({"kk": {"verdict": "consistent"}})
    assert "**consistent**" in md2 and "## Model" not in md2


def test_report_context_is_frozen_and_equivalent_to_a_mapping(figure_png):
    ctx = _context(figure_png)
    rc = ReportContext.from_mapping(ctx)
    assert isinstance(rc.figures[0], ReportFigure) and rc.figures[0].path == figure_png
    with pytest.raises(dataclasses.FrozenInstanceError):
        rc.title = "other"
    with pytest.raises(TypeError):
        rc.kk["verdict"] = "consistent"  # mapping fields are read-only views
    # the page and the summary do not depend on how the context was given
    date = {"date_utc": "2020-01-01T00:00:00+00:00"}
    fixed = {**ctx, "provenance": {**ctx["provenance"], **date}}
    assert build_html(ReportContext.from_mapping(fixed)) == build_html(fixed)
    assert build_markdown(ReportContext.from_mapping(fixed)) == build_markdown(fixed)
    # outliers given as None still mean "screening ran, nothing flagged"; absent means no section
    assert ReportContext.from_mapping({"outliers": None}).outliers == ()
    assert ReportContext.from_mapping({}).outliers is None
    assert "No points were flagged." in build_html({"outliers": None})
    with pytest.raises(ValueError, match="mapping"):
        ReportContext.from_mapping([("title", "x")])


def test_kk_cautions_are_picked_by_code_not_by_text():
    # a note coded "constant_offset" is left out whatever its wording (the standard caution
    # states it); a note that only reads like it but carries another code is kept
    kk = SimpleNamespace(
        notes=("offset of eps1: not detectable", "a constant offset look-alike", "gap note"),
        note_codes=("constant_offset", "gap", "gap"),
    )
    binning = SimpleNamespace(note=lambda: "binned note")  # the binning record's own note
    result = SimpleNamespace(kk=kk, binning=binning)
    assert _kk_cautions(result) == ["a constant offset look-alike", "gap note", "binned note"]
