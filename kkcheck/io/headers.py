"""Column-name table: every header spelling the readers accept, mapped to one canonical name.

One place to add a spelling. Three tables do the work:

* :data:`AXIS_WORDS` -- words that name an axis quantity (``wavelength``, ``lambda``,
  ``energy``, ``photon energy``, ``wavenumber``, ``nu``, ``frequency``, ...), each with the
  axis kinds it may stand for;
* :data:`AXIS_UNIT_TOKENS` -- unit tokens (``nm``, ``um``/``µm``, ``Å``/``angstrom``,
  ``eV``, ``meV``, ``cm-1``/``cm^-1``/``1/cm``, ``THz``, ``Hz``, ``rad/s``) mapped to a
  canonical axis unit of
  :data:`kkcheck.units.AXIS_UNITS`;
* :data:`COLUMN_MAP` -- value, uncertainty and ignored columns (``n``, ``k``, ``eps1``, ``e1``,
  ``epsilon1``, ``eps_r``, ``sigma_n``, ``dn``, ``n_err``, ``de1``, ``source``, ``row``, ...).

An axis column must name its unit as a separate token: in brackets (``Wavelength (nm)``,
``Energy [eV]``), after a slash (``lambda/nm``), or after an underscore or a space
(``wavelength_nm``, ``E_eV``, ``wavenumber_cm-1``, ``energy eV``) or a comma
(``"Wavelength, nm"``, a quoted header cell); a bare unit (``nm``, ``eV``)
also names the axis. Units are never searched for inside words, so ``wavenumber`` (which
contains ``um``) is a word without a unit. A lone ``A`` is not read as Angstrom (it is also
the symbol of the ampere); ``MeV`` (mega) is refused rather than taken for ``meV``.

Names are compared after :func:`normalize_name`: lower case, Greek letters spelled out
(``ε`` -> ``eps``, ``σ`` -> ``sigma``, ``Δ`` -> ``d``, ``λ`` -> ``lambda``, ``ν`` -> ``nu``,
``ω`` -> ``omega``), and spaces, underscores, hyphens, dots and parentheses removed.
"""

from __future__ import annotations

import re
from dataclasses import dataclass

__all__ = [
    "AXIS_WORDS",
    "AXIS_UNIT_TOKENS",
    "COLUMN_MAP",
    "VALUE_KINDS",
    "SIGMA_KINDS",
    "ColumnName",
    "normalize_name",
    "normalize_unit",
    "parse_column_name",
    "axis_from_option",
    "ACCEPTED_SUMMARY",
]

# --- axis words: normalized word -> axis kinds it may name ----------------------------------
_LENGTH = ("wavelength_nm", "wavelength_um", "wavelength_angstrom")
_ENERGY = ("energy_ev", "energy_mev")
_WAVENUMBER = ("wavenumber_cm-1",)
_FREQUENCY = ("frequency_thz", "frequency_hz")
_ANGULAR = ("angular_frequency_rad_s",)

#: Axis words (after :func:`normalize_name`) and the canonical axis units each may carry.
AXIS_WORDS: dict[str, tuple[str, ...]] = {
    **dict.fromkeys(("wavelength", "wavelengths", "lambda", "lam", "wl", "wvl"), _LENGTH),
    **dict.fromkeys(
        ("energy", "photonenergy", "energyphoton", "e", "hv", "hnu", "ephoton", "eph"), _ENERGY
    ),
    **dict.fromkeys(("wavenumber", "wavenumbers", "wn", "nubar", "nutilde"), _WAVENUMBER),
    **dict.fromkeys(("frequency", "freq", "f"), _FREQUENCY),
    "nu": _WAVENUMBER + _FREQUENCY,
    **dict.fromkeys(("angularfrequency", "omega"), _ANGULAR),
}

#: Unit tokens (after :func:`normalize_unit`) -> canonical axis unit.
AXIS_UNIT_TOKENS: dict[str, str] = {
    **dict.fromkeys(("nm", "nanometer", "nanometers", "nanometre", "nanometres"), "wavelength_nm"),
    **dict.fromkeys(
        (
            "um",
            "micron",
            "microns",
            "micrometer",
            "micrometers",
            "micrometre",
            "micrometres",
        ),
        "wavelength_um",
    ),
    "ev": "energy_ev",
    **dict.fromkeys(("cm-1", "1/cm", "/cm", "invcm", "kayser"), "wavenumber_cm-1"),
    "thz": "frequency_thz",
    "hz": "frequency_hz",
    "mev": "energy_mev",
    **dict.fromkeys(
        ("å", "angstrom", "angstroms", "angstroem", "ångström", "ångstrom", "aa", "ang"),
        "wavelength_angstrom",
    ),
    **dict.fromkeys(("rad/s", "rads-1", "rad/sec"), "angular_frequency_rad_s"),
}

# --- value, uncertainty and ignored columns -------------------------------------------------
#: Canonical value columns.
VALUE_KINDS = ("n", "k", "eps1", "eps2")
#: Canonical uncertainty columns (standard uncertainty, same unit as the value).
SIGMA_KINDS = ("sigma_n", "sigma_k", "sigma_eps1", "sigma_eps2")

_VALUE_ALIASES: dict[str, tuple[str, ...]] = {
    "n": ("n", "nreal", "ren", "realn"),
    "k": ("k", "kappa", "imn", "imagn"),
    "eps1": (
        "eps1",
        "e1",
        "epsilon1",
        "epsr",
        "epsre",
        "epsreal",
        "reeps",
        "realeps",
        "reepsilon",
        "eps'",
        "epsilon'",
        "er",
    ),
    "eps2": (
        "eps2",
        "e2",
        "epsilon2",
        "epsi",
        "epsim",
        "epsimag",
        "imeps",
        "imageps",
        "imepsilon",
        "eps''",
        "epsilon''",
        "ei",
    ),
}
_SIGMA_PREFIXES = ("sigma", "d", "delta", "err", "std", "u", "unc")
_SIGMA_SUFFIXES = ("sigma", "err", "error", "std", "unc", "uncertainty", "stderr")
_IGNORED = ("source", "row", "line", "flags", "flag", "index", "idx", "point", "comment")


def _build_column_map() -> dict[str, str]:
    table: dict[str, str] = {}

    def put(key: str, canonical: str) -> None:
        if table.get(key, canonical) != canonical:  # pragma: no cover - table is static
            raise RuntimeError(f"header spelling {key!r} maps to two columns")
        table[key] = canonical

    for canonical, aliases in _VALUE_ALIASES.items():
        for a in aliases:
            put(a, canonical)
            for p in _SIGMA_PREFIXES:
                put(p + a, "sigma_" + canonical)
            for s in _SIGMA_SUFFIXES:
                put(a + s, "sigma_" + canonical)
    for name in _IGNORED:
        put(name, "ignore")
    return table


#: Value / uncertainty / ignored column spellings (after :func:`normalize_name`) -> canonical
#: name (one of :data:`VALUE_KINDS`, :data:`SIGMA_KINDS` or ``"ignore"``). Uncertainty
#: spellings are generated from every value alias with the prefixes ``sigma``, ``d``,
#: ``delta``, ``err``, ``std``, ``u``, ``unc`` and the suffixes ``sigma``, ``err``,
#: ``error``, ``std``, ``unc``, ``uncertainty``, ``stderr``; so ``sigma_n``, ``dn``, ``n_err``,
#: ``sigma_eps1`` and ``de1`` all work.
COLUMN_MAP: dict[str, str] = _build_column_map()

#: Bracketed unit of a value column that says "dimensionless" and may be dropped.
DIMENSIONLESS = {"", "-", "1", "au", "a.u.", "unitless", "dimensionless", "none"}

#: Short list of what is accepted, for error messages.
ACCEPTED_SUMMARY = (
    "expected an axis column naming its unit (e.g. wavelength_nm, Wavelength (um), energy (eV), "
    "wavenumber (cm-1), frequency (THz), also Å, meV, Hz), value columns n,k or eps1,eps2 "
    "(e1,e2), optional "
    "uncertainty columns (sigma_n, dk, eps1_err, ...) and source/row/flags"
)

_GREEK = {
    "ε": "eps",
    "ϵ": "eps",
    "σ": "sigma",
    "δ": "d",
    "Δ": "d",
    "∆": "d",
    "λ": "lambda",
    "ν": "nu",
    "ω": "omega",
    "κ": "kappa",
    "ħ": "h",
    "\u0303": "tilde",  # combining tilde (nu with a tilde)
}
_SEPARATORS = re.compile(r"[\s_\-.()]+")
_BRACKET_FORM = re.compile(r"^(?P<word>.*?)\s*[\(\[\{]\s*(?P<unit>[^\)\]\}]*?)\s*[\)\]\}]\s*$")


def normalize_name(text: str) -> str:
    """Lower-case ``text``, spell out Greek letters, drop separators ``space _ - . ( )``."""
    t = text.strip().strip("\"'`").strip()
    t = "".join(_GREEK.get(c, c) for c in t)
    return _SEPARATORS.sub("", t.lower())


def normalize_unit(text: str) -> str:
    """Canonical spelling of a unit token.

    ``µm`` and ``μm`` become ``um``; ``cm^-1``, ``cm⁻¹`` and ``cm**-1`` become ``cm-1``.
    """
    t = text.strip().strip("\"'`")
    if t.replace(" ", "") == "MeV":
        return "MeV (mega)"  # not meV: never lower-cased into a known token
    t = t.lower()
    for a, b in (("µ", "u"), ("μ", "u"), ("⁻¹", "-1"), ("⁻", "-"), ("¹", "1"), ("−", "-")):
        t = t.replace(a, b)
    t = re.sub(r"[\s^*()]", "", t)
    return t


@dataclass(frozen=True)
class ColumnName:
    """What one header cell names.

    Attributes
    ----------
    kind : str
        ``"axis"`` (axis with a known unit), ``"axis_no_unit"`` (axis word, no unit token),
        ``"axis_bad_unit"`` (axis word with a unit kkcheck does not know or that does not fit
        the word), one of :data:`VALUE_KINDS` / :data:`SIGMA_KINDS`, ``"ignore"``, or
        ``"unknown"``.
    axis : str or None
        Canonical axis unit for ``kind == "axis"``.
    text : str
        The cell as written.
    unit : str
        The unit token as written ("" when none).
    """

    kind: str
    axis: str | None
    text: str
    unit: str = ""


def _axis(word: str, unit: str, text: str) -> ColumnName | None:
    """Resolve an (axis word, unit token) pair; None when ``word`` is not an axis word."""
    w = normalize_name(word.rstrip().rstrip(","))
    if w not in AXIS_WORDS:
        return None
    canon = AXIS_UNIT_TOKENS.get(normalize_unit(unit))
    if canon is None or canon not in AXIS_WORDS[w]:
        return ColumnName("axis_bad_unit", None, text, unit.strip())
    return ColumnName("axis", canon, text, unit.strip())


def parse_column_name(text: str) -> ColumnName:
    """Say what the header cell ``text`` names (see the module docstring for the forms).

    Examples
    --------
    >>> parse_column_name("Wavelength [µm]").axis
    'wavelength_um'
    >>> parse_column_name("wavenumber").kind
    'axis_no_unit'
    >>> parse_column_name("sigma_eps1").kind
    'sigma_eps1'
    """
    raw = text.strip().strip("\"'`").strip()
    if not raw:
        return ColumnName("unknown", None, text)
    # a bare unit names the axis
    unit_only = AXIS_UNIT_TOKENS.get(normalize_unit(raw))
    if unit_only is not None:
        return ColumnName("axis", unit_only, text, raw)
    key = normalize_name(raw)
    if key in COLUMN_MAP:
        return ColumnName(COLUMN_MAP[key], None, text)
    if key in AXIS_WORDS:
        return ColumnName("axis_no_unit", None, text)
    m = _BRACKET_FORM.match(raw)
    if m:
        word, unit = m.group("word"), m.group("unit")
        got = _axis(word, unit, text)
        if got is not None:
            return got
        if normalize_unit(unit).strip(".") in {u.strip(".") for u in DIMENSIONLESS}:
            inner = COLUMN_MAP.get(normalize_name(word))
            if inner is not None:
                return ColumnName(inner, None, text)
        return ColumnName("unknown", None, text)
    # word, then a separator (slash, underscore, space), then the unit: try each split point
    for sep in ("/", "_", ",", " "):
        pos = raw.rfind(sep)
        while pos > 0:
            got = _axis(raw[:pos], raw[pos + 1 :], text)
            if got is not None and got.kind == "axis":
                return got
            pos = raw.rfind(sep, 0, pos)
    for sep in ("/", "_", ",", " "):
        pos = raw.rfind(sep)
        if pos > 0 and normalize_name(raw[:pos].rstrip(",")) in AXIS_WORDS:
            return ColumnName("axis_bad_unit", None, text, raw[pos + 1 :])
    return ColumnName("unknown", None, text)


def axis_from_option(value: str) -> str | None:
    """Canonical axis unit for an ``axis=`` option: a canonical name or a unit token.

    Returns None when ``value`` is neither.
    """
    from ..units import AXIS_UNITS

    v = value.strip()
    if v in AXIS_UNITS:
        return v
    if v.lower() in AXIS_UNITS:
        return v.lower()
    got = parse_column_name(v)
    return got.axis if got.kind == "axis" else None
