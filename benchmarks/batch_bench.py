"""Datasets per second of ``kkcheck batch`` against a serial loop over kkcheck.pipeline.check.

Data: N (default 200) small noisy datasets (100 points; --points 0 gives 40-80) generated
in a temporary folder from closed-form materials (Tauc-Lorentz, Lorentz, Sellmeier silica,
Rakić gold), half as n,k against wavelength and half as eps1,eps2 against energy, every fifth
with a planted KK fault (k shifted by 50 meV).

Baseline: a plain loop calling ``kkcheck.pipeline.check(path, out_dir=...)`` for every file in
this process (after one warm-up call, so imports are not counted); it writes the same
per-dataset outputs as the batch. Then ``run_batch`` with jobs=1 (in process), jobs=2 (local
worker processes, their start-up included) and, when dask.distributed is installed, the Dask
engine on a LocalCluster of 2 single-threaded worker processes (cluster start-up reported
apart, not included). Each run is repeated (--repeat, default 3) and the best time kept, as
this machine may be shared. The ratio is baseline time / batch time (> 1: faster than the loop).

BLAS threads are capped at 1 here (as the batch does in its workers): on small problems
OpenBLAS's own threads only add overhead, and on a loaded 2-core machine they made the
in-process runs 3-4x slower.

Run: python benchmarks/batch_bench.py [--n 200] [--points 100] [--fit] [--repeat 3]
"""

import os

for _var in ("OMP_NUM_THREADS", "OPENBLAS_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")

import argparse  # noqa: E402
import logging  # noqa: E402
import shutil  # noqa: E402
import tempfile  # noqa: E402
import time  # noqa: E402
from pathlib import Path  # noqa: E402

import numpy as np  # noqa: E402

from kkcheck import pipeline  # noqa: E402
from kkcheck.batch import run_batch  # noqa: E402
from kkcheck.materials import lorentz, rakic_ld, sellmeier_silica, tauc_lorentz  # noqa: E402
from kkcheck.units import HC_EV_NM, eps_to_nk  # noqa: E402

MATERIALS = (
    (lambda e: 2.0 + tauc_lorentz(e, 80.0, 4.0, 2.0, 2.2), (1.0, 6.0)),
    (lambda e: 1.5 + lorentz(e, 2.0, 3.0, 1.0), (1.0, 5.5)),
    (sellmeier_silica, (0.5, 5.0)),
    (rakic_ld, (0.8, 5.0)),
)


def make_datasets(folder: Path, n: int, points: int | None) -> None:
    rng = np.random.default_rng(2024)
    for i in range(n):
        f, (lo, hi) = MATERIALS[i % len(MATERIALS)]
        m = points or int(rng.integers(40, 81))
        e = np.linspace(lo, hi, m)
        nn, k = eps_to_nk(f(e))
        if i % 5 == 0 and i % len(MATERIALS) in (0, 1):
            k = eps_to_nk(f(e - 0.05))[1]
        if i % 2 == 0:
            lam = HC_EV_NM / e
            nn = nn + rng.normal(0, 1e-3, m)
            k = np.abs(k + rng.normal(0, 1e-3, m))
            body = "".join(f"{lam[j]:.4f},{nn[j]:.6f},{k[j]:.6f}\n" for j in range(m)[::-1])
            (folder / f"d{i:04d}.csv").write_text("wavelength_nm,n,k\n" + body)
        else:
            eps = (nn + 1j * k) ** 2
            s = 1e-3 * float(np.mean(np.abs(eps)))
            e1 = eps.real + rng.normal(0, s, m)
            e2 = np.abs(eps.imag + rng.normal(0, s, m))
            body = "".join(f"{a:.6f},{b:.6f},{c:.6f}\n" for a, b, c in zip(e, e1, e2))
            (folder / f"d{i:04d}.csv").write_text("energy_ev,eps1,eps2\n" + body)


def timed(fn, repeat: int = 1):
    """(result of the last call, best wall time of ``repeat`` calls [s])."""
    best, out = float("inf"), None
    for _ in range(repeat):
        t = time.perf_counter()
        out = fn()
        best = min(best, time.perf_counter() - t)
    return out, best


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--n", type=int, default=200, help="number of datasets (default 200)")
    ap.add_argument("--points", type=int, default=100, help="points per dataset (default 100)")
    ap.add_argument("--fit", action="store_true", help="also repair and fit each dataset")
    ap.add_argument("--repeat", type=int, default=3, help="best of this many runs (default 3)")
    args = ap.parse_args()

    tmp = Path(tempfile.mkdtemp(prefix="kkcheck_batch_bench_"))
    try:
        src = tmp / "in"
        src.mkdir()
        make_datasets(src, args.n, args.points)
        files = sorted(src.glob("*.csv"))
        job = pipeline.fit if args.fit else pipeline.check
        job([str(files[0])], out_dir=str(tmp / "warm"))  # imports and first-call costs

        def loop():
            return [job([str(p)], out_dir=str(tmp / "loop" / p.stem)) for p in files]

        results, t_base = timed(loop, args.repeat)
        n_inc = sum(r.kk.verdict == "inconsistent" for r in results)
        size = f"{args.points} points" if args.points else "40-80 points"
        print(
            f"{args.n} datasets of {size}{' with fit' if args.fit else ''} "
            f"({n_inc} inconsistent); {os.cpu_count()} cores, load average "
            f"{os.getloadavg()[0]:.1f} at start; best of {args.repeat}"
        )
        print(f"{'run':<34}{'seconds':>9}{'datasets/s':>12}{'ratio':>8}")

        def show(label, seconds):
            print(f"{label:<34}{seconds:9.2f}{args.n / seconds:12.1f}{t_base / seconds:8.2f}")

        show("serial loop over pipeline.check", t_base)
        verdicts = [r.kk.verdict for r in results]
        for jobs in (1, 2):
            res, t = timed(
                lambda j=jobs: run_batch(src, tmp / f"j{j}", jobs=j, fit=args.fit), args.repeat
            )
            assert [r["verdict"] for r in res.rows] == verdicts, "batch verdicts differ"
            show(f"batch, local, jobs={jobs}", t)
        try:
            from dask.distributed import Client, LocalCluster
        except ImportError:
            print("dask engine: skipped (dask.distributed not installed)")
            return
        (cluster, client), t_start = timed(
            lambda: (
                c := LocalCluster(
                    n_workers=2,
                    threads_per_worker=1,
                    processes=True,
                    dashboard_address=None,
                    silence_logs=logging.ERROR,
                ),
                Client(c),
            )
        )
        try:
            kw = dict(engine="dask", client=client, fit=args.fit)
            run_batch(src, tmp / "dask_warm", items=files[:2], **kw)  # worker imports
            res, t = timed(lambda: run_batch(src, tmp / "dask", **kw), args.repeat)
            assert [r["verdict"] for r in res.rows] == verdicts, "dask verdicts differ"
            show("batch, dask LocalCluster 2x1", t)
            print(f"(LocalCluster start-up {t_start:.2f} s, not included)")
        finally:
            client.close()
            cluster.close()
    finally:
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    main()
