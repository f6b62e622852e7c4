"""Closed-form dielectric functions used as references, in the demo, and as fit building blocks.

All functions take photon energy [eV] (hbar*omega) and return complex eps in the exp(-i w t)
convention (eps2 >= 0 for passive media). Parameters in eV unless stated.

References
----------
.. [1] A. D. Rakić, A. B. Djurišić, J. M. Elazar, M. L. Majewski, "Optical properties of
   metallic films for vertical-cavity optoelectronic devices," Appl. Opt. 37(22), 5271-5283
   (1998); see docs/references.md [Rakic1998].
.. [2] G. E. Jellison Jr., F. A. Modine, "Parameterization of the optical functions of amorphous
   materials in the interband region," Appl. Phys. Lett. 69(3), 371-373 (1996); erratum
   Appl. Phys. Lett. 69, 2137 (1996) (volume and pages from memory); see docs/references.md
   [Jellison1996].
.. [3] I. H. Malitson, "Interspecimen comparison of the refractive index of fused silica,"
   J. Opt. Soc. Am. 55(10), 1205-1208 (1965) (title from memory); see docs/references.md
   [Malitson1965].
"""

from __future__ import annotations

import numpy as np

from .units import HC_EV_NM

__all__ = [
    "drude",
    "lorentz",
    "debye",
    "tauc_lorentz",
    "sellmeier_silica",
    "rakic_ld",
    "RAKIC_AU",
    "RAKIC_AG",
]


def drude(energy_ev, wp_ev: float, gamma_ev: float) -> np.ndarray:
    """Drude term  -wp^2 / (w (w + i gamma))  (no eps_inf).

    Its eps2 carries the DC-conductivity pole sigma0/(eps0 w) with sigma0/eps0 = wp^2/gamma.
    """
    w = np.asarray(energy_ev, dtype=float)
    return -(wp_ev**2) / (w * (w + 1j * gamma_ev))


def lorentz(energy_ev, strength: float, w0_ev: float, gamma_ev: float) -> np.ndarray:
    """Lorentz oscillator  strength * w0^2 / (w0^2 - w^2 - i w gamma)  (no eps_inf).

    ``strength`` is the static contribution Delta-eps.
    """
    w = np.asarray(energy_ev, dtype=float)
    return strength * w0_ev**2 / (w0_ev**2 - w**2 - 1j * w * gamma_ev)


def debye(energy_ev, strength: float, tau_inv_ev: float) -> np.ndarray:
    """Debye relaxation  strength / (1 - i w tau), with 1/tau given as an energy [eV]."""
    w = np.asarray(energy_ev, dtype=float)
    return strength / (1.0 - 1j * w / tau_inv_ev)


def tauc_lorentz(energy_ev, A: float, E0: float, C: float, Eg: float, eps_inf: float = 0.0):
    """Tauc–Lorentz dielectric function (Jellison & Modine 1996), closed-form eps1.

    Notes
    -----
    eps2 = A E0 C (E - Eg)^2 / [((E^2 - E0^2)^2 + C^2 E^2) E] for E > Eg, else 0.
    eps1 is the closed form of the erratum of Jellison & Modine (Appl. Phys. Lett. 69,
    2137 (1996); equation number not recorded), with a = sqrt(4 E0^2 - C^2),
    g2 = E0^2 - C^2/2 and z4 = (E^2 - g2)^2 + a^2 C^2 / 4 as in docs/references.md
    [Jellison1996]. It is valid for E != Eg; at E == Eg the log term vanishes in the limit
    and is set to 0.
    """
    E = np.asarray(energy_ev, dtype=float)
    a = np.sqrt(4 * E0**2 - C**2)
    g2 = E0**2 - C**2 / 2
    z4 = (E**2 - g2) ** 2 + a**2 * C**2 / 4
    a_ln = (Eg**2 - E0**2) * E**2 + Eg**2 * C**2 - E0**2 * (E0**2 + 3 * Eg**2)
    a_atan = (E**2 - E0**2) * (E0**2 + Eg**2) + Eg**2 * C**2
    d = np.abs(E - Eg)
    with np.errstate(divide="ignore", invalid="ignore"):
        lnd = np.where(d > 0, np.log(np.where(d > 0, d, 1.0)), 0.0)
        t1 = (A * C * a_ln / (2 * np.pi * z4 * a * E0)) * np.log(
            (E0**2 + Eg**2 + a * Eg) / (E0**2 + Eg**2 - a * Eg)
        )
        t2 = -(A * a_atan / (np.pi * z4 * E0)) * (
            np.pi - np.arctan((2 * Eg + a) / C) + np.arctan((a - 2 * Eg) / C)
        )
        t3 = (2 * A * E0 * Eg * (E**2 - g2) / (np.pi * z4 * a)) * (
            np.pi + 2 * np.arctan(2 * (g2 - Eg**2) / (a * C))
        )
        t4 = -(A * E0 * C * (E**2 + Eg**2) / (np.pi * z4 * E)) * np.where(
            d > 0, lnd - np.log(E + Eg), 0.0
        )
        t5 = (2 * A * E0 * C * Eg / (np.pi * z4)) * np.where(
            d > 0,
            lnd + np.log(E + Eg) - 0.5 * np.log((E0**2 - Eg**2) ** 2 + Eg**2 * C**2),
            0.0,
        )
    eps1 = eps_inf + t1 + t2 + t3 + t4 + t5
    eps2 = np.where(
        E > Eg, A * E0 * C * (E - Eg) ** 2 / (((E**2 - E0**2) ** 2 + C**2 * E**2) * E), 0.0
    )
    return eps1 + 1j * eps2


def sellmeier_silica(energy_ev) -> np.ndarray:
    """Fused silica n^2 (real) from Malitson's three-term Sellmeier formula (lambda in um).

    Valid 0.21-3.71 um at 20 C (Malitson 1965). Returned as complex with zero imaginary part.
    """
    lam_um = HC_EV_NM / np.asarray(energy_ev, dtype=float) / 1e3
    l2 = lam_um**2
    n2 = (
        1.0
        + 0.6961663 * l2 / (l2 - 0.0684043**2)
        + 0.4079426 * l2 / (l2 - 0.1162414**2)
        + 0.8974794 * l2 / (l2 - 9.896161**2)
    )
    return n2.astype(complex)


#: Rakić 1998 Lorentz–Drude parameters for gold: wp, f0, Gamma0, [(f_j, Gamma_j, w_j)] in eV,
#: from Rakić et al., Appl. Opt. 37(22), 5271-5283 (1998) as transcribed in public code
#: (four independent transcriptions agree; see docs/references.md [Rakic1998]).
RAKIC_AU = (
    9.03,
    0.760,
    0.053,
    (
        (0.024, 0.241, 0.415),
        (0.010, 0.345, 0.830),
        (0.071, 0.870, 2.969),
        (0.601, 2.494, 4.304),
        (4.384, 2.214, 13.32),
    ),
)
#: Rakić 1998 Lorentz–Drude parameters for silver (same layout as :data:`RAKIC_AU`), from
#: Rakić et al., Appl. Opt. 37(22), 5271-5283 (1998) as transcribed in one public code listing.
RAKIC_AG = (
    9.01,
    0.845,
    0.048,
    (
        (0.065, 3.886, 0.816),
        (0.124, 0.452, 4.481),
        (0.011, 0.065, 8.185),
        (0.840, 0.916, 9.083),
        (5.646, 2.419, 20.29),
    ),
)


def rakic_ld(energy_ev, params=RAKIC_AU) -> np.ndarray:
    """Lorentz–Drude model of Rakić et al. (1998), physics convention.

    eps = 1 - f0 wp^2 / (w (w + i Gamma0)) + sum_j f_j wp^2 / (w_j^2 - w^2 - i w Gamma_j).
    This is the form of the public code transcriptions of Rakić et al. (1998); the paper itself
    is recalled (from memory) to print the conjugate signs, (w - i Gamma0) and + i w Gamma_j.
    """
    wp, f0, g0, osc = params
    w = np.asarray(energy_ev, dtype=float)
    eps = 1.0 + drude(w, np.sqrt(f0) * wp, g0)
    for f, g, w0 in osc:
        eps = eps + f * wp**2 / (w0**2 - w**2 - 1j * w * g)
    return eps
