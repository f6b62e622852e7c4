"""Reading speed: kkcheck.io.read_table against pandas.read_csv on the same CSV, same run.

Prints seconds and the ratio read_table / pandas.read_csv for 1e4, 1e5 and 1e6 rows of
wavelength_nm, n, k written with full float precision (issue 13 item 4: goal <= 3x). Best
of 7 runs (3 at 1e6 rows), the two readers alternating.

Recorded on the 2-core development machine, under load from other jobs (2026-12-02):
before the fast path (kkcheck.io.fastpath) 8.5x / 57x / ~45-80x at 1e4 / 1e5 / 1e6 rows; after,
see the figures the script prints (also in the contributor guide).
"""

from __future__ import annotations

import sys
import tempfile
import time
from pathlib import Path

import numpy as np
import pandas as pd

from kkcheck.io import read_table


def _best_pair(fa, fb, repeat: int) -> tuple[float, float]:
    """Best time of each of two functions, run alternately (fair under bursty load)."""
    best = [float("inf"), float("inf")]
    for _ in range(repeat):
        for i, fn in enumerate((fa, fb)):
            t = time.perf_counter()
            fn()
            best[i] = min(best[i], time.perf_counter() - t)
    return best[0], best[1]


def main(sizes=(10_000, 100_000, 1_000_000)) -> None:
    rng = np.random.default_rng(20240601)
    with tempfile.TemporaryDirectory() as tmp:
        for n_rows in sizes:
            wl = np.sort(rng.uniform(200.0, 2000.0, n_rows))
            n = rng.uniform(1.0, 3.0, n_rows)
            k = rng.uniform(0.0, 1.0, n_rows)
            body = "\n".join(
                f"{a!r},{b!r},{c!r}" for a, b, c in zip(wl.tolist(), n.tolist(), k.tolist())
            )
            path = Path(tmp) / f"t{n_rows}.csv"
            path.write_text("wavelength_nm,n,k\n" + body + "\n")
            repeat = 7 if n_rows <= 100_000 else 3
            t_pd, t_kk = _best_pair(
                lambda p=path: pd.read_csv(p), lambda p=path: read_table(p), repeat
            )
            print(
                f"{n_rows:>9d} rows: read_table {t_kk:8.3f} s  pandas.read_csv {t_pd:7.3f} s  "
                f"ratio {t_kk / t_pd:6.1f}x (goal <= 3x)"
            )


if __name__ == "__main__":
    main(tuple(int(a) for a in sys.argv[1:]) or (10_000, 100_000, 1_000_000))
