"""model.json (schema "kkcheck.model/1", README.md "Outputs") and a readable parameter table."""

from __future__ import annotations

import json
from dataclasses import dataclass

import numpy as np

from ..errors import InputError
from ..options import FrequencyUnitChoice, check_choice
from ..units import HBAR_EV_S
from .model import PolePairModel, physical_terms
from .vfit import EPS_INF_MIN

__all__ = [
    "ModelRecord",
    "model_to_dict",
    "model_to_json",
    "model_from_json",
    "parameter_table",
    "SCHEMA",
    "FORM",
]

SCHEMA = "kkcheck.model/1"
FORM = (
    "eps(w) = eps_inf + sum_p [c_p/(s - a_p) + conj(c_p)/(s - conj(a_p))], s = -i w, "
    "time dependence exp(-i w t)"
)
_UNITS = {"eV": 1.0, "rad/s": 1.0 / HBAR_EV_S}


@dataclass(frozen=True)
class ModelRecord:
    """A model read back from model.json, energies converted to eV.

    Attributes
    ----------
    model : PolePairModel
        The model (poles and residues in eV; a pair with pole 0 is the conductor term).
    range_ev : tuple of float
        Fitted range [eV].
    metrics : dict
        Fit metrics as written (rms_rel, max_rel, ...).
    passivity : dict
        {"certified", "min_eps2", "method", ...} as written.
    stable : bool
        Stability flag as written.
    """

    model: PolePairModel
    range_ev: tuple
    metrics: dict
    passivity: dict
    stable: bool


def model_to_dict(result, frequency_unit: str = "eV") -> dict:
    """The model.json document of a :class:`~kkcheck.rational.fit.FitResult` as a plain dict.

    Parameters
    ----------
    result : FitResult
        Fit to export.
    frequency_unit : {"eV", "rad/s"}
        Unit of poles and residues; rad/s uses omega = E / hbar, hbar = 6.582119569e-16 eV s.

    Notes
    -----
    The conductor term 2 c_0/s is written as a pair with pole [0, 0] and residue [c_0, 0],
    which the form string covers (c/(s - 0) + conj(c)/(s - 0) = 2 c_0 / s).
    """
    k = _UNITS[check_choice("frequency_unit", frequency_unit, FrequencyUnitChoice)]
    m = result.model
    pairs = [
        {
            "pole": [float(a.real * k), float(a.imag * k)],
            "residue": [float(c.real * k), float(c.imag * k)],
        }
        for a, c in zip(m.poles, m.residues, strict=True)
    ]
    if m.conductor_residue is not None:
        pairs.append({"pole": [0.0, 0.0], "residue": [float(m.conductor_residue * k), 0.0]})
    metrics = {"rms_rel": result.rms_rel, "max_rel": result.max_rel, "n_pairs": result.n_pairs}
    if result.chi2_dof is not None:
        metrics["chi2_dof"] = result.chi2_dof
    enf = result.enforcement
    metrics["enforcement"] = {
        "needed": enf.needed,
        "rms_rel_before": enf.rms_rel_before,
        "rms_rel_after": enf.rms_rel_after,
    }
    cert = result.passivity
    return {
        "schema": SCHEMA,
        "form": FORM,
        "frequency_unit": frequency_unit,
        "eps_inf": m.eps_inf,
        "pairs": pairs,
        "range_ev": [float(result.range_ev[0]), float(result.range_ev[1])],
        "metrics": metrics,
        "passivity": {
            "certified": bool(cert.certified),
            "min_eps2": float(cert.min_eps2),
            "method": cert.method,
            "crossing_energies_ev": [float(x) for x in cert.crossing_energies_ev],
            "margin_rel": _finite(cert.margin_rel),
            "exact_roots": cert.exact_roots,
            "decided_for": "the eV parameters as stored (float64); a rad/s export is "
            "rounded once more, which can matter only when margin_rel is near 0",
        },
        "stable": bool(result.stable),
        "terms": [{"kind": t.kind, **t.as_dict()} for t in physical_terms(m)],
        "eps_inf_bound": EPS_INF_MIN,
        "device": None if result.device is None else result.device.to_dict(),
        "note": None
        if cert.certified
        else "NOT CERTIFIED PASSIVE: not a fit to use in a time-domain solver",
    }


def _finite(x: float):
    return float(x) if np.isfinite(x) else None


def model_to_json(result, frequency_unit: str = "eV") -> str:
    """model.json text (indented) of a FitResult; see :func:`model_to_dict`."""
    return json.dumps(model_to_dict(result, frequency_unit), indent=2)


def model_from_json(text: str) -> ModelRecord:
    """Read model.json text back into a :class:`ModelRecord` (energies in eV)."""
    try:
        d = json.loads(text)
    except json.JSONDecodeError as exc:
        raise InputError(f"model.json is not valid JSON ({exc.msg} at line {exc.lineno})") from exc
    if not isinstance(d, dict) or d.get("schema") != SCHEMA:
        raise InputError(f"expected a model.json document with schema {SCHEMA!r}")
    unit = d.get("frequency_unit")
    k = _UNITS[check_choice("model.json frequency_unit", unit, FrequencyUnitChoice)]
    poles, res, c0 = [], [], None
    try:
        for p in d["pairs"]:
            a = complex(*p["pole"]) / k
            c = complex(*p["residue"]) / k
            if a == 0:
                c0 = c.real if c0 is None else c0 + c.real
            else:
                poles.append(a)
                res.append(c)
        model = PolePairModel(
            float(d["eps_inf"]), np.array(poles, complex), np.array(res, complex), c0
        )
        return ModelRecord(
            model,
            tuple(float(x) for x in d["range_ev"]),
            dict(d["metrics"]),
            dict(d["passivity"]),
            bool(d["stable"]),
        )
    except (KeyError, TypeError) as exc:
        raise InputError(f"model.json lacks or mangles field {exc}") from exc


def parameter_table(model: PolePairModel) -> str:
    """Plain-text table of eps_inf, every pole/residue pair [eV] and its physical-term form."""
    lines = [
        f"eps_inf = {model.eps_inf:.8g}",
        f"{'#':>3} {'Re a (eV)':>14} {'Im a (eV)':>14} {'Re c (eV)':>14} {'Im c (eV)':>14}",
    ]
    for i, (a, c) in enumerate(zip(model.poles, model.residues, strict=True), 1):
        lines.append(f"{i:>3} {a.real:>14.8g} {a.imag:>14.8g} {c.real:>14.8g} {c.imag:>14.8g}")
    if model.conductor_residue is not None:
        lines.append(
            f"{'c0':>3} {0.0:>14.8g} {0.0:>14.8g} {model.conductor_residue:>14.8g} {0.0:>14.8g}"
        )
    lines.append("as physical terms (exp(-i w t), energies in eV):")
    for t in physical_terms(model):
        lines.append(f"  {t.kind}: " + ", ".join(f"{k}={v:.8g}" for k, v in t.params))
    return "\n".join(lines)
