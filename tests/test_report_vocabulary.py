"""One term per concept and the evidence first in the report (issue 16, items 2-4 of the
report): the verdict phrase and the regions' sizes, figures before the tables, long tables
collapsed, the repair counted in points and values, the passivity figure and table on the
certificate's number. The page is parsed with the standard library's html.parser."""

from __future__ import annotations

import re
from types import SimpleNamespace

import numpy as np

from kkcheck.report.assemble import _passivity_grid, _repair_masks, _repair_rows
from kkcheck.report.html import build_html
from kkcheck.report.html.tables import LONG_TABLE_ROWS
from kkcheck.report.markdown import build_markdown
from kkcheck.spectrum import Flag

_REGION = {
    "from_ev": 2.41,
    "to_ev": 2.76,
    "component": "eps1",
    "severity": 20.1,
    "label": "strong",
    "deviation_percent": 3.587,
    "dn_max": 0.0506,
    "dk_max": 0.00996,
    "exceeds_tolerance": True,
    "origin": "run",
}
_SMALL = {**_REGION, "component": "eps2", "deviation_percent": 0.544, "exceeds_tolerance": False}


def _kk_context(png=None, n_outliers=1):
    return {
        "kk": {
            "verdict": "inconsistent",
            "verdict_text": "inconsistent: 3.6 % of |eps| in eps1 at 2.41-2.76 eV (20.1 sigma)",
            "tolerance_percent": 1.0,
            "deviation_max_percent": 3.587,
            "regions": [_REGION],
            "regions_within_tolerance": [_SMALL],
        },
        "outliers": [
            {"energy_ev": 1.0 + 0.01 * i, "source": "a", "component": "eps1", "kind": "spike"}
            for i in range(n_outliers)
        ],
        "figures": [{"path": png, "title": "KK", "caption": "c"}] if png else [],
    }


def test_verdict_line_shows_verdict_text_and_regions_their_size():
    page = build_html(_kk_context())
    verdict = page[page.index('id="verdict"') : page.index('id="cautions"')]
    assert "3.6 % of |eps| in eps1 at 2.41-2.76 eV" in verdict
    assert "largest deviation [% of |ε|]" in verdict and "3.59 (tolerance 1)" in verdict
    kk = page[page.index('<section id="kk"') :]
    assert "deviation [% of |ε|]" in kk and '<td class="num">3.59</td>' in kk
    # the region below the tolerance is shown apart, saying it does not count
    assert "not counted in the verdict" in kk and '<td class="num">0.544</td>' in kk
    md = build_markdown(_kk_context())
    assert "3.6 % of \\|eps\\| in eps1" in md and "| 3.59 |" in md and "| 0.544 |" in md


def test_one_word_for_regions_and_points():
    page = build_html(_kk_context()) + build_markdown(_kk_context())
    assert "flagged region" not in page.lower()
    assert "inconsistent region" in page and "flagged points" in page


def test_figures_come_before_tables_and_long_tables_collapse(tmp_path):
    import matplotlib

    matplotlib.use("Agg", force=False)
    from matplotlib.figure import Figure

    png = tmp_path / "f.png"
    Figure(figsize=(2, 1)).savefig(png)
    page = build_html(_kk_context(png, n_outliers=LONG_TABLE_ROWS + 3))
    assert page.index('id="verdict"') < page.index('<section id="figures"') < page.index("<table")
    # the flagged-points table has more rows than LONG_TABLE_ROWS: collapsed, with its count
    flags = page[page.index('<section id="flags"') : page.index('<section id="kk"')]
    assert re.search(r"<details class=\"long\"><summary>[^<]*\(15 rows; click to show\)", flags)
    # the short regions table stays open
    kk = page[page.index('<section id="kk"') :]
    assert "<details" not in kk[: kk.index("</section>")]


def test_repair_table_and_figure_count_the_same_points():
    flags = np.zeros(10, dtype=np.int64)
    flags[[1, 2]] = int(Flag.REPLACED)
    flags[[5, 6, 7]] = int(Flag.FILLED)
    changes = tuple(range(2 * 5))  # eps1 and eps2 of each of the 5 changed points
    rep = SimpleNamespace(energy_ev=np.arange(10.0), flags=flags, changes=changes, notes=())
    replaced, filled = _repair_masks(rep)
    rows = _repair_rows(rep)
    assert rows["points replaced by the KK prediction"] == replaced.sum() == 2
    assert rows["points filled inside gaps"] == filled.sum() == 3
    assert rows["values changed (eps1 and eps2 counted apart)"] == 10


def test_passivity_grid_holds_the_certificate_minimum():
    # eps2 of one Lorentz pair, Im of w0^2 f/(w0^2 - w^2 - i w g): minimum on the grid is the
    # certificate's point, so the figure's title shows the certificate's number
    class Model:
        def eps(self, e):
            return 3.0 * 4.2**2 / (4.2**2 - e**2 - 1j * e * 0.6)

    e_min = 0.0123456
    fit = SimpleNamespace(model=Model(), passivity=SimpleNamespace(min_energy_ev=e_min))
    wide, eps2 = _passivity_grid(fit)
    assert e_min in wide and np.all(np.diff(wide) > 0)
    assert eps2[np.searchsorted(wide, e_min)] == Model().eps(np.array([e_min])).imag[0]
