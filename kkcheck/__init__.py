"""kkcheck: vet optical-constant data.

Read tables of n,k or eps1,eps2 from several instruments, merge them onto one photon-energy
axis, flag spikes and steps, test Kramers–Kronig consistency, repair, and fit a passive,
stable pole-residue model. See README.md for the command line and DEVELOPERS.md for the layout.

Python API (mirrors the command line; each returns a :class:`kkcheck.result.JobResult`)
    check(inputs, out_dir=None, **options)   read, merge, clean, KK test
    fit(inputs, out_dir=None, **options)     ... and repair, pole-pair fit, slab check
    run(config, out_dir=None)                the whole job from a TOML config
    demo(out_dir=None)                       the whole job on the bundled demo data
``inputs`` is a path, a list of paths, a pandas DataFrame with header-like column names, an
``(energy_ev, eps)`` pair of arrays or a Dataset (see :mod:`kkcheck.api`).
Stages, callable on their own
    read_table (kkcheck.io), merge (kkcheck.merge), clean (kkcheck.clean),
    kk_test (kkcheck.kk), repair (kkcheck.repair), fit_pole_pairs (kkcheck.rational)

Importing kkcheck asks for one BLAS thread (``OPENBLAS_NUM_THREADS``, ``OMP_NUM_THREADS``,
``MKL_NUM_THREADS`` set to 1 unless already set), as the command line does: the stages solve
many small dense problems on which threaded BLAS only contends. The variables act only if numpy
is not loaded yet; otherwise each job limits BLAS through ``threadpoolctl`` when installed.
"""

import os as _os
import sys as _sys

from ._version import __version__

_LATE_NUMPY = "numpy" in _sys.modules
for _var in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    _os.environ.setdefault(_var, "1")

__all__ = ["__version__", "check", "fit", "run", "demo"]


def __getattr__(name):  # keep `import kkcheck` light: the pipeline loads scipy/statsmodels
    if name in ("check", "fit", "run", "demo"):
        from . import pipeline

        return getattr(pipeline, name)
    raise AttributeError(f"module 'kkcheck' has no attribute {name!r}")
