"""Stitch several sources into one spectrum: reconcile scale and offset, blend, report gaps.

Each source (a :class:`~kkcheck.spectrum.Dataset`) is compared with the others where their
energy ranges overlap. The relation fitted is

    eps_source ~ scale * eps_reference + eps1_offset      (offset on eps1 only),

estimated by robust regression (Huber M-estimator, Huber 1964, solved by iteratively
reweighted least squares, Holland & Welsch 1977) with standard errors; it is always reported
and applied, as eps_corrected = (eps - eps1_offset) / scale, only when the data determine it
(:mod:`kkcheck.merge.decision`). Overlapping
points are then blended by inverse-variance weights on the union of the grids or kept side by
side with their source labels. Gaps in the merged axis are reported. Nothing is removed;
every point keeps its source and file row. This stage comes first: it builds on
:mod:`kkcheck.noise`, never on the clean stage.

Public API
----------
Overlap fit (:mod:`kkcheck.merge.overlap`)
    estimate_scale_offset, ScaleFit, MIN_OVERLAP_POINTS
Gaps (:mod:`kkcheck.merge.sampling`)
    find_gaps, GAP_FACTOR, GAP_MIN_REL
Merged spectrum (:mod:`kkcheck.merge.assembly`)
    merge, MergeResult, SourceReport
Whether a correction is applied (:mod:`kkcheck.merge.decision`)
    CorrectionDecision, ShapeCheck, MAX_CORRECTION
Which source is off (:mod:`kkcheck.merge.ranking`)
    rank_references, ReferenceTrial, RankMode, off_source, ranking_note

References
----------
.. [1] P. J. Huber, "Robust estimation of a location parameter," Ann. Math. Stat. 35(1),
   73-101 (1964) (the Huber norm used by statsmodels' ``HuberT``).
.. [2] P. W. Holland, R. E. Welsch, "Robust regression using iteratively reweighted
   least-squares," Commun. Stat. Theory Methods 6(9), 813-827 (1977) (IRLS, as in
   statsmodels' ``RLM``).
"""

from .assembly import MergeResult, SourceReport, merge
from .decision import MAX_CORRECTION, CorrectionDecision, ShapeCheck
from .overlap import MIN_OVERLAP_POINTS, ScaleFit, estimate_scale_offset
from .ranking import (
    RankMode,
    ReferenceTrial,
    cannot_tell,
    off_source,
    rank_references,
    ranking_note,
)
from .sampling import GAP_FACTOR, GAP_MIN_REL, find_gaps

__all__ = [
    "GAP_FACTOR",
    "GAP_MIN_REL",
    "MIN_OVERLAP_POINTS",
    "ScaleFit",
    "SourceReport",
    "MergeResult",
    "ReferenceTrial",
    "RankMode",
    "estimate_scale_offset",
    "find_gaps",
    "merge",
    "rank_references",
    "off_source",
    "cannot_tell",
    "ranking_note",
    "MAX_CORRECTION",
    "CorrectionDecision",
    "ShapeCheck",
]
