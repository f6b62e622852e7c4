"""Style of every report figure: size, resolution, palette, rc settings, saving, input checks.

Every figure draws on its own :class:`matplotlib.figure.Figure` (never ``pyplot``, so no
global figure registry is touched, and the caller's backend is left alone: saving by file
format uses matplotlib's Agg and PDF renderers directly), writes ``<stem>.png`` at
:data:`FIGURE_DPI` and ``<stem>.pdf`` next to it, and returns the PNG path. Style settings
(:data:`STYLE`) are applied inside :func:`matplotlib.rc_context` and restored on return.

Colours come from the Okabe-Ito palette, which stays distinguishable under the common forms
of colour blindness.

References
----------
.. [1] M. Okabe, K. Ito, "Color Universal Design (CUD): how to make figures and presentations
   that are friendly to colorblind people," J*Fly (2008); palette as tabulated in B. Wong,
   "Points of view: Color blindness," Nat. Methods 8, 441 (2011).
"""

from __future__ import annotations

import io
import os
from pathlib import Path

import numpy as np
from matplotlib.figure import Figure

from ...io.write import atomic_write_bytes

__all__ = [
    "FIGURE_DPI",
    "PALETTE",
    "DATA_COLOUR",
    "MODEL_COLOUR",
    "FLAG_COLOUR",
    "REGION_COLOUR",
    "GAP_COLOUR",
    "OK_COLOUR",
    "STYLE",
    "WIDTH_IN",
    "stem_path",
    "new_figure",
    "save",
    "real_array",
    "complex_array",
    "same_length",
]

#: Resolution of the PNG files [dots per inch]; PNG size in pixels = figure size [in] * dpi.
FIGURE_DPI = 130

#: Okabe-Ito palette (Wong 2011), in the order sources are coloured.
PALETTE = (
    "#0072B2",  # blue
    "#E69F00",  # orange
    "#009E73",  # bluish green
    "#CC79A7",  # reddish purple
    "#56B4E9",  # sky blue
    "#D55E00",  # vermillion
    "#F0E442",  # yellow
    "#000000",  # black
)
DATA_COLOUR = "#222222"
MODEL_COLOUR = "#D55E00"
FLAG_COLOUR = "#C00000"
REGION_COLOUR = "#E69F00"
GAP_COLOUR = "#9A9A9A"
OK_COLOUR = "#007A4D"

#: matplotlib rc settings of every figure (applied in an rc_context, restored after).
STYLE = {
    "font.size": 9.0,
    "axes.titlesize": 10.0,
    "axes.labelsize": 9.0,
    "legend.fontsize": 8.0,
    "xtick.labelsize": 8.0,
    "ytick.labelsize": 8.0,
    "axes.grid": True,
    "grid.alpha": 0.25,
    "grid.linewidth": 0.6,
    "lines.linewidth": 1.4,
    "lines.markersize": 3.0,
    "legend.frameon": True,
    "legend.framealpha": 0.85,
    "legend.edgecolor": "#CCCCCC",
    "pdf.fonttype": 42,  # embed TrueType so text stays text in the PDF
    "svg.fonttype": "none",
}

#: Width of every figure [in]; fits one column of an A4/Letter page at 100 %.
WIDTH_IN = 7.0


def stem_path(path_stem) -> Path:
    """``path_stem`` without a trailing .png/.pdf, parent directory created."""
    p = Path(os.fspath(path_stem))
    if p.suffix.lower() in (".png", ".pdf"):
        p = p.with_suffix("")
    p.parent.mkdir(parents=True, exist_ok=True)
    return p


def new_figure(height_in: float, width_in: float = WIDTH_IN) -> Figure:
    """A constrained-layout figure of ``width_in`` x ``height_in`` inches at FIGURE_DPI."""
    return Figure(figsize=(width_in, height_in), dpi=FIGURE_DPI, layout="constrained")


def save(fig: Figure, path_stem) -> Path:
    """Write ``<stem>.png`` and ``<stem>.pdf``; return the PNG path."""
    stem = stem_path(path_stem)
    png = Path(str(stem) + ".png")
    pdf = Path(str(stem) + ".pdf")
    # No bbox_inches="tight": the PNG keeps exactly figsize * dpi pixels; the constrained
    # layout engine keeps labels inside the canvas. Each file is rendered to bytes first and
    # written by the atomic writer (never a half-written figure, never through a symlink).
    png_bytes, pdf_bytes = io.BytesIO(), io.BytesIO()
    fig.savefig(png_bytes, dpi=FIGURE_DPI, format="png", metadata={"Software": None})
    # no creation date: the same data give byte-identical files (diffable example reports)
    fig.savefig(pdf_bytes, format="pdf", metadata={"Creator": "kkcheck", "CreationDate": None})
    atomic_write_bytes(png, png_bytes.getvalue())
    atomic_write_bytes(pdf, pdf_bytes.getvalue())
    return png


def real_array(x, name: str) -> np.ndarray:
    """``x`` as a 1-D float array (ValueError naming ``name`` otherwise)."""
    a = np.asarray(x, dtype=float)
    if a.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {a.shape}")
    return a


def complex_array(x, name: str) -> np.ndarray:
    """``x`` as a 1-D complex array (ValueError naming ``name`` otherwise)."""
    a = np.asarray(x)
    if a.ndim != 1:
        raise ValueError(f"{name} must be one-dimensional, got shape {a.shape}")
    return a.astype(complex)


def same_length(ref: np.ndarray, **others) -> None:
    """ValueError unless every array in ``others`` that is not None has ``len(ref)`` points."""
    for name, a in others.items():
        if a is not None and len(a) != len(ref):
            raise ValueError(f"{name} has {len(a)} points, the energy axis has {len(ref)}")
