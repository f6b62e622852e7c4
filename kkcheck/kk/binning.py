"""Binning large spectra before the dense KK-constrained fit: smooth stretches first, a hard cap.

The basis fit of :mod:`kkcheck.kk.consistency` is dense (time ~ M^2.5, memory ~ M^2 in the
analysed points), so spectra of tens of thousands of points are averaged down where the data
are straight within their noise; sharp features, spikes and steps keep full resolution as long
as the cap allows. The cap is hard: whatever the data, the dense fit never sees more than
``max_points`` points (memory then stays below ~1 GB), and the note says when sharp points
had to be averaged too.

References
----------
.. [1] Z. Šidák, "Rectangular confidence regions for the means of multivariate normal
   distributions," J. Am. Stat. Assoc. 62(318), 626-633 (1967) (pages from memory; the
   per-test level 1 - (1 - alpha)^(1/N) that keeps the family-wise false-alarm rate of N
   tests at alpha); see docs/references.md [Sidak1967].
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import ndtri

from ..spectrum import Flag, Spectrum

__all__ = ["BinRecord", "bin_spectrum", "bin_means", "sidak_threshold", "FAMILY_ALPHA"]

#: Family-wise false-alarm probability of the sharp-feature test: the chance that pure noise
#: keeps even one point of a whole spectrum out of the bins (common practice, no source).
FAMILY_ALPHA = 0.01


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
    sharp_threshold : float
        Threshold of the sharp-feature test in units of the noise of a second difference
        (the larger of ``sharp_sigma`` and the Šidák threshold for the number of tests).
    cap_reached : bool
        True when keeping every sharp and flagged point would have exceeded ``max_points``,
        so they were averaged too (in groups of up to ``sharp_bin_size``).
    sharp_bin_size : int
        Largest group of sharp or flagged neighbours averaged into one (1 below the cap).
    """

    points_in: int
    points_out: int
    bin_size: int
    kept_sharp: int
    kept_flagged: int
    sharp_threshold: float = 3.0
    cap_reached: bool = False
    sharp_bin_size: int = 1

    def note(self) -> str | None:
        """The sentence for the KK test's notes when points were binned, else None."""
        if self.points_out == self.points_in:
            return None
        text = (
            f"{self.points_in} points were binned to {self.points_out} for the test (up to "
            f"{self.bin_size} neighbours averaged where the data are straight within the "
            f"noise; {self.kept_sharp} points at sharp features and {self.kept_flagged} "
            "flagged points kept as measured)"
        )
        if self.cap_reached:
            text += (
                f"; the cap of the dense fit was reached: sharp and flagged points were "
                f"averaged too, up to {self.sharp_bin_size} neighbours, so features narrower "
                "than that are below the test's resolution"
            )
        return text


def sidak_threshold(n_tests: int, alpha: float = FAMILY_ALPHA) -> float:
    """Two-sided normal threshold z with P(any of ``n_tests`` |Z| > z) = ``alpha``.

    Notes
    -----
    Per-test level p = 1 - (1 - alpha)^(1/N) (Šidák 1967, exact for independent tests and
    conservative for positively correlated ones), z = Phi^-1(1 - p/2). For alpha = 0.01:
    z = 4.4 at N = 1e4, 4.9 at 1e5, 5.3 at 1e6.

    References
    ----------
    .. [1] Z. Šidák, J. Am. Stat. Assoc. 62, 626 (1967); see docs/references.md [Sidak1967].
    """
    n = max(1, int(n_tests))
    p = -np.expm1(np.log1p(-alpha) / n)
    return float(ndtri(1.0 - p / 2.0))


def _sharp(eps: np.ndarray, s1: np.ndarray, s2: np.ndarray, b: int, z_min: float):
    """Points of one source where eps1 or eps2 bends by more than the noise allows.

    The second difference y[i-st] - 2 y[i] + y[i+st] is taken at the sample spacing (st = 1)
    and at the bin width (st = b); where it exceeds z sqrt(6) sigma_i all 2 st + 1 points it
    spans are marked. z is the larger of ``z_min`` and the Šidák threshold for the number of
    differences tested (:func:`sidak_threshold`), so noise alone marks no point with
    probability 1 - :data:`FAMILY_ALPHA`, at any size. Returns (mask, z).
    """
    strides = [st for st in sorted({1, b}) if eps.size >= 2 * st + 1]
    n_tests = sum(2 * (eps.size - 2 * st) for st in strides)
    z = max(z_min, sidak_threshold(n_tests))
    mark = np.zeros(eps.size + 1, int)  # +1 / -1 at the ends of each marked span
    for st in strides:
        for y, sig in ((eps.real, s1), (eps.imag, s2)):
            d2 = np.abs(y[: -2 * st] - 2 * y[st:-st] + y[2 * st :])
            ref = np.sqrt(6.0) * np.nan_to_num(sig[st:-st], nan=np.inf)
            hit = np.flatnonzero(d2 > z * ref)
            np.add.at(mark, hit, 1)
            np.add.at(mark, hit + 2 * st + 1, -1)
    return np.cumsum(mark[:-1]) > 0, z


def _run_labels(single: np.ndarray, b_smooth: int, b_single: int) -> np.ndarray:
    """Group label of each point of one source: runs of equal ``single`` cut into bins.

    A run of n consecutive points of one kind becomes ceil(n / b) groups of nearly equal size
    (as :func:`numpy.array_split`), b = ``b_single`` for single (sharp/flagged) runs and
    ``b_smooth`` for the others. Labels are 0, 1, ... in order along the source.
    """
    n = single.size
    edge = np.flatnonzero(np.diff(single.astype(np.int8))) + 1
    starts = np.concatenate([[0], edge])
    lengths = np.diff(np.concatenate([starts, [n]]))
    b = np.where(single[starts], b_single, b_smooth)
    n_groups = -(-lengths // b)
    offset = np.concatenate([[0], np.cumsum(n_groups)[:-1]])
    run = np.repeat(np.arange(starts.size), lengths)
    local = np.arange(n) - starts[run]
    return offset[run] + (local * n_groups[run]) // lengths[run]


def _labels(spectrum: Spectrum, single_by_source, b_smooth: int, b_single: int):
    """Global group label of every point (groups never mix sources), and the group count."""
    labels = np.empty(len(spectrum), int)
    base = 0
    for idx, single in single_by_source:
        lab = _run_labels(single, b_smooth, b_single)
        labels[idx] = lab + base
        base += int(lab[-1]) + 1
    return labels, base


def _combined(spectrum: Spectrum, labels: np.ndarray, n_groups: int, s1, s2) -> Spectrum:
    """One point per group: mean energy and eps, sigma sqrt(sum sigma^2)/n, flags OR-ed.

    Groups are ordered by mean energy; each keeps the source and row of its first point.
    """
    cnt = np.bincount(labels, minlength=n_groups).astype(float)

    def mean(a):
        return np.bincount(labels, weights=a, minlength=n_groups) / cnt

    def comb(s):
        return np.sqrt(np.bincount(labels, weights=s * s, minlength=n_groups)) / cnt

    by_label = np.argsort(labels, kind="stable")
    starts = np.concatenate([[0], np.flatnonzero(np.diff(labels[by_label])) + 1])
    first = by_label[starts]
    flags = np.bitwise_or.reduceat(np.asarray(spectrum.flags, np.int64)[by_label], starts)
    energy = mean(spectrum.energy_ev)
    order = np.argsort(energy, kind="stable")
    eps = spectrum.eps
    return Spectrum(
        energy_ev=energy[order],
        eps=(mean(eps.real) + 1j * mean(eps.imag))[order],
        sigma_eps1=comb(s1)[order],
        sigma_eps2=comb(s2)[order],
        source=np.asarray(spectrum.source, int)[first][order],
        row=np.asarray(spectrum.row, int)[first][order],
        flags=flags.astype(int)[order],
        source_names=spectrum.source_names,
        source_quantity=spectrum.source_quantity,
    )


def _bin_sizes(n_single: int, n_smooth: int, b: int, max_points: int) -> tuple[int, int]:
    """(smooth bin size, single-point group size) that fit ``max_points`` (before run ends).

    Below the cap single points stay alone and smooth runs are binned by b; above it the
    single points get at most three quarters of the budget and the smooth runs the rest.
    """
    if n_single + -(-n_smooth // b) <= max_points:
        return b, 1
    budget = (3 * max_points) // 4
    b_single = 1 if n_single <= budget else -(-n_single // budget)
    room = max(1, max_points - -(-n_single // b_single))
    return max(b, -(-n_smooth // room)), b_single


def bin_spectrum(
    spectrum: Spectrum, max_points: int = 3000, *, sharp_sigma: float = 3.0
) -> tuple[Spectrum, BinRecord]:
    """Average neighbouring points so that at most ``max_points`` remain (a hard cap).

    Parameters
    ----------
    spectrum : Spectrum
        With sigma filled (run :func:`kkcheck.clean.clean` first).
    max_points : int
        Most points the result may have (>= 8); a spectrum this small or smaller is returned
        unchanged. The default 3000 keeps the dense fit near 3 s and 0.3 GB.
    sharp_sigma : float
        Least threshold of the sharp-feature test: points are kept unbinned where the second
        difference of eps1 or eps2, taken at the sample spacing and at the bin width b
        (y[i-b] - 2 y[i] + y[i+b]), exceeds z times its noise sqrt(6) sigma (with the points
        it spans), z = max(``sharp_sigma``, the Šidák threshold for the number of differences
        tested, :func:`sidak_threshold`). At the bin width this bounds the bias of a bin
        mean, about (b^2 - 1)/(24 b^2) of that difference, to ~0.2-0.4 sigma.

    Returns
    -------
    Spectrum
        Bins of consecutive points of one source: mean energy, mean eps, sigma =
        sqrt(sum sigma^2) / n, flags OR-ed, the first point's row.
    BinRecord

    Notes
    -----
    Smooth runs are binned by b = ceil(M / max_points); sharp and flagged points stay alone.
    If that leaves more than ``max_points`` points (a spectrum that is sharp everywhere), the
    sharp and flagged points get at most three quarters of the budget and are averaged in groups of
    ``sharp_bin_size``, the smooth runs in larger bins, and :meth:`BinRecord.note` says so.
    Averaging b points of a stretch where the data are straight within the noise changes
    nothing the test can see, lowers the noise by sqrt(b) and keeps the per-point weights
    honest. Binning before a fit is common practice, no published source; the threshold that
    counts the tests is Šidák's (1967). Cost O(M log M), memory O(M).

    References
    ----------
    .. [1] Z. Šidák, J. Am. Stat. Assoc. 62, 626 (1967); see docs/references.md [Sidak1967].
    """
    m = len(spectrum)
    if max_points < 8:
        raise ValueError("max_points must be at least 8")
    if m <= max_points:
        return spectrum, BinRecord(m, m, 1, 0, 0, sharp_threshold=float(sharp_sigma))
    b = int(np.ceil(m / max_points))
    s1 = np.where(np.isfinite(spectrum.sigma_eps1), spectrum.sigma_eps1, np.nan)
    s2 = np.where(np.isfinite(spectrum.sigma_eps2), spectrum.sigma_eps2, np.nan)
    flagged = (spectrum.flags & (int(Flag.SPIKE) | int(Flag.STEP))) != 0
    single_by_source = []
    n_sharp, z = 0, float(sharp_sigma)
    for s in range(len(spectrum.source_names)):
        idx = np.flatnonzero(spectrum.source == s)
        if not idx.size:
            continue
        sharp, z_s = _sharp(spectrum.eps[idx], s1[idx], s2[idx], b, sharp_sigma)
        z = max(z, z_s)
        n_sharp += int(np.count_nonzero(sharp & ~flagged[idx]))
        single_by_source.append((idx, sharp | flagged[idx]))
    n_single = sum(int(np.count_nonzero(sg)) for _, sg in single_by_source)
    b_smooth, b_single = _bin_sizes(n_single, m - n_single, b, max_points)
    labels, n_groups = _labels(spectrum, single_by_source, b_smooth, b_single)
    while n_groups > max_points:  # run ends add groups: grow the bins until the cap holds
        grow = n_groups / max_points
        b_smooth = int(np.ceil(b_smooth * grow))
        b_single = int(np.ceil(b_single * grow)) if b_single > 1 else b_single
        if b_single == 1 and n_single + len(single_by_source) > (3 * max_points) // 4:
            b_single = 2
        labels, n_groups = _labels(spectrum, single_by_source, b_smooth, b_single)
    out = _combined(spectrum, labels, n_groups, s1, s2)
    record = BinRecord(
        m,
        len(out),
        max(b_smooth, b_single),
        n_sharp,
        int(np.count_nonzero(flagged)),
        sharp_threshold=z,
        cap_reached=b_single > 1,
        sharp_bin_size=b_single,
    )
    return out, record


def bin_means(full: Spectrum, binned: Spectrum, values) -> np.ndarray:
    """Mean of ``values`` over the points of ``full`` nearest each binned point of its source."""
    out = np.ones(len(binned))
    for s in range(len(full.source_names)):
        idx = np.flatnonzero(full.source == s)
        jdx = np.flatnonzero(binned.source == s)
        if not idx.size or not jdx.size:
            continue
        eb = binned.energy_ev[jdx]
        mids = 0.5 * (eb[1:] + eb[:-1])
        lab = np.searchsorted(mids, full.energy_ev[idx])
        cnt = np.bincount(lab, minlength=jdx.size)
        out[jdx] = np.bincount(lab, weights=values[idx], minlength=jdx.size) / np.maximum(cnt, 1)
    return out
