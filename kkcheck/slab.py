"""Normal-incidence reflectance and transmittance of slabs: what a fit error does to a device.

All functions use exp(-i w t), N = n + i k with k >= 0 absorbing, wavelengths in nm.

References
----------
.. [1] M. Born, E. Wolf, *Principles of Optics*, 7th ed., Cambridge University Press (1999),
   section 1.6 (Airy summation, characteristic matrix); section number from memory.
.. [2] O. S. Heavens, *Optical Properties of Thin Solid Films*, Butterworths (1955); Dover
   (1991) (intensity sums of an incoherent slab, film on a thick substrate); from memory.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import InputError
from .jsonsafe import json_float
from .spectrum import readonly_array
from .units import HC_EV_NM

__all__ = [
    "SlabRT",
    "SlabComparison",
    "coherent_slab",
    "incoherent_slab",
    "film_on_substrate",
    "compare_slab",
    "compare_slab_over",
    "compare_film",
    "fringe_grid",
    "interpolate_index",
    "FilmSpec",
    "device_rt",
    "INTERPOLATION",
    "POINTS_PER_FRINGE",
]

#: Samples per interference fringe of the resolved slab check (fringe period in photon energy
#: hc / (2 n d)); 16 puts a sample within 1/32 of a period of every extremum (our choice).
POINTS_PER_FRINGE = 16
#: Most points of the resolved grid (a 1 mm slab at n = 4 over 1-3 eV would need millions).
MAX_GRID_POINTS = 400_000
#: How the table is read between its rows (summary.json "slab.interpolation").
INTERPOLATION = (
    "n linear in photon energy; k linear in log k where both neighbours are > 0, else linear"
)


@dataclass(frozen=True)
class SlabRT:
    """Reflectance and transmittance.

    Attributes
    ----------
    R, T : ndarray
        Power reflectance and transmittance [dimensionless, 0..1].
    """

    R: np.ndarray
    T: np.ndarray


def _index(eps_or_n, is_eps: bool) -> np.ndarray:
    v = np.asarray(eps_or_n, dtype=complex)
    return np.sqrt(v) if is_eps else v  # principal root: Im >= 0 when eps2 >= 0


def _airy(n_slab, thickness_nm, wavelength_nm, n0, n2):
    """Complex r, t of a coherent slab between n0 (incidence) and n2 (exit)."""
    n = np.asarray(n_slab, dtype=complex)
    beta = 2 * np.pi * n * thickness_nm / np.asarray(wavelength_nm, dtype=float)
    r01 = (n0 - n) / (n0 + n)
    r12 = (n - n2) / (n + n2)
    t01 = 2 * n0 / (n0 + n)
    t12 = 2 * n / (n + n2)
    e2 = np.exp(2j * beta)
    den = 1 + r01 * r12 * e2
    return (r01 + r12 * e2) / den, t01 * t12 * np.exp(1j * beta) / den


def coherent_slab(
    n_slab, thickness_nm: float, wavelength_nm, n0: float = 1.0, n2: complex = 1.0
) -> SlabRT:
    """R and T of a coherent slab of index ``n_slab`` between ambient n0 and exit medium n2.

    Notes
    -----
    Airy formulas (Born & Wolf [1]_), beta = 2 pi N d / lambda:
    r01 = (n0 - N)/(n0 + N), r12 = (N - n2)/(N + n2), t01 = 2 n0/(n0 + N), t12 = 2N/(N + n2),
    r = (r01 + r12 e^{2i beta})/(1 + r01 r12 e^{2i beta}),
    t = t01 t12 e^{i beta}/(1 + r01 r12 e^{2i beta}); R = |r|^2, T = Re(n2)/n0 |t|^2.
    """
    r, t = _airy(n_slab, thickness_nm, wavelength_nm, n0, n2)
    return SlabRT(np.abs(r) ** 2, np.real(n2) / n0 * np.abs(t) ** 2)


def incoherent_slab(n_slab, thickness_nm: float, wavelength_nm) -> SlabRT:
    """R and T of a thick slab in air with incoherent (intensity) multiple reflections.

    Notes
    -----
    rho = |(1 - N)/(1 + N)|^2, tau = exp(-4 pi k d / lambda):
    T = (1 - rho)^2 tau / (1 - rho^2 tau^2), R = rho [1 + (1 - rho)^2 tau^2 / (1 - rho^2 tau^2)],
    the intensity sum of the multiply reflected beams (Heavens [2]_, from memory); it equals
    the coherent result of Born & Wolf [1]_ averaged over the slab phase (checked in the tests).
    """
    n = np.asarray(n_slab, dtype=complex)
    rho = np.abs((1 - n) / (1 + n)) ** 2
    tau = np.exp(-4 * np.pi * n.imag * thickness_nm / np.asarray(wavelength_nm, dtype=float))
    den = 1 - rho**2 * tau**2
    return SlabRT(rho * (1 + (1 - rho) ** 2 * tau**2 / den), (1 - rho) ** 2 * tau / den)


def film_on_substrate(
    n_film, film_nm: float, n_substrate, substrate_nm: float, wavelength_nm
) -> SlabRT:
    """Coherent film on a thick incoherent substrate, in air, light incident on the film.

    Notes
    -----
    Film values from the front (R_f, T_f) and from the substrate side (R_f', T_f') by the Airy
    formulas; back face rho_b = |(N_s - 1)/(N_s + 1)|^2, internal tau = exp(-4 pi k_s d_s/lambda):
    T = T_f tau (1 - rho_b)/(1 - R_f' rho_b tau^2),
    R = R_f + T_f T_f' rho_b tau^2/(1 - R_f' rho_b tau^2)
    (Heavens [2]_, from memory; checked in the tests against the characteristic matrix averaged
    over the substrate phase). T_f and T_f' use the real part of the substrate index (weakly
    absorbing substrate).
    """
    ns = np.asarray(n_substrate, dtype=complex) * np.ones_like(np.asarray(wavelength_nm, float))
    front = coherent_slab(n_film, film_nm, wavelength_nm, 1.0, ns)
    rb, tb = _airy(n_film, film_nm, wavelength_nm, ns, 1.0)
    rf_back = np.abs(rb) ** 2
    tf_back = np.abs(tb) ** 2 / ns.real
    rho_b = np.abs((ns - 1) / (ns + 1)) ** 2
    tau = np.exp(-4 * np.pi * ns.imag * substrate_nm / np.asarray(wavelength_nm, dtype=float))
    den = 1 - rf_back * rho_b * tau**2
    return SlabRT(
        front.R + front.T * tf_back * rho_b * tau**2 / den, front.T * tau * (1 - rho_b) / den
    )


@dataclass(frozen=True)
class FilmSpec:
    """The film a device-aimed fit and the resolved slab check are for.

    Attributes
    ----------
    thickness_nm : float
        Film thickness [nm], > 0.
    substrate_n : complex or None
        Constant index of a thick substrate the film sits on (None: free-standing in air).
    coherent : bool
        Coherent film (interference fringes) or incoherent (intensity sums, free-standing only).
    substrate_nm : float
        Substrate thickness [nm] (incoherent substrate).
    """

    thickness_nm: float
    substrate_n: complex | None = None
    coherent: bool = True
    substrate_nm: float = 1e6

    def __post_init__(self):
        if not (np.isfinite(self.thickness_nm) and self.thickness_nm > 0):
            raise InputError("film thickness_nm must be > 0")
        if self.substrate_n is not None and not self.coherent:
            raise InputError("an incoherent film is computed free-standing only")

    @property
    def geometry(self) -> str:
        """ "free-standing" or "film on substrate", with "coherent"/"incoherent"."""
        where = "free-standing" if self.substrate_n is None else "film on substrate"
        return f"{where}, {'coherent' if self.coherent else 'incoherent'}"


def device_rt(n_film, film: FilmSpec, wavelength_nm) -> SlabRT:
    """R and T of ``film`` with complex index ``n_film`` at ``wavelength_nm`` [nm]."""
    if film.substrate_n is not None:
        return film_on_substrate(
            n_film, film.thickness_nm, film.substrate_n, film.substrate_nm, wavelength_nm
        )
    if film.coherent:
        return coherent_slab(n_film, film.thickness_nm, wavelength_nm)
    return incoherent_slab(n_film, film.thickness_nm, wavelength_nm)


def fringe_grid(energy_ev, n_max: float, thickness_nm: float, points=POINTS_PER_FRINGE):
    """Photon energies [eV] fine enough for the fringes of a film, plus the table's own.

    Notes
    -----
    The slab phase 2 beta = 4 pi n d / lambda = 4 pi n d E / hc advances 2 pi per fringe, so
    the fringe period in photon energy is hc / (2 n d) (Born & Wolf [1]_); the step is that
    period at the largest n over ``points``, capped at :data:`MAX_GRID_POINTS` points.
    """
    e = np.asarray(energy_ev, float)
    lo, hi = float(e.min()), float(e.max())
    step = HC_EV_NM / (2.0 * max(float(n_max), 1.0) * thickness_nm) / points
    m = int(min(MAX_GRID_POINTS, max(2, np.ceil((hi - lo) / step) + 1)))
    return np.unique(np.concatenate([np.linspace(lo, hi, m), e]))


def interpolate_index(energy_ev, eps_table, grid_ev) -> np.ndarray:
    """Complex index N = n + i k of the table at ``grid_ev`` [eV] (:data:`INTERPOLATION`).

    k is interpolated in log k where both neighbouring rows have k > 0: absorption edges fall
    roughly exponentially, and linear interpolation of k across a decade overstates the
    absorption of a thick film between rows. Common practice, no source.
    """
    e = np.asarray(energy_ev, float)
    n_tab = _index(eps_table, True)
    g = np.asarray(grid_ev, float)
    n = np.interp(g, e, n_tab.real)
    k_tab = np.maximum(n_tab.imag, 0.0)
    k_lin = np.interp(g, e, k_tab)
    pos = k_tab > 0
    if np.count_nonzero(pos) >= 2:
        j = np.clip(np.searchsorted(e, g) - 1, 0, e.size - 2)
        both = pos[j] & pos[j + 1]
        logk = np.interp(g, e, np.log(np.where(pos, k_tab, 1.0)))
        k_lin = np.where(both, np.exp(logk), k_lin)
    return n + 1j * k_lin


@dataclass(frozen=True)
class SlabComparison:
    """R/T from tabulated eps versus from a model, over the fitted range.

    Attributes
    ----------
    thickness_nm : float
        Slab (or film) thickness [nm].
    max_dR, max_dT : float
        Largest |R_model - R_table| and |T_model - T_table| [dimensionless].
    at_dR_ev, at_dT_ev : float
        Photon energies of those maxima [eV].
    geometry : str
        "free-standing" or "film on substrate".
    energy_ev : ndarray
        Photon energies the comparison was computed at [eV] (read-only).
    table_rt, model_rt : SlabRT
        R and T computed from the tabulated eps and from the model on ``energy_ev``
        [dimensionless, 0..1] (read-only arrays), e.g. for a figure.
    incoherent : tuple of float or None
        (max |dR|, its energy [eV], max |dT|, its energy [eV]) of the same slab computed
        incoherently (free-standing only; None otherwise or when not computed).
    interpolation : str
        How the table was read between rows ("" when only the table's rows were used).
    """

    thickness_nm: float
    max_dR: float
    max_dT: float
    at_dR_ev: float
    at_dT_ev: float
    geometry: str
    energy_ev: np.ndarray
    table_rt: SlabRT
    model_rt: SlabRT
    incoherent: tuple | None = None
    interpolation: str = ""

    def to_dict(self) -> dict:
        """The ``slab`` block of summary.json (NaN and infinities become null)."""
        return {
            "thickness_nm": json_float(self.thickness_nm),
            "geometry": self.geometry,
            "max_abs_dR": json_float(self.max_dR),
            "max_abs_dT": json_float(self.max_dT),
            "at_dR_ev": json_float(self.at_dR_ev),
            "at_dT_ev": json_float(self.at_dT_ev),
            "grid_points": int(self.energy_ev.size),
            "interpolation": self.interpolation,
            "incoherent": None
            if self.incoherent is None
            else {
                "max_abs_dR": json_float(self.incoherent[0]),
                "at_dR_ev": json_float(self.incoherent[1]),
                "max_abs_dT": json_float(self.incoherent[2]),
                "at_dT_ev": json_float(self.incoherent[3]),
            },
        }


def _readonly_rt(rt: SlabRT) -> SlabRT:
    return SlabRT(readonly_array(rt.R), readonly_array(rt.T))


def compare_slab(
    energy_ev,
    eps_table,
    model,
    thickness_nm: float = 100.0,
    *,
    substrate_n=None,
    substrate_nm: float = 1e6,
) -> SlabComparison:
    """Compare normal-incidence R/T computed from tabulated eps and from a model.

    Parameters
    ----------
    energy_ev : array_like
        Photon energies [eV] (the fitted range).
    eps_table : array_like of complex
        Tabulated permittivity at those energies.
    model : object with ``eps(energy_ev)``
        E.g. a :class:`~kkcheck.rational.model.PolePairModel`.
    thickness_nm : float
        Slab or film thickness [nm]; default 100 nm.
    substrate_n : complex or array_like, optional
        Substrate index; when given the film sits on a thick incoherent substrate of thickness
        ``substrate_nm`` [nm] (default 1 mm), otherwise the slab is free-standing in air.

    Returns
    -------
    SlabComparison
        The largest differences and where they occur, with the R/T arrays they come from.

    Notes
    -----
    Wavelength lambda [nm] = hc / E with hc = 1239.841984 eV nm (CODATA 2018); N = sqrt(eps)
    (principal root). Free-standing: :func:`coherent_slab` in air; on a substrate:
    :func:`film_on_substrate`.
    """
    w = np.asarray(energy_ev, dtype=float)
    if thickness_nm <= 0:
        raise InputError("thickness_nm must be > 0")
    lam = HC_EV_NM / w
    n_tab = _index(eps_table, True)
    n_mod = _index(model.eps(w), True)
    if substrate_n is None:
        a, b = coherent_slab(n_tab, thickness_nm, lam), coherent_slab(n_mod, thickness_nm, lam)
        geom = "free-standing"
    else:
        a = film_on_substrate(n_tab, thickness_nm, substrate_n, substrate_nm, lam)
        b = film_on_substrate(n_mod, thickness_nm, substrate_n, substrate_nm, lam)
        geom = "film on substrate"
    dr, dt = np.abs(b.R - a.R), np.abs(b.T - a.T)
    i, j = int(np.argmax(dr)), int(np.argmax(dt))
    return SlabComparison(
        float(thickness_nm),
        float(dr[i]),
        float(dt[j]),
        float(w[i]),
        float(w[j]),
        geom,
        readonly_array(w),
        _readonly_rt(a),
        _readonly_rt(b),
    )


def compare_film(energy_ev, eps_table, model, film: FilmSpec) -> SlabComparison:
    """R/T of ``film`` from the table and from ``model`` on a grid that resolves its fringes.

    Parameters
    ----------
    energy_ev, eps_table : array_like
        The table's rows [eV] and permittivity (the fitted range).
    model : object with ``eps(energy_ev)``
    film : FilmSpec

    Returns
    -------
    SlabComparison
        On :func:`fringe_grid` (table read by :func:`interpolate_index`), for the film as
        specified; for a free-standing coherent film the incoherent result is given beside it.

    Notes
    -----
    Sampling only the table's rows undersamples the fringes of a thick film (a 10 um silicon
    slab has a fringe every ~0.015 eV near 1 eV), so the largest |dT| can fall between rows.
    """
    e = np.asarray(energy_ev, float)
    n_tab = _index(eps_table, True)
    grid = fringe_grid(e, float(np.max(n_tab.real)), film.thickness_nm)
    lam = HC_EV_NM / grid
    n_t = interpolate_index(e, eps_table, grid)
    n_m = _index(model.eps(grid), True)
    a, b = device_rt(n_t, film, lam), device_rt(n_m, film, lam)
    inc = None
    if film.substrate_n is None and film.coherent:
        ia = incoherent_slab(n_t, film.thickness_nm, lam)
        ib = incoherent_slab(n_m, film.thickness_nm, lam)
        inc = _maxima(grid, ia, ib)
    mr, wr, mt, wt = _maxima(grid, a, b)
    return SlabComparison(
        float(film.thickness_nm), mr, mt, wr, wt, film.geometry, readonly_array(grid),
        _readonly_rt(a), _readonly_rt(b), inc, INTERPOLATION,
    )  # fmt: skip


def _maxima(grid, a: SlabRT, b: SlabRT) -> tuple:
    dr, dt = np.abs(b.R - a.R), np.abs(b.T - a.T)
    i, j = int(np.argmax(dr)), int(np.argmax(dt))
    return float(dr[i]), float(grid[i]), float(dt[j]), float(grid[j])


def compare_slab_over(
    range_ev: tuple[float, float],
    energy_ev,
    eps_table,
    model,
    thickness_nm: float = 100.0,
    film: FilmSpec | None = None,
) -> SlabComparison:
    """:func:`compare_film` on the table rows inside ``range_ev`` (the fitted range).

    A model is compared with the data only where it was fitted; outside, it is not valid.
    ``film`` (default: a free-standing coherent slab of ``thickness_nm``) is the device.
    """
    lo, hi = range_ev
    e = np.asarray(energy_ev, float)
    inside = (e >= lo) & (e <= hi)
    film = film or FilmSpec(float(thickness_nm))
    return compare_film(e[inside], np.asarray(eps_table)[inside], model, film)
