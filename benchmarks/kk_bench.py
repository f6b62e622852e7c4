"""Speed and accuracy of kkcheck's eps2 -> eps1 transform on wavelength-uniform grids.

Run:  python benchmarks/kk_bench.py      (about a minute on 2 cores)

For N = 1e3, 1e4, 1e5, 3e5 points uniform in wavelength over 200-2000 nm, with eps2 of a Lorentz
oscillator plus a Tauc-Lorentz band, it prints

* the time of ``eps2_to_eps1(..., method="auto")`` at all N points, first call and best of 3
  (kernel tables cached per grid), and of the dense and the fast path alone,
* the max error at 20 sample points against an independent quadrature of the finite-window
  principal value of the SAME piecewise-linear eps2: scipy.integrate.quad(weight='cauchy')
  on the segments within 40 segments of the pole, and 10-node Gauss-Legendre
  (scipy.special.roots_legendre) per segment elsewhere, where the integrand is smooth,
* the practical limit measured in the same run: the exact formula by
  scipy.signal.fftconvolve on a uniform-energy grid of the same N, and the ratio.
"""

from __future__ import annotations

import sys
import time
from pathlib import Path

import numpy as np
import scipy.signal
from scipy import integrate
from scipy.special import roots_legendre

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from kkcheck.kk.transform import (  # noqa: E402
    DENSE_S_PER_PAIR,
    FAST_S_FIXED,
    FAST_S_PER_POINT,
    eps2_to_eps1,
    path_costs,
)
from kkcheck.materials import lorentz, tauc_lorentz  # noqa: E402
from kkcheck.units import HC_EV_NM  # noqa: E402

NEAR_SEGMENTS = 40
GL_NODES = 10


def best_time(fn, repeats: int) -> float:
    best = np.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return best


def reference_eps1(x: np.ndarray, y: np.ndarray, w: float) -> float:
    """(2/pi) P int_{x0}^{xM} t f(t) / (t^2 - w^2) dt for PL f, by quadrature."""
    j = int(np.searchsorted(x, w)) - 1  # segment holding the pole
    lo, hi = max(0, j - NEAR_SEGMENTS), min(x.size - 1, j + NEAR_SEGMENTS + 1)
    total = 0.0
    for k in range(lo, hi):
        a, b, ya, yb = x[k], x[k + 1], y[k], y[k + 1]

        def f(t, a=a, b=b, ya=ya, yb=yb):
            return t * (ya + (yb - ya) * (t - a) / (b - a)) / (t + w)

        if k == j:
            total += integrate.quad(f, a, b, weight="cauchy", wvar=w, epsabs=1e-14)[0]
        else:
            total += integrate.quad(lambda t, f=f: f(t) / (t - w), a, b, epsabs=1e-14)[0]
    far = np.r_[np.arange(0, lo), np.arange(hi, x.size - 1)]
    if far.size:
        g, gw = roots_legendre(GL_NODES)
        a, b = x[far][:, None], x[far + 1][:, None]
        ya, yb = y[far][:, None], y[far + 1][:, None]
        t = 0.5 * (a + b) + 0.5 * (b - a) * g
        ft = ya + (yb - ya) * (t - a) / (b - a)
        total += float(np.sum(0.5 * (b - a) * gw * t * ft / (t * t - w * w)))
    return 2.0 / np.pi * total


def fftconvolve_limit(n: int, lo_ev: float, hi_ev: float) -> float:
    """Time of the exact PL formula by scipy.signal.fftconvolve on N uniform-energy points."""
    x = np.linspace(lo_ev, hi_ev, n)
    y = lorentz(x, 1.5, 3.2, 0.35).imag

    def run():
        h = x[1] - x[0]
        c = np.diff(np.concatenate(([0.0], np.diff(y) / h, [0.0])))
        m = np.arange(2 * n - 1, dtype=float)
        u = (m - (n - 1)) * h
        toe = u * np.log(np.where(u == 0, 1.0, np.abs(u)))
        v = 2.0 * x[0] + m * h
        hank = v * np.log(v)
        s = scipy.signal.fftconvolve(c[::-1], hank)[n - 1 : 2 * n - 1]
        s -= scipy.signal.fftconvolve(c, toe)[n - 1 : 2 * n - 1]
        return s

    return best_time(run, 5)


def main() -> None:
    print(
        f"auto path by cost model: dense {DENSE_S_PER_PAIR:.1e} s/pair, fast "
        f"{FAST_S_FIXED:.1e} s + {FAST_S_PER_POINT:.1e} s/point"
    )
    header = (
        f"{'N':>7} {'path':>6} {'t_cold [ms]':>12} {'t_warm [ms]':>12} {'t_limit [ms]':>13} "
        f"{'ratio':>6} {'max rel err':>12} {'t_dense [ms]':>13} {'t_fast [ms]':>12}"
    )
    print(header)
    for n in (1_000, 10_000, 100_000, 300_000):
        lam = np.linspace(200.0, 2000.0, n)
        x = np.sort(HC_EV_NM / lam)
        y = lorentz(x, 1.5, 3.2, 0.35).imag + tauc_lorentz(x, 80.0, 4.6, 1.2, 3.0).imag
        t0 = time.perf_counter()
        out = eps2_to_eps1(x, y)  # first call on this axis: no cached kernel tables
        t_cold = time.perf_counter() - t0
        t_warm = best_time(lambda x=x, y=y: eps2_to_eps1(x, y), 3)
        dense, fast = path_costs(n, n)
        path = "fast" if fast < dense else "exact"
        t_fast = best_time(lambda x=x, y=y: eps2_to_eps1(x, y, method="fast"), 3)
        t_dense = np.nan
        if n <= 10_000:
            t_dense = best_time(lambda x=x, y=y: eps2_to_eps1(x, y, method="exact"), 3)
        t_lim = fftconvolve_limit(n, x[0], x[-1])
        # 20 sample points at segment midpoints spread over the window (ends excluded)
        seg = np.unique(np.linspace(5, n - 7, 20).astype(int))
        w = 0.5 * (x[seg] + x[seg + 1])
        got = eps2_to_eps1(x, y, w)
        ref = np.array([reference_eps1(x, y, wi) for wi in w])
        rel = np.max(np.abs(got - ref)) / np.max(np.abs(ref))
        assert np.all(np.isfinite(out[1:-1]))
        print(
            f"{n:>7} {path:>6} {1e3 * t_cold:>12.1f} {1e3 * t_warm:>12.1f} {1e3 * t_lim:>13.1f} "
            f"{t_warm / t_lim:>6.1f} {rel:>12.2e} {1e3 * t_dense:>13.1f} {1e3 * t_fast:>12.1f}"
        )
    print(
        "t_cold: first call on the axis; t_warm: best of 3 (cached kernel tables); t_limit: the "
        "exact formula by scipy.signal.fftconvolve on a uniform-energy grid of the same N; "
        "ratio = t_warm / t_limit; error: max |kkcheck - quadrature| / max|quadrature| at 20 "
        "points (quad(weight='cauchy') near the pole, Gauss-Legendre elsewhere)"
    )


if __name__ == "__main__":
    main()
