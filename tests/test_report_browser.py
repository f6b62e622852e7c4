"""The HTML report opened in a real browser (headless Chromium).

A report is built from closed-form data (kkcheck.materials.lorentz) with the report's own
figure functions, then:

1. a copy of the page with a small probe script injected first in <head> is loaded with
   ``--dump-dom``; the probe records every JavaScript error, failed resource load and
   console.error/console.warn call, and on the ``load`` event writes each <img>'s
   naturalWidth/naturalHeight into a <pre id="kkprobe"> element that the dumped DOM carries
   back. The report itself has no script, so the probe is the only code on the page;
2. the unmodified page is screenshot (``--screenshot``); the picture must show the
   verdict box's colours, i.e. the inline style sheet was applied.

The screenshot is kept under ``$KKCHECK_SCREENSHOT_DIR`` when that is set (CI keeps it as an
artefact), else in pytest's tmp directory.

Chromium is found as $KKCHECK_CHROMIUM, /usr/bin/chromium, or chromium / chromium-browser /
google-chrome / google-chrome-stable on PATH; without one the test is skipped, naming what
is missing. ``.ci/run`` installs Debian's ``chromium`` package.
"""

from __future__ import annotations

import html as _html
import json
import os
import re
import shutil
import struct
import subprocess
from pathlib import Path

import matplotlib.image as mimage
import numpy as np
import pytest

from kkcheck.materials import lorentz
from kkcheck.report import (
    plot_fit,
    plot_kk,
    plot_passivity,
    plot_residuals,
    write_html_report,
)

pytestmark = pytest.mark.browser

_CANDIDATES = ("chromium", "chromium-browser", "google-chrome", "google-chrome-stable")

# Flags: headless, root-safe (no sandbox inside containers), and no network activity of the
# browser's own (updates, sync, field trials).
_FLAGS = (
    "--headless",
    "--no-sandbox",
    "--disable-gpu",
    "--disable-quic",
    "--no-first-run",
    "--disable-background-networking",
    "--disable-component-update",
    "--disable-sync",
    "--disable-default-apps",
    "--disable-extensions",
    "--hide-scrollbars",
    "--mute-audio",
)

_PROBE = """<script>
(function () {
  var errs = [];
  window.addEventListener('error', function (e) {
    var t = e.target;
    if (t && t !== window && t.tagName) {
      errs.push('failed to load ' + t.tagName + ' ' + String(t.src || t.href || '').slice(0, 80));
    } else {
      errs.push('error: ' + e.message);
    }
  }, true);
  ['error', 'warn'].forEach(function (k) {
    var orig = console[k];
    console[k] = function () {
      errs.push('console.' + k + ': ' + Array.prototype.join.call(arguments, ' '));
      return orig.apply(console, arguments);
    };
  });
  window.addEventListener('load', function () {
    var imgs = [];
    document.querySelectorAll('img').forEach(function (i) {
      imgs.push({complete: i.complete, w: i.naturalWidth, h: i.naturalHeight, alt: i.alt});
    });
    var p = document.createElement('pre');
    p.id = 'kkprobe';
    p.textContent = JSON.stringify({imgs: imgs, errors: errs, title: document.title});
    document.body.appendChild(p);
  });
})();
</script>"""


def _find_chromium() -> str | None:
    env = os.environ.get("KKCHECK_CHROMIUM")
    if env:
        return env if (Path(env).is_file() or shutil.which(env)) else None
    if Path("/usr/bin/chromium").is_file():
        return "/usr/bin/chromium"
    for name in _CANDIDATES:
        found = shutil.which(name)
        if found:
            return found
    return None


def _png_size(path: Path) -> tuple[int, int]:
    # IHDR chunk layout: ISO/IEC 15948 (PNG), section 11.2.2
    data = path.read_bytes()
    return struct.unpack(">II", data[16:24])


def _run(browser: str, args: list[str], profile: Path, timeout: float = 90.0):
    cmd = [browser, *_FLAGS, f"--user-data-dir={profile}", *args]
    return subprocess.run(
        cmd, capture_output=True, text=True, timeout=timeout, stdin=subprocess.DEVNULL
    )


@pytest.fixture(scope="module")
def browser():
    found = _find_chromium()
    if found is None and os.environ.get("KKCHECK_CHROMIUM"):
        pytest.skip(f"$KKCHECK_CHROMIUM={os.environ['KKCHECK_CHROMIUM']!r} is not a program")
    if found is None:
        pytest.skip(
            "headless Chromium not found (looked for $KKCHECK_CHROMIUM, /usr/bin/chromium and "
            f"{', '.join(_CANDIDATES)} on PATH); install Debian's 'chromium' package to run "
            "the browser test of report.html"
        )
    return found


@pytest.fixture(scope="module")
def report(tmp_path_factory):
    """A full report from closed-form data: Lorentz oscillator on eps_inf = 2."""
    d = tmp_path_factory.mktemp("browser_report")
    e = np.geomspace(0.3, 8.0, 160)
    z = 2.0 + lorentz(e, 3.0, 4.2, 0.6)
    rng = np.random.default_rng(31)
    noisy = z + 0.01 * (rng.standard_normal(e.size) + 1j * rng.standard_normal(e.size))
    region = {"from_ev": 0.8, "to_ev": 1.2, "component": "eps1", "severity": 6.0}
    wide = np.geomspace(1e-3, 1e3, 600)
    figs = [
        (
            plot_kk(d / "kk", e, noisy.real, noisy.imag, z.real, z.imag, [region], "inconsistent"),
            "Kramers–Kronig test",
            "Data against the reconstruction; flagged region shaded.",
        ),
        (
            plot_residuals(d / "res", e, (noisy - z).real / 0.01, (noisy - z).imag / 0.01),
            "Residuals <normalised>",
            "Residuals in units of sigma & the ±3σ lines.",
        ),
        (plot_fit(d / "fit", e, noisy, z, (0.3, 8.0)), "Fit", "Model against data."),
        (
            plot_passivity(d / "pass", wide, lorentz(wide, 3.0, 4.2, 0.6).imag, (0.3, 8.0)),
            "Passivity",
            "ε₂ of the model from 1 meV to 1 keV.",
        ),
    ]
    ctx = {
        "title": "Browser check <script>alert('x')</script>",
        "material": "Lorentz film & co",
        "inputs": [
            {
                "path": "/data/R&D/film.csv",
                "sha256": "0f" * 32,
                "points": 160,
                "axis": "energy_ev",
                "quantity": "eps",
                "range_ev": [0.3, 8.0],
            },
        ],
        "merge": {
            "sources": [
                {
                    "name": "<img src=x onerror=alert(1)>",
                    "range_ev": [0.3, 8.0],
                    "eps1_offset": 0.0,
                    "scale": 1.0,
                }
            ],
            "gaps_ev": [],
        },
        "outliers": [],
        "kk": {
            "method": "test",
            "rms": 0.02,
            "max": 0.3,
            "noise": 0.01,
            "verdict": "inconsistent",
            "regions": [region],
        },
        "figures": [{"path": p, "title": t, "caption": c} for p, t, c in figs],
        "provenance": {"command": "kkcheck run 'a & b.toml'", "parameters": {"x": 1}},
    }
    path = write_html_report(d / "report.html", ctx)
    return path, [p for p, _, _ in figs]


def test_report_renders_in_headless_chromium(browser, report, tmp_path):
    path, pngs = report
    page = path.read_text(encoding="utf-8")
    assert "<script" not in page  # the hostile strings stayed text
    probed = tmp_path / "probed.html"
    probed.write_text(page.replace("<head>", "<head>" + _PROBE, 1), encoding="utf-8")

    res = _run(
        browser,
        [
            "--virtual-time-budget=5000",
            "--enable-logging=stderr",
            "--v=0",
            "--dump-dom",
            probed.as_uri(),
        ],
        tmp_path / "profile1",
    )
    assert res.returncode == 0, res.stderr[-2000:]
    m = re.search(r'<pre id="kkprobe">(.*?)</pre>', res.stdout, re.S)
    assert m, "the probe did not report; dumped DOM starts: " + res.stdout[:500]
    probe = json.loads(_html.unescape(m.group(1)))
    assert probe["errors"] == []
    # Chromium logs page console messages as "CONSOLE" lines on stderr: there must be none
    console = [ln for ln in res.stderr.splitlines() if ":CONSOLE" in ln]
    assert console == []
    assert probe["title"] == "Browser check <script>alert('x')</script>"
    imgs = probe["imgs"]
    assert len(imgs) == len(pngs)  # the hostile <img ...> name did not become an element
    for img, png in zip(imgs, pngs):
        assert img["complete"] and img["w"] > 0
        assert (img["w"], img["h"]) == _png_size(png)

    # screenshot of the unmodified page
    shot_dir = Path(os.environ.get("KKCHECK_SCREENSHOT_DIR") or tmp_path)
    shot_dir.mkdir(parents=True, exist_ok=True)
    shot = shot_dir / "report_screenshot.png"
    res = _run(
        browser,
        ["--window-size=1200,3000", f"--screenshot={shot}", path.as_uri()],
        tmp_path / "profile2",
    )
    assert res.returncode == 0, res.stderr[-2000:]
    assert _png_size(shot) == (1200, 3000)
    img = mimage.imread(shot)[..., :3]

    # the verdict box: background #fdecee and border/word #b00020 from report.css
    def share(rgb, tol=0.02):
        return float(np.mean(np.all(np.abs(img - np.asarray(rgb) / 255) < tol, axis=-1)))

    assert share((0xFD, 0xEC, 0xEE)) > 0.005
    assert share((0xB0, 0x00, 0x20), tol=0.06) > 1e-4
    assert img.std() > 0.05  # not a blank page


# ------------------------------------------------------------- layout at desktop and phone width

_LAYOUT_PROBE = """<script>
window.addEventListener('load', function () {
  var page = document.documentElement;
  var out = {page_overflow: page.scrollWidth - window.innerWidth, tables: []};
  document.querySelectorAll('table').forEach(function (t, i) {
    var box = t.parentElement;
    var cs = getComputedStyle(box);
    var scrolls = cs.overflowX === 'auto' || cs.overflowX === 'scroll';
    out.tables.push({
      i: i,
      head: (t.querySelector('th') || {}).textContent || '',
      table_w: t.scrollWidth,
      box_w: box.clientWidth,
      box_right: box.getBoundingClientRect().right,
      scrolls: scrolls,
    });
  });
  out.width = window.innerWidth;
  if (window.parent !== window) { window.parent.postMessage(JSON.stringify(out), '*'); return; }
  var pre = document.createElement('pre');
  pre.id = 'kklayout';
  pre.textContent = JSON.stringify(out);
  document.body.appendChild(pre);
});
</script>"""

# Headless Chromium keeps its window at least 500 px wide; a narrower viewport is an iframe of
# that width, whose page posts its measurements to this wrapper.
_NARROW_WRAPPER = """<!DOCTYPE html><html><head><meta charset="utf-8"></head><body style="margin:0">
<pre id="kklayout"></pre>
<script>
window.addEventListener('message', function (e) {
  document.getElementById('kklayout').textContent = e.data;
});
</script>
<iframe src="{src}" width="{width}" height="900" style="border:0"></iframe>
</body></html>"""


def _layout(browser: str, page: Path, width: int, tmp_path: Path) -> dict:
    probed = page.with_name(f"probed_{width}.html")
    probed.write_text(
        page.read_text(encoding="utf-8").replace("<head>", "<head>" + _LAYOUT_PROBE, 1),
        encoding="utf-8",
    )
    target = probed
    if width < 500:
        target = page.with_name(f"narrow_{width}.html")
        wrapper = _NARROW_WRAPPER.replace("{src}", probed.name).replace("{width}", str(width))
        target.write_text(wrapper, encoding="utf-8")
    res = _run(
        browser,
        ["--window-size=1400,900", "--virtual-time-budget=5000", "--dump-dom", target.as_uri()],
        tmp_path / f"profile_{width}",
    )
    assert res.returncode == 0, res.stderr[-2000:]
    m = re.search(r'<pre id="kklayout">(.+?)</pre>', res.stdout, re.S)
    assert m, "the layout probe did not report"
    lay = json.loads(_html.unescape(m.group(1)))
    assert lay["width"] == width, lay["width"]  # the viewport measured is the one asked for
    return lay


@pytest.mark.slow
@pytest.mark.parametrize("width", [1400, 420])
def test_report_tables_fit_or_scroll_in_their_own_box(browser, tmp_path, width):
    # issue 16: at 1400 px the Sources table hid its scale/offset columns, at 420 px most
    # tables were clipped. The committed demo report (reports/demo) has every table kind.
    src = Path(__file__).resolve().parent.parent / "reports" / "demo"
    page = tmp_path / "demo" / "report.html"
    shutil.copytree(src, page.parent)
    lay = _layout(browser, page, width, tmp_path)
    assert lay["tables"], "no table found"
    assert lay["page_overflow"] <= 1, lay  # the page itself never scrolls sideways
    for t in lay["tables"]:
        # each table either fits its box or its own box scrolls (no column cut off unseen),
        # and the box stays inside the window
        assert t["table_w"] <= t["box_w"] + 1 or t["scrolls"], t
        assert t["box_right"] <= lay["width"] + 1, t
