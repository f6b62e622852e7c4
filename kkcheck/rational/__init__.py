"""Pole-pair (complex-conjugate pole-residue) models of eps: type, fitting, passivity, export.

Model (s = -i w, exp(-i w t), energies in eV):
eps(w) = eps_inf + sum_p [c_p/(s - a_p) + conj(c_p)/(s - conj(a_p))] (+ 2 c_0/s for conductors).

Public API
----------
Model and physical terms (``model``)
    PolePairModel, model_from_terms, drude_pairs, lorentz_pairs, debye_pairs, physical_terms
Fitting (``fit``, ``search``, ``vfit``, ``order``)
    fit_pole_pairs -> FitResult (FitResult.to_dict: the summary.json "fit" block; WEIGHTING);
    the order search over Candidate records; vector_fit, polish_poles, starting_poles; OrderRow
Passivity (``passivity``)
    certify_passivity, dense_passivity_check, enforce_passivity, pair_is_passive
Export (``io``)
    model_to_dict, model_to_json, model_from_json, parameter_table
"""

from .fit import WEIGHTING, FitResult, detect_conductor, fit_pole_pairs
from .io import ModelRecord, model_from_json, model_to_dict, model_to_json, parameter_table
from .model import (
    PhysicalTerm,
    PolePairModel,
    debye_pairs,
    drude_pairs,
    lorentz_pairs,
    model_from_terms,
    physical_terms,
)
from .order import OrderRow
from .passivity import (
    DenseCheck,
    EnforcementRecord,
    PassivityCertificate,
    certify_passivity,
    dense_passivity_check,
    enforce_passivity,
    pair_is_passive,
)
from .search import Candidate, SearchOutcome
from .vfit import PolishResult, VectorFitResult, polish_poles, starting_poles, vector_fit

__all__ = [
    "PolePairModel",
    "PhysicalTerm",
    "model_from_terms",
    "drude_pairs",
    "lorentz_pairs",
    "debye_pairs",
    "physical_terms",
    "FitResult",
    "fit_pole_pairs",
    "detect_conductor",
    "WEIGHTING",
    "Candidate",
    "SearchOutcome",
    "VectorFitResult",
    "vector_fit",
    "PolishResult",
    "polish_poles",
    "starting_poles",
    "OrderRow",
    "PassivityCertificate",
    "DenseCheck",
    "EnforcementRecord",
    "certify_passivity",
    "dense_passivity_check",
    "enforce_passivity",
    "pair_is_passive",
    "ModelRecord",
    "model_to_dict",
    "model_to_json",
    "model_from_json",
    "parameter_table",
]
