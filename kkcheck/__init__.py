"""kkcheck: vet optical-constant data.

Read tables of n,k or eps1,eps2 from several instruments, merge them onto one photon-energy
axis, flag spikes and steps, test Kramers–Kronig consistency, repair, and fit a passive,
stable pole-residue model. See README.md for the command line and DEVELOPERS.md for the layout.

Python API (mirrors the command line; each returns a :class:`kkcheck.result.JobResult`)
    check(inputs, out_dir=None, **options)   read, merge, clean, KK test
    fit(inputs, out_dir=None, **options)     ... and repair, pole-pair fit, slab check
    run(config, out_dir=None)                the whole job from a TOML config
    demo(out_dir=None)                       the whole job on the bundled demo data
Stages, callable on their own
    read_table (kkcheck.io), merge (kkcheck.merge), clean (kkcheck.clean),
    kk_test (kkcheck.kk), repair (kkcheck.repair), fit_pole_pairs (kkcheck.rational)
"""

from ._version import __version__

__all__ = ["__version__", "check", "fit", "run", "demo"]


def __getattr__(name):  # keep `import kkcheck` light: the pipeline loads scipy/statsmodels
    if name in ("check", "fit", "run", "demo"):
        from . import pipeline

        return getattr(pipeline, name)
    raise AttributeError(f"module 'kkcheck' has no attribute {name!r}")
