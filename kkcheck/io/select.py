"""Column selection: the ``columns=`` option maps roles to columns by name or 1-based number.

A mapping such as ``{"axis": "Wavelength (nm)", "n": 2, "k": 3}`` says which column holds
what; every other column is left unused and named in a provenance note. Roles are ``axis``
(its unit then comes from the header cell or ``axis=``), an axis unit itself
(``wavelength_nm``, ``energy_ev``, ... of :data:`kkcheck.units.AXIS_UNITS`, which also says
the unit), ``n``, ``k``, ``eps1``, ``eps2`` and the uncertainties ``sigma_n``, ``sigma_k``,
``sigma_eps1``, ``sigma_eps2`` (any spelling :mod:`kkcheck.io.headers` knows, such as
``e1`` or ``dn``). ``n`` without ``k`` reads an n-only table (k = 0, stated in a note).
A column is named by its header text (compared as written, then after
:func:`kkcheck.io.headers.normalize_name`) or by its number, counted from 1.
"""

from __future__ import annotations

from collections.abc import Mapping

from ..errors import InputError
from ..units import AXIS_UNITS
from . import headers as _h

__all__ = ["ROLES_TEXT", "resolve_columns"]

ROLES_TEXT = (
    "axis (or an axis unit such as wavelength_nm), n, k, eps1, eps2, sigma_n, sigma_k, "
    "sigma_eps1, sigma_eps2"
)


def _role(key) -> str:
    """Canonical role of a mapping key: 'axis', 'axis:<unit>' or a value/sigma kind."""
    k = str(key).strip()
    if k.lower() == "axis":
        return "axis"
    unit = _h.axis_from_option(k)
    if unit is not None and (k in AXIS_UNITS or k.lower() in AXIS_UNITS):
        return "axis:" + unit
    kind = _h.COLUMN_MAP.get(_h.normalize_name(k))
    if kind in _h.VALUE_KINDS or kind in _h.SIGMA_KINDS:
        return kind
    raise InputError(f"columns: unknown role {k!r}; expected {ROLES_TEXT}")


def _column(value, names: list[str] | None, ncols: int, shown: str, lineno: int) -> int:
    """0-based column that ``value`` (a 1-based number or a header name) designates."""
    if isinstance(value, bool):
        value = str(value)
    if isinstance(value, int) or (isinstance(value, str) and value.strip().isdigit()):
        i = int(value)
        if not 1 <= i <= ncols:
            raise InputError(
                f"columns: column {i} does not exist; expected a number from 1 to {ncols}",
                shown,
                lineno,
            )
        return i - 1
    text = str(value).strip()
    if names is None:
        raise InputError(
            f"columns: {text!r} names a column, but the table has no header; expected "
            f"column numbers (1 to {ncols})",
            shown,
            lineno,
        )
    stripped = [n.strip().strip("\"'") for n in names]
    if text in stripped:
        return stripped.index(text)
    keys = [_h.normalize_name(n) for n in names]
    if _h.normalize_name(text) in keys:
        return keys.index(_h.normalize_name(text))
    shown_names = ", ".join(repr(n) for n in stripped[:12])
    raise InputError(
        f"columns: no column named {text!r}; the header has {shown_names}", shown, lineno
    )


def resolve_columns(
    columns: Mapping, names: list[str] | None, ncols: int, shown: str, lineno: int
) -> tuple[dict[str, int], str | None]:
    """Roles -> 0-based columns, and the axis unit the mapping states (or None).

    Raises
    ------
    kkcheck.errors.InputError
        An unknown role, a missing column, one column given two roles, a role given twice.
    """
    if not isinstance(columns, Mapping) or not columns:
        raise InputError(f"columns: expected a mapping of roles to columns ({ROLES_TEXT})")
    roles: dict[str, int] = {}
    unit = None
    for key, value in columns.items():
        role = _role(key)
        if role.startswith("axis:"):
            role, unit = "axis", role[5:]
        if role in roles:
            raise InputError(f"columns: role {role} given twice; expected each role once")
        roles[role] = _column(value, names, ncols, shown, lineno)
    used: dict[int, str] = {}
    for role, c in roles.items():
        if c in used:
            raise InputError(
                f"columns: column {c + 1} given as both {used[c]} and {role}; expected one "
                "role per column",
                shown,
                lineno,
            )
        used[c] = role
    if "axis" not in roles:
        raise InputError(f"columns: no axis column given; expected {ROLES_TEXT}")
    return roles, unit
