"""Test-session settings shared by every test file."""

import os

# One BLAS thread: the suite runs many small dense solves; threaded BLAS only contends on the
# two CI cores (set before numpy is imported by any test module).
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ.setdefault(_var, "1")
