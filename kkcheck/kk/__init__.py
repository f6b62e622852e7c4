"""Kramers–Kronig layer: transforms, subtractive KK, sum rules, noise and the consistency test.

Public API
----------
Transforms (exact piecewise-linear closed form; fast O(N log N) path for large N)
    eps2_to_eps1, eps1_to_eps2, k_to_n_minus_1, n_minus_1_to_k, dc_sigma_from_low_energy
    pl_kk_matrix, pl_kk_matrix_eps1_to_eps2 (dense kernel matrices)
Subtractive KK (singly / multiply subtractive, Lagrange form)
    subtractive_eps1, subtractive_result, subtractive_from_data, choose_anchors,
    SubtractiveResult
Sum rules
    sum_rules, SumRuleResult, n_eff, fsum_cumulative
Consistency test (KK-constrained basis fit, Kuzmenko 2005)
    kk_test, KKTestOptions, KKTestResult, Region, spectrum_noise
"""

from ..noise import spectrum_noise
from .consistency import KKTestOptions, KKTestResult, Region, kk_test
from .kernels import pl_kk_matrix, pl_kk_matrix_eps1_to_eps2
from .subtractive import (
    SubtractiveResult,
    choose_anchors,
    subtractive_eps1,
    subtractive_from_data,
    subtractive_result,
)
from .sumrules import SumRuleResult, fsum_cumulative, n_eff, sum_rules
from .transform import (
    dc_sigma_from_low_energy,
    eps1_to_eps2,
    eps2_to_eps1,
    k_to_n_minus_1,
    n_minus_1_to_k,
)

__all__ = [
    "eps2_to_eps1",
    "eps1_to_eps2",
    "k_to_n_minus_1",
    "n_minus_1_to_k",
    "dc_sigma_from_low_energy",
    "pl_kk_matrix",
    "pl_kk_matrix_eps1_to_eps2",
    "subtractive_eps1",
    "subtractive_result",
    "subtractive_from_data",
    "choose_anchors",
    "SubtractiveResult",
    "sum_rules",
    "SumRuleResult",
    "n_eff",
    "fsum_cumulative",
    "kk_test",
    "KKTestOptions",
    "KKTestResult",
    "Region",
    "spectrum_noise",
]
