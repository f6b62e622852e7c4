"""Report figures: one function per figure, plain values in, PNG and PDF files out.

Every function draws on its own :class:`matplotlib.figure.Figure` (never ``pyplot``), writes
``<stem>.png`` at :data:`FIGURE_DPI` and ``<stem>.pdf`` next to it, and returns the PNG path;
style settings are applied inside :func:`matplotlib.rc_context` and restored on return.

Conventions (see DESIGN.md): the horizontal axis is photon energy [eV]; plots whose energy
range spans more than one decade use a logarithmic axis; the top axis of energy plots shows
the vacuum wavelength [nm] = 1239.841984 / E[eV]. eps = eps1 + i eps2 in the exp(-i w t)
convention, so a passive medium has eps2 >= 0.

Public functions, by subject
----------------------------
data (:mod:`.data`)
    plot_sources, plot_repaired
Kramers–Kronig test (:mod:`.kk`)
    plot_kk, plot_residuals
MSKK view of the KK test (:mod:`.mskk`)
    plot_mskk
model (:mod:`.fit`)
    plot_fit, plot_passivity, plot_slab

Shared: :mod:`.style` (size, resolution, the Okabe-Ito palette, rc settings, saving) and
:mod:`.axes` (energy and wavelength axes, ticks, shaded spans).
"""

from .data import plot_repaired, plot_sources
from .fit import plot_fit, plot_passivity, plot_slab
from .kk import plot_kk, plot_residuals
from .mskk import plot_mskk
from .style import FIGURE_DPI

__all__ = [
    "FIGURE_DPI",
    "plot_sources",
    "plot_kk",
    "plot_residuals",
    "plot_mskk",
    "plot_repaired",
    "plot_fit",
    "plot_passivity",
    "plot_slab",
]
