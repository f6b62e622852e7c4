"""Which source is off? Merge under each hypothesis and score its Kramers-Kronig consistency.

A plain stitch cannot tell which of several overlapping sources carries the scale error;
:func:`rank_references` merges under each hypothesis and lets a KK score decide, and
:func:`off_source` names the source when the evidence separates the candidates.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from typing import Literal

import numpy as np

from ..errors import InputError
from ..jsonsafe import json_float
from ..options import OverlapChoice, check_choice
from ..spectrum import Dataset, Spectrum
from .assembly import SourceReport, _assemble, _check, _corrections, _reports
from .overlap import (
    MIN_OVERLAP_POINTS,
    ScaleFit,
    _determined,
    _pair_fits,
    _propagate,
    estimate_scale_offset,
)

__all__ = [
    "RankMode",
    "ReferenceTrial",
    "rank_references",
    "off_source",
    "cannot_tell",
    "ranking_note",
]

#: Hypotheses of :func:`rank_references`: correct one suspect source at a time, or trust one
#: source at a time and correct all others to it.
RankMode = Literal["suspect", "reference"]


@dataclass(frozen=True)
class ReferenceTrial:
    """One hypothesis of :func:`rank_references` and the KK score of its merge.

    Attributes
    ----------
    hypothesis : str
        ``"suspect"`` (only ``source`` is corrected, to the others as measured),
        ``"reference"`` (``source`` is trusted, all others corrected to it) or
        ``"uncorrected"`` (nothing corrected; ``source`` is "").
    source : str
        The suspected or trusted source.
    score : float
        The value of ``kk_score`` on the merged spectrum (lower is more consistent).
    ratio : float
        score / best score among the trials (1 for the best) [dimensionless].
    sources : tuple of SourceReport
        The per-source scale/offset used in this trial.
    """

    hypothesis: str
    source: str
    score: float
    ratio: float
    sources: tuple[SourceReport, ...]

    def to_dict(self) -> dict:
        """The ``merge.reference_ranking[*]`` item of summary.json (NaN becomes null)."""
        return {
            "hypothesis": self.hypothesis,
            "source": self.source,
            "score": json_float(self.score),
            "ratio": json_float(self.ratio),
        }


def rank_references(
    datasets: Sequence[Dataset],
    kk_score: Callable[[Spectrum], float],
    *,
    mode: RankMode = "suspect",
    overlap: OverlapChoice = "blend",
    min_overlap_points: int = MIN_OVERLAP_POINTS,
) -> tuple[ReferenceTrial, ...]:
    """Which source is off? Merge under each hypothesis and score KK consistency.

    Parameters
    ----------
    datasets : sequence of Dataset
    kk_score : callable
        ``kk_score(spectrum) -> float``, lower meaning more KK consistent (the pipeline
        passes chi2/dof of the KK test).
    mode : {"suspect", "reference"}
        ``suspect`` (default): for each source in turn, correct only that source, fitted
        to all the others taken as measured. ``reference``: for each source in turn, trust
        it and correct all others to it (as :func:`kkcheck.merge.merge` with ``reference=``).
    overlap : {"blend", "side_by_side"}
        How every trial merge treats overlapping points (as ``merge``'s ``overlap``, same
        default); pass the choice of the merge that is analysed, so that the trials score
        the spectrum the job goes on with.
    min_overlap_points : int
        Passed to the overlap fits.

    Returns
    -------
    tuple of ReferenceTrial
        One per source plus the ``uncorrected`` baseline, sorted best (lowest score) first;
        NaN scores last.

    Notes
    -----
    Why ``suspect`` is the default: the KK relation is linear and a constant is absorbed
    by eps_inf, so if eps is KK consistent so is s eps + o for any real s and o (offset on
    eps1). Under ``reference`` mode the merged spectra of different references differ by
    exactly such a global map whenever the corrections compose consistently (a chain or a
    tree of overlaps), so a score that is itself invariant (chi2/dof with eps_inf free and
    sigmas scaled with the data) cannot tell them apart; only inconsistent loops of
    overlaps or a score with an absolute anchor can. Under ``suspect`` mode the other
    sources stay as measured: if one source is off and it is corrected, the merge is
    consistent; if a good source is "corrected" instead, the bad one still leaves its jump
    and the score is worse. With only two sources the two suspect trials are again related
    by a global map and tie: KK consistency cannot say which of two sources is off, only
    that one is (the uncorrected baseline scores worse). See :func:`off_source`.
    """
    check_choice("mode", mode, RankMode)
    names = _check(datasets, overlap)
    n = len(datasets)

    def score(corr) -> float:
        spec, _ = _assemble(datasets, names, corr, overlap)
        return float(kk_score(spec))

    unit = {i: (ScaleFit(1.0, 0.0, 0.0, 0.0, 0), 0) for i in range(n)}
    base = _reports(datasets, names, unit, -1, [False] * n)
    trials = [("uncorrected", "", score([None] * n), base)]
    if mode == "reference":
        trials += _reference_trials(datasets, names, score, min_overlap_points)
    else:
        trials += _suspect_trials(datasets, names, score, unit, min_overlap_points)
    return _ranked(trials)


def _reference_trials(datasets, names, score, min_overlap_points) -> list[tuple]:
    """Trust each source in turn and correct every other one linked to it (as merge())."""
    n = len(datasets)
    pairs = _pair_fits(datasets, min_overlap_points)
    out = []
    for r in range(n):
        fits = _propagate(n, r, pairs)
        applied = [i in fits and i != r and _determined(fits[i][0]) for i in range(n)]
        corr = _corrections(fits, applied)
        reps = _reports(datasets, names, fits, r, applied)
        out.append(("reference", names[r], score(corr), reps))
    return out


def _suspect_trials(datasets, names, score, unit, min_overlap_points) -> list[tuple]:
    """Correct each source in turn, fitted to all the others taken as measured."""
    n = len(datasets)
    out = []
    for j in range(n):
        others = [datasets[i] for i in range(n) if i != j]
        try:
            f = estimate_scale_offset(datasets[j], others, min_points=min_overlap_points)
        except InputError:
            continue  # no overlap: nothing to correct, same as the baseline
        if not _determined(f):
            continue  # merge() would not apply it either
        corr = [None] * n
        corr[j] = (f.scale, f.eps1_offset)
        fits = dict(unit)
        fits[j] = (f, f.n_points)
        applied = [i == j for i in range(n)]
        reps = _reports(datasets, names, fits, -1, applied)
        out.append(("suspect", names[j], score(corr), reps))
    return out


def _ranked(trials: list[tuple]) -> tuple[ReferenceTrial, ...]:
    """Trials sorted by score (NaN last, ties in order of trial), with score / best score."""
    finite = [t[2] for t in trials if np.isfinite(t[2])]
    best = min(finite) if finite else float("nan")
    key = [(not np.isfinite(t[2]), t[2] if np.isfinite(t[2]) else 0.0) for t in trials]
    order = sorted(range(len(trials)), key=lambda i: key[i])
    out = []
    for i in order:
        h, s, sc, reps = trials[i]
        ratio = sc / best if best > 0 else (1.0 if sc == best else float("inf"))
        out.append(ReferenceTrial(h, s, sc, float(ratio), reps))
    return tuple(out)


def off_source(trials: Sequence[ReferenceTrial], *, margin: float = 1.5) -> str | None:
    """Name of the source KK consistency singles out as off, or None when it cannot tell.

    A source is named when its ``suspect`` trial has the lowest score and both the next
    suspect trial and the uncorrected baseline score at least ``margin`` times worse
    (default 1.5). None means: nothing is off (the baseline is as good), or the evidence
    does not separate the candidates (for example two sources only).
    """
    sus = sorted((t for t in trials if t.hypothesis == "suspect"), key=lambda t: t.score)
    base = [t for t in trials if t.hypothesis == "uncorrected"]
    if len(sus) < 2 or not base or not np.isfinite(sus[0].score):
        return None
    b = sus[0].score
    if sus[1].score >= margin * b and base[0].score >= margin * b:
        return sus[0].source
    return None


def cannot_tell(trials: Sequence[ReferenceTrial], *, margin: float = 1.5) -> bool:
    """True when a correction helps but KK consistency cannot say which source is off.

    That is: :func:`off_source` names none, the best suspect trial scores ``margin`` times
    better than the uncorrected merge, and at least two suspect trials were scored.
    """
    if not trials or off_source(trials, margin=margin) is not None:
        return False
    sus = sorted((t for t in trials if t.hypothesis == "suspect"), key=lambda t: t.score)
    base = [t for t in trials if t.hypothesis == "uncorrected"]
    if len(sus) < 2 or not base or not np.isfinite(sus[0].score):
        return False
    return bool(base[0].score >= margin * sus[0].score)


def ranking_note(trials: Sequence[ReferenceTrial], *, margin: float = 1.5) -> str | None:
    """One sentence on what the ranking can say when it names no source, else None.

    Parameters
    ----------
    trials : sequence of ReferenceTrial
        The output of :func:`rank_references`.
    margin : float
        As in :func:`off_source`.

    Returns
    -------
    str or None
        None when :func:`off_source` names a source or there are no suspect trials; else
        "cannot tell which" (a correction helps but the best suspect trials score within
        ``margin`` of each other) or "finds no source off" (no correction scores ``margin``
        times better than the uncorrected merge).
    """
    if not trials or off_source(trials, margin=margin) is not None:
        return None
    sus = sorted((t for t in trials if t.hypothesis == "suspect"), key=lambda t: t.score)
    base = [t for t in trials if t.hypothesis == "uncorrected"]
    if not sus or not base or not np.isfinite(sus[0].score):
        return None
    b = sus[0].score
    if base[0].score >= margin * b:
        if not cannot_tell(trials, margin=margin):
            return None
        return (
            "KK consistency cannot tell which source is off: correcting "
            f"{sus[0].source!r} or {sus[1].source!r} gives scores within a factor "
            f"{sus[1].score / b:.3g} of each other (less than {margin:g}), so no source is named."
        )
    return (
        "KK consistency finds no source off: no single correction makes the merge more than "
        f"{margin:g} times more consistent than the data as measured, so no source is named."
    )
