"""KK test at 1e4, 1e5 and 1e6 points: time and peak memory, each size in its own process.

The hard case of the real-data issue: a smooth, low-noise table (two Lorentz oscillators,
closed form; noise 1e-4 in n and k with its true sigma given), where a 3-sigma feature test
used to keep tens of thousands of points out of the bins. Each size runs in a subprocess
(peak memory is ru_maxrss of that process) and prints its time as a ratio against a baseline
measured in the same process: ``numpy.linalg.lstsq`` on the capped dense problem (the
weighted design at the points the fit sees, unconstrained), i.e. what one plain solve of the
capped problem costs. Ctrl-C stops the run (every array operation is bounded by the cap).

Run: ``python benchmarks/kk_test_bench.py`` (``--sizes 1e4 1e5`` for fewer).
"""

from __future__ import annotations

import argparse
import json
import os
import resource
import subprocess
import sys
import time

os.environ.setdefault("OPENBLAS_NUM_THREADS", "1")


def _table(n: int):
    import numpy as np

    from kkcheck import materials as mat
    from kkcheck.spectrum import Dataset, Spectrum
    from kkcheck.units import eps_to_nk, nk_to_eps, sigma_nk_to_eps

    e = np.linspace(0.5, 5.0, n)
    eps = 1.5 + mat.lorentz(e, 3.0, 3.4, 0.3) + mat.lorentz(e, 6.0, 4.3, 0.6)
    nn, kk = eps_to_nk(eps)
    rng = np.random.default_rng(0)
    s = 1e-4
    noisy = nk_to_eps(nn + s * rng.standard_normal(n), kk + s * rng.standard_normal(n))
    s1, s2 = sigma_nk_to_eps(nn, kk, np.full(n, s), np.full(n, s))
    sp = Spectrum.from_dataset(Dataset("smooth", e, noisy, quantity="nk"))
    import dataclasses

    return dataclasses.replace(sp, sigma_eps1=s1, sigma_eps2=s2)


def _one(n: int) -> dict:
    """Time and memory of bin + KK test at n points, and the lstsq baseline (one process)."""
    import numpy as np

    from kkcheck.kk.binning import bin_spectrum
    from kkcheck.kk.consistency import kk_test

    sp = _table(n)
    t0 = time.perf_counter()
    binned, record = bin_spectrum(sp, 3000)
    t_bin = time.perf_counter() - t0
    t0 = time.perf_counter()
    res = kk_test(binned)
    t_test = time.perf_counter() - t0
    b1, b2 = res.model.design(binned.energy_ev)
    a = np.vstack([b1 / res.sigma_eps1[:, None], b2 / res.sigma_eps2[:, None]])
    y = np.concatenate([binned.eps.real / res.sigma_eps1, binned.eps.imag / res.sigma_eps2])
    t0 = time.perf_counter()
    np.linalg.lstsq(a, y, rcond=None)
    t_base = time.perf_counter() - t0
    return {
        "n": n,
        "points_fit": len(binned),
        "kept_sharp": record.kept_sharp,
        "threshold": record.sharp_threshold,
        "bin_s": t_bin,
        "test_s": t_test,
        "lstsq_s": t_base,
        "verdict": res.verdict,
        "peak_mib": resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024,
    }


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--sizes", nargs="*", default=["1e4", "1e5", "1e6"])
    ap.add_argument("--child", type=int, help=argparse.SUPPRESS)
    args = ap.parse_args()
    if args.child:
        print(json.dumps(_one(args.child)))
        return
    print(f"{'points':>9} {'fit':>5} {'sharp':>5} {'z':>5} {'bin s':>7} {'test s':>7} "
          f"{'lstsq s':>7} {'test/lstsq':>10} {'peak MiB':>9} verdict")  # fmt: skip
    try:
        for size in args.sizes:
            n = int(float(size))
            out = subprocess.run(
                [sys.executable, __file__, "--child", str(n)],
                check=True,
                capture_output=True,
                text=True,
            )
            r = json.loads(out.stdout.strip().splitlines()[-1])
            print(
                f"{r['n']:>9} {r['points_fit']:>5} {r['kept_sharp']:>5} {r['threshold']:>5.2f} "
                f"{r['bin_s']:>7.3f} {r['test_s']:>7.2f} {r['lstsq_s']:>7.2f} "
                f"{r['test_s'] / r['lstsq_s']:>10.2f} {r['peak_mib']:>9.0f} {r['verdict']}",
                flush=True,
            )
    except KeyboardInterrupt:
        print("interrupted", file=sys.stderr)
        sys.exit(130)


if __name__ == "__main__":
    main()
