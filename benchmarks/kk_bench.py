"""Speed and accuracy of kkcheck's eps2 -> eps1 transform on wavelength-uniform grids.

Run:  python benchmarks/kk_bench.py      (about a minute on 2 cores)

For N = 1e3, 1e4, 1e5 points uniform in wavelength over 200-2000 nm, with eps2 of a Lorentz
oscillator plus a Tauc-Lorentz band, it prints

* the time of ``eps2_to_eps1(..., method="auto")`` at all N points (best of several runs),
* the max error at 20 sample points against an independent quadrature of the finite-window
  principal value of the SAME piecewise-linear eps2: scipy.integrate.quad(weight='cauchy')
  on the segments within 40 segments of the pole, and 10-node Gauss-Legendre
  (scipy.special.roots_legendre) per segment elsewhere, where the integrand is smooth,
* the time of scipy.signal.hilbert on N points, measured in the same run, and the ratio.
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

from kkcheck.kk.transform import FAST_MIN_POINTS, eps2_to_eps1  # noqa: E402
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


def main() -> None:
    rng = np.random.default_rng(2024)
    print(f"auto path switches to the fast method at N >= {FAST_MIN_POINTS}")
    header = (
        f"{'N':>7} {'path':>6} {'t_auto [ms]':>12} {'t_hilbert [ms]':>15} {'ratio':>8} "
        f"{'max|err|':>10} {'max rel err':>12} {'t_fast [ms]':>12} {'t_hil8 [ms]':>12} "
        f"{'ratio8':>7}"
    )
    print(header)
    for n in (1_000, 10_000, 100_000):
        lam = np.linspace(200.0, 2000.0, n)
        x = np.sort(HC_EV_NM / lam)
        y = lorentz(x, 1.5, 3.2, 0.35).imag + tauc_lorentz(x, 80.0, 4.6, 1.2, 3.0).imag
        repeats = 5 if n < 100_000 else 3
        out = eps2_to_eps1(x, y)
        t_auto = best_time(lambda x=x, y=y: eps2_to_eps1(x, y), repeats)
        path = "fast" if n >= FAST_MIN_POINTS else "exact"
        t_fast = best_time(lambda x=x, y=y: eps2_to_eps1(x, y, method="fast"), repeats)
        sig = rng.normal(size=n)
        t_hil = best_time(lambda sig=sig: scipy.signal.hilbert(sig), 20)
        # the usable FFT route on a uniform grid: odd extension (2N) and 4x zero padding (8N)
        t_hil8 = best_time(lambda sig=sig: scipy.signal.hilbert(sig, N=8 * sig.size), 10)
        # 20 sample points at segment midpoints spread over the window (ends excluded)
        seg = np.unique(np.linspace(5, n - 7, 20).astype(int))
        w = 0.5 * (x[seg] + x[seg + 1])
        got = eps2_to_eps1(x, y, w)
        ref = np.array([reference_eps1(x, y, wi) for wi in w])
        err = np.max(np.abs(got - ref))
        rel = err / np.max(np.abs(ref))
        assert np.all(np.isfinite(out[1:-1]))
        print(
            f"{n:>7} {path:>6} {1e3 * t_auto:>12.2f} {1e3 * t_hil:>15.3f} "
            f"{t_auto / t_hil:>8.1f} {err:>10.2e} {rel:>12.2e} {1e3 * t_fast:>12.2f} "
            f"{1e3 * t_hil8:>12.2f} {t_auto / t_hil8:>7.1f}"
        )
    print(
        "errors: max over 20 points of |kkcheck - quadrature|, relative to max|quadrature|; "
        "t_fast: method='fast' at the same N; t_hil8: scipy.signal.hilbert on 8N points (odd "
        "extension and 4x padding, the uniform-grid FFT route), ratio8 = t_auto / t_hil8"
    )


if __name__ == "__main__":
    main()
