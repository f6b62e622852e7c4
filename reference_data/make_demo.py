"""Make the invented demo dataset in kkcheck/demo_data/ (seeded, reproducible).

The demo material is fictional: a 'ZX-7 oxynitride film' whose dielectric function is built
from a Tauc–Lorentz interband term (Jellison & Modine 1996) plus one Lorentz infrared phonon
and eps_inf, with invented parameters. Three instruments measured it, each with its own unit,
layout and defects (see reference_data/README.md for the list of planted defects).

Run from the repository root:  python reference_data/make_demo.py
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from kkcheck.materials import lorentz, tauc_lorentz
from kkcheck.units import EV_PER_INV_CM, HC_EV_NM, eps_to_nk

SEED = 20261202
#: The demo tables ship inside the package (package data), so an installed kkcheck has them.
OUT = Path(__file__).resolve().parent.parent / "kkcheck" / "demo_data"

#: Invented parameters of the fictional material (eV).
EPS_INF = 1.9
TL = dict(A=95.0, E0=4.1, C=2.2, Eg=2.35)
PHONON = dict(strength=0.9, w0_ev=0.118, gamma_ev=0.004)


def true_eps(energy_ev):
    """The invented 'true' dielectric function of ZX-7 (exp(-i w t), eps2 >= 0)."""
    e = np.asarray(energy_ev, float)
    return EPS_INF + tauc_lorentz(e, **TL) + lorentz(e, **PHONON)


def _header(lines):
    return "".join(f"# {s}\n" for s in lines)


def make(out: Path = OUT) -> dict[str, Path]:
    rng = np.random.default_rng(SEED)
    out.mkdir(parents=True, exist_ok=True)
    paths = {}

    # 1. UV-visible ellipsometer: 250-1000 nm every 2 nm, n,k, comma-separated.
    lam = np.arange(250.0, 1000.0 + 1e-9, 2.0)
    n, k = eps_to_nk(true_eps(HC_EV_NM / lam))
    # planted KK fault: n distorted by a smooth bump over ~440-520 nm with no partner in k
    n = n + 0.045 * np.exp(-0.5 * ((lam - 480.0) / 18.0) ** 2)
    n = n + rng.normal(0, 1.5e-3, lam.size)
    k = np.abs(k + rng.normal(0, 1.0e-3, lam.size) * (k > 1e-3))
    spikes_nm = (330.0, 612.0, 866.0)
    for s, (comp, amp) in zip(spikes_nm, (("k", 0.06), ("n", -0.08), ("n", 0.07))):
        i = int(np.argmin(np.abs(lam - s)))
        if comp == "n":
            n[i] += amp
        else:
            k[i] += amp
    p = out / "uvvis_ellipsometry.csv"
    with open(p, "w", newline="\n") as f:
        f.write(_header([
            "ZX-7 oxynitride film (fictional material, invented data for the kkcheck demo)",
            "instrument: UV-visible ellipsometer, point-by-point inversion",
            "columns: wavelength in nm, refractive index n, extinction coefficient k",
        ]))
        f.write("wavelength_nm,n,k\n")
        for a, b, c in zip(lam, n, k):
            f.write(f"{a:.1f},{b:.5f},{c:.5f}\n")
    paths["uvvis"] = p

    # 2. Near-infrared ellipsometer: 0.90-2.20 um every 5 nm, eps1/eps2, tab-separated,
    #    4 % scale error against the UV-vis instrument and a detector changeover at 1.60 um.
    lam_um = np.arange(0.90, 2.20 + 1e-9, 0.005)
    eps = true_eps(HC_EV_NM / (lam_um * 1e3)) * 1.04
    step = np.where(lam_um >= 1.60, 1.0 + 0.025, 1.0)  # +2.5 % in eps1 beyond the changeover
    eps = eps.real * step + 1j * eps.imag
    eps = eps + rng.normal(0, 2e-3, lam_um.size) + 1j * rng.normal(0, 1e-3, lam_um.size)
    spike_um = 1.255
    i = int(np.argmin(np.abs(lam_um - spike_um)))
    eps[i] += 0.25
    p = out / "nir_ellipsometry.tsv"
    with open(p, "w", newline="\n") as f:
        f.write(_header([
            "ZX-7 oxynitride film (fictional), near-infrared ellipsometer",
            "InGaAs detector range split at 1.60 um",
        ]))
        f.write("Wavelength (um)\te1\te2\n")
        for a, z in zip(lam_um, eps):
            f.write(f"{a:.3f}\t{z.real:.5f}\t{z.imag:.5f}\n")
    paths["nir"] = p

    # 3. An older handbook table: wavenumber, semicolon-separated, descending, written in the
    #    exp(+i w t) convention (k negative), 3000-600 cm^-1 every 4 cm^-1 (gap after 2.2 um).
    nu = np.arange(3000.0, 600.0 - 1e-9, -4.0)
    n3, k3 = eps_to_nk(true_eps(nu * EV_PER_INV_CM))
    n3 = np.round(n3 + rng.normal(0, 1e-3, nu.size), 3)
    k3 = np.round(np.abs(k3 + rng.normal(0, 1e-3, nu.size)), 4)
    p = out / "handbook_ir.txt"
    with open(p, "w", newline="\n") as f:
        f.write(_header([
            "ZX-7 (fictional) infrared optical constants, transcribed from an older data table",
            "sign convention of the table: N = n - i k",
        ]))
        f.write("Wavenumber (cm-1); n; k\n")
        for a, b, c in zip(nu, n3, k3):
            f.write(f"{a:.0f}; {b:.3f}; {-c:.4f}\n")
    paths["ir"] = p
    paths["ftir"] = _ftir_reflectance(out)
    return paths


def _ftir_reflectance(out: Path) -> Path:
    """4. FTIR normal-incidence reflectance of a thick ZX-7 sample, in percent.

    7200-400 cm^-1 every 4 cm^-1 (0.050-0.893 eV: the phonon at 0.118 eV inside, an overlap
    of 0.564-0.893 eV with the near-infrared ellipsometry), R = |(N - 1)/(N + 1)|^2 of the
    true eps, noise 0.05 % (absolute, in percent units: 5e-4 as a fraction) and a 0.4 %
    relative gain error of the spectrometer (R x 1.004). Its own generator (seed SEED + 4) so
    the other three files stay as they were.
    """
    rng = np.random.default_rng(SEED + 4)
    nu = np.arange(7200.0, 400.0 - 1e-9, -4.0)
    big_n = np.sqrt(true_eps(nu * EV_PER_INV_CM))
    r = np.abs((big_n - 1) / (big_n + 1)) ** 2 * 1.004 + rng.normal(0, 5e-4, nu.size)
    p = out / "ftir_reflectance.csv"
    with open(p, "w", newline="\n") as f:
        f.write(_header([
            "ZX-7 (fictional), FTIR normal-incidence reflectance of a thick polished sample",
            "spectrometer output: wavenumber in cm-1, reflectance in percent",
        ]))
        f.write("Wavenumber (cm-1),R (%)\n")
        for a, b in zip(nu, r):
            f.write(f"{a:.0f},{100 * b:.3f}\n")
    return p


if __name__ == "__main__":
    for name, path in make().items():
        print(f"{name}: {path}")
