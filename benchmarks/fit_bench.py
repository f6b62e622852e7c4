"""Time of fit + passivity certificate for 1000 noisy points, against scipy's AAA on the same data.

Data: Rakic 1998 gold (kkcheck.materials.rakic_ld), 0.5-6 eV, 1000 points, 1e-3 relative complex
noise. Baseline: scipy.interpolate.AAA on the same samples taken at s = -i w and s = +i w
(conjugate symmetry), default tolerance. Both run in this process, best of 3. Target: fit +
certificate under 1 s. Run: python benchmarks/fit_bench.py
"""

import os

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")  # small dense problems: threads only add noise
os.environ.setdefault("OMP_NUM_THREADS", "1")

import time  # noqa: E402
import warnings  # noqa: E402

import numpy as np  # noqa: E402
from scipy.interpolate import AAA  # noqa: E402

from kkcheck import materials  # noqa: E402
from kkcheck.rational import (  # noqa: E402
    PolePairModel,
    certify_passivity,
    dense_passivity_check,
    fit_pole_pairs,
)


def best_of(fn, n=3):
    out, best = None, np.inf
    for _ in range(n):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return out, best


def main():
    rng = np.random.default_rng(1)
    w = np.linspace(0.5, 6.0, 1000)
    e0 = materials.rakic_ld(w)
    e = e0 * (1 + 1e-3 * (rng.standard_normal(w.size) + 1j * rng.standard_normal(w.size)))
    sig = 1e-3 * np.abs(e0)

    def ours():
        r = fit_pole_pairs(w, e, sig, sig)
        return r, certify_passivity(r.model)

    def aaa():
        s = np.concatenate([-1j * w, 1j * w])
        f = np.concatenate([e, np.conj(e)])
        with warnings.catch_warnings():
            warnings.simplefilter("ignore")
            return AAA(s, f)

    (r, cert), t_ours = best_of(ours)
    a, t_aaa = best_of(aaa)
    print(f"fit_pole_pairs + certificate : {t_ours * 1e3:8.1f} ms  (target < 1000 ms)")
    print(f"scipy AAA (same data, +-w)   : {t_aaa * 1e3:8.1f} ms")
    print(f"ratio ours / AAA             : {t_ours / t_aaa:8.2f}")
    true_rms = np.sqrt(np.mean(np.abs(r.model.eps(w) / e0 - 1) ** 2))
    print(
        f"ours: {r.n_pairs} entries (+conductor={r.conductor}), rms_rel vs data {r.rms_rel:.2e}, "
        f"vs truth {true_rms:.2e}, chi2/dof {r.chi2_dof:.3f}, certified {cert.certified}, "
        f"stable {r.stable}, enforcement needed {r.enforcement.needed}"
    )
    p = a.poles()
    wfit = np.sqrt(np.mean(np.abs(a(-1j * w) / e - 1) ** 2))
    stable_p = p[p.real < 0]
    print(
        f"AAA : {p.size} poles, {np.sum(p.real >= 0)} in the right half-plane, "
        f"rms_rel vs data {wfit:.2e}"
    )
    # AAA's stable poles with least-squares residues through our model type, to show passivity
    rep = stable_p[stable_p.imag > 0]
    if rep.size:
        from kkcheck.rational.model import design_matrix, model_from_vector

        x = design_matrix(rep, False, w)
        aa = np.vstack([x.real, x.imag]) / np.concatenate([np.abs(e), np.abs(e)])[:, None]
        bb = np.concatenate([e.real, e.imag]) / np.concatenate([np.abs(e), np.abs(e)])
        th = np.linalg.lstsq(aa, bb, rcond=None)[0]
        m = model_from_vector(th, rep, False)
        assert isinstance(m, PolePairModel)
        d = dense_passivity_check(m, 1e-3, 1e3)
        print(
            f"AAA stable upper poles refitted as pairs: passive on 1e-3..1e3 eV: {d.passive} "
            f"(min eps2 {d.min_eps2:.3g} at {d.min_energy_ev:.3g} eV)"
        )


if __name__ == "__main__":
    main()
