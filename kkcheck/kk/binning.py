"""Binning large spectra before the dense KK-constrained fit: smooth stretches only.

The basis fit of :mod:`kkcheck.kk.consistency` is dense (time ~ M^2.5, memory ~ M^2 in the
analysed points), so spectra of tens of thousands of points are averaged down where the data
are straight within their noise; sharp features, spikes and steps keep full resolution.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..spectrum import Flag, Spectrum

__all__ = ["BinRecord", "bin_spectrum"]


@dataclass(frozen=True)
class BinRecord:
    """What :func:`bin_spectrum` did.

    Attributes
    ----------
    points_in, points_out : int
        Points before and after binning.
    bin_size : int
        Largest number of neighbouring points averaged into one.
    kept_sharp : int
        Points left unbinned because eps1 or eps2 bends there by more than the noise.
    kept_flagged : int
        Points left unbinned because they carry a SPIKE or STEP flag.
    """

    points_in: int
    points_out: int
    bin_size: int
    kept_sharp: int
    kept_flagged: int

    def note(self) -> str | None:
        """The sentence for the KK test's notes when points were binned, else None."""
        if self.points_out == self.points_in:
            return None
        return (
            f"{self.points_in} points were binned to {self.points_out} for the test (up to "
            f"{self.bin_size} neighbours averaged where the data are straight within the "
            f"noise; {self.kept_sharp} points at sharp features and {self.kept_flagged} "
            "flagged points kept as measured)"
        )


def _sharp(eps: np.ndarray, s1: np.ndarray, s2: np.ndarray, b: int, sharp_sigma: float):
    """Points of one source where eps1 or eps2 bends by more than ``sharp_sigma`` x noise.

    The second difference y[i-st] - 2 y[i] + y[i+st] is taken at the sample spacing (st = 1)
    and at the bin width (st = b); where it exceeds ``sharp_sigma`` x sqrt(6) sigma_i all
    2 st + 1 points it spans are marked.
    """
    sharp = np.zeros(eps.size, bool)
    for st in sorted({1, b}):  # curvature at the sample spacing and at the bin width
        if eps.size < 2 * st + 1:
            continue
        for y, sig in ((eps.real, s1), (eps.imag, s2)):
            d2 = np.abs(y[: -2 * st] - 2 * y[st:-st] + y[2 * st :])
            ref = np.sqrt(6.0) * np.nan_to_num(sig[st:-st], nan=np.inf)
            for j in np.flatnonzero(d2 > sharp_sigma * ref):
                sharp[j : j + 2 * st + 1] = True
    return sharp


def _source_groups(idx: np.ndarray, single: np.ndarray, b: int) -> list[np.ndarray]:
    """Groups of positions of one source: each ``single`` point alone, runs cut into bins.

    A run of n consecutive points that may be binned becomes ceil(n / b) groups of nearly
    equal size (:func:`numpy.array_split`).
    """
    groups: list[np.ndarray] = []
    run: list[int] = []
    for j, i in enumerate(idx):
        if single[j]:
            if run:
                groups.extend(np.array_split(np.array(run), -(-len(run) // b)))
                run = []
            groups.append(np.array([i]))
        else:
            run.append(int(i))
    if run:
        groups.extend(np.array_split(np.array(run), -(-len(run) // b)))
    return groups


def _combined(spectrum: Spectrum, groups: list[np.ndarray], s1, s2) -> Spectrum:
    """One point per group: mean energy and eps, sigma sqrt(sum sigma^2)/n, flags OR-ed."""
    cnt = np.array([g.size for g in groups], float)

    def mean(a):
        return np.array([a[g].mean() for g in groups])

    def comb(s):
        return np.array([np.sqrt(np.sum(s[g] ** 2)) for g in groups]) / cnt

    eps = spectrum.eps
    return Spectrum(
        energy_ev=mean(spectrum.energy_ev),
        eps=mean(eps.real) + 1j * mean(eps.imag),
        sigma_eps1=comb(s1),
        sigma_eps2=comb(s2),
        source=np.array([spectrum.source[g[0]] for g in groups], int),
        row=np.array([spectrum.row[g[0]] for g in groups], int),
        flags=np.array([np.bitwise_or.reduce(spectrum.flags[g]) for g in groups], int),
        source_names=spectrum.source_names,
        source_quantity=spectrum.source_quantity,
    )


def bin_spectrum(
    spectrum: Spectrum, max_points: int = 3000, *, sharp_sigma: float = 3.0
) -> tuple[Spectrum, BinRecord]:
    """Average neighbouring points of smooth stretches so that at most ~``max_points`` remain.

    Parameters
    ----------
    spectrum : Spectrum
        With sigma filled (run :func:`kkcheck.clean.clean` first).
    max_points : int
        Target number of points; a spectrum this small or smaller is returned unchanged.
    sharp_sigma : float
        Points are kept unbinned where the second difference of eps1 or eps2, taken at the
        sample spacing and at the bin width b (y[i-b] - 2 y[i] + y[i+b]), exceeds
        ``sharp_sigma`` times its noise sqrt(6) sigma (with the points it spans). At the bin
        width this bounds the bias of a bin mean, about (b^2 - 1)/(24 b^2) of that
        difference, to ~0.3 sigma.

    Returns
    -------
    Spectrum
        Bins of up to ``b = ceil(M / max_points)`` consecutive points of one source: mean
        energy, mean eps, sigma = sqrt(sum sigma^2) / n, flags OR-ed, the first point's row.
    BinRecord

    Notes
    -----
    The KK-constrained basis fit is dense (time ~ M^2.5, memory ~ M^2), which makes spectra of
    tens of thousands of points (FTIR, fine ellipsometry grids) impractical. Averaging b
    points of a stretch where the data are straight within the noise changes nothing the
    test can see, lowers the noise by sqrt(b) and keeps the per-point weights honest; sharp
    features (a narrow phonon), spikes and steps are kept at full resolution. Common practice
    (binning before a fit), no published source.
    """
    m = len(spectrum)
    if m <= max_points:
        return spectrum, BinRecord(m, m, 1, 0, 0)
    b = int(np.ceil(m / max_points))
    s1 = np.where(np.isfinite(spectrum.sigma_eps1), spectrum.sigma_eps1, np.nan)
    s2 = np.where(np.isfinite(spectrum.sigma_eps2), spectrum.sigma_eps2, np.nan)
    flagged = (spectrum.flags & (int(Flag.SPIKE) | int(Flag.STEP))) != 0
    groups: list[np.ndarray] = []
    n_sharp = 0
    for s in range(len(spectrum.source_names)):
        idx = np.flatnonzero(spectrum.source == s)
        if not idx.size:
            continue
        sharp = _sharp(spectrum.eps[idx], s1[idx], s2[idx], b, sharp_sigma)
        n_sharp += int(np.count_nonzero(sharp & ~flagged[idx]))
        groups.extend(_source_groups(idx, sharp | flagged[idx], b))
    groups.sort(key=lambda g: spectrum.energy_ev[g].mean())
    out = _combined(spectrum, groups, s1, s2)
    return out, BinRecord(m, len(out), b, n_sharp, int(np.count_nonzero(flagged)))
