"""What a job is: its inputs, its options, and the TOML job file that states both.

Option names are the same from the TOML file through the Python API (:class:`JobOptions`) to the
stage functions; choice-valued options are the ``Literal`` aliases of :mod:`kkcheck.options`,
checked once, up front, when a :class:`JobOptions` is made.

Config file (TOML) keys, all optional except ``inputs``::

    title = "ZX-7 film"                # shown in the report
    out = "reports/zx7"                # output folder (relative to the config file)
    inputs = ["uv.csv", {path = "ir.txt", axis = "wavenumber_cm-1", quantity = "nk",
              name = "FTIR", convention = "auto"}]

    [merge]
    reference = "uv"                   # source name; default: the rule of kkcheck.merge
    correct = true                     # apply a scale/offset the data determine; "force"
    max_correction = 0.10              # larger corrections need correct = "force"
    overlap = "blend"                  # or "side_by_side"
    rank_sources = true                # use KK consistency to say which source is off

    [clean]
    flagged = "replace"                # keep | downweight | replace
    steps = "level"                    # level | keep (detector-changeover steps)

    [kk]
    anchors_ev = [1.5, 2.5]
    max_points = 3000                  # bin smooth stretches of larger spectra first

    [fit]
    enabled = true
    pairs = 4                          # or: tol = 0.01 (rms relative error)
    chi2_target = 1.5                  # noise floor for the automatic order choice
    frequency_unit = "eV"              # or "rad/s"

    [slab]
    thickness_nm = 100.0

    [report]
    html = true
"""

from __future__ import annotations

import contextvars
import dataclasses
from dataclasses import dataclass
from pathlib import Path

from .errors import InputError
from .options import (
    ConventionChoice,
    FlaggedChoice,
    FlagPolicy,
    FrequencyUnitChoice,
    OverlapChoice,
    StepsChoice,
    check_choice,
)

__all__ = ["InputSpec", "JobOptions", "input_specs", "job_options", "load_config"]


@dataclass(frozen=True)
class InputSpec:
    """One input file and how to read it (options override what the header says)."""

    path: str
    axis: str | None = None
    quantity: str | None = None
    name: str | None = None
    convention: str = "auto"
    columns: dict | None = None  # roles -> columns (kkcheck.io.select), e.g. {axis = 1, n = 2}


@dataclass(frozen=True)
class JobOptions:
    """Every setting of a job (all recorded in the report's provenance).

    Attributes
    ----------
    axis, quantity, convention : str or None
        Reading defaults for inputs without a usable header (see :func:`kkcheck.io.read_table`).
    reference : str or None
        Name of the source the others are scaled to (default: the merge's rule).
    correct : bool or "force"
        True: apply a source's estimated scale/offset when the data determine it (the rule
        of :mod:`kkcheck.merge.decision`); False: never; ``"force"``: whenever the scale is
        usable, even above ``max_correction`` (always a warning). Reported either way.
    max_correction : float
        Largest relative change a correction may make without ``correct = "force"``
        (default 0.10 = 10 %, :data:`kkcheck.merge.MAX_CORRECTION`).
    overlap : str
        ``"blend"`` or ``"side_by_side"`` (see :func:`kkcheck.merge.merge`).
    rank_sources : bool
        With several sources, try each as reference and compare KK consistency.
    flagged : str
        ``"keep"`` (flags only), ``"downweight"`` (flagged points get 10x their sigma in the
        KK test and the fit) or ``"replace"`` (default: down-weighted in the KK test, then
        replaced by the KK-consistent prediction before the fit; every change is recorded).
    steps : str
        ``"level"`` (default: shift one side of each detected changeover step to meet the
        other before the KK test, see :func:`kkcheck.clean.level_steps`; every shift is
        reported) or ``"keep"`` (flag only).
    anchors_ev : tuple of float
        Energies [eV] where eps1 is trusted; also the anchors of the MSKK view.
    tolerance : float
        Relative size of an inconsistency (of max(|eps|, 1)) below which a significant KK
        misfit does not make the verdict "inconsistent" (default 0.01, i.e. 1 %; see
        :mod:`kkcheck.kk.verdict`).
    mskk : bool
        Report the MSKK view of the KK test (:func:`kkcheck.kk.mskk.mskk_view`).
    reflectance_scale : str
        How R is written in reflectance inputs (quantity ``"R"``): ``"auto"``,
        ``"fraction"`` or ``"percent"`` (:func:`kkcheck.io.reflectance.read_reflectance`).
    max_points : int
        Above this many points, smooth stretches are binned before the KK test
        (:func:`kkcheck.kk.binning.bin_spectrum`); sharp features, spikes and steps stay unbinned.
    do_fit : bool
        Run repair, pole-pair fit and slab check.
    pairs : int or None
        Number of pole pairs (None: automatic order selection).
    tol : float or None
        Target rms relative error for the order selection.
    chi2_target : float
        Without ``tol``: the chi2/dof at which the fit counts as at the noise floor. The noise
        is estimated from the data (to some 10-20 %), so 1.5 by default rather than the
        purely statistical 1 + 3 sqrt(2/dof).
    frequency_unit : str
        ``"eV"`` or ``"rad/s"`` for model.json.
    thickness_nm : float
        Film thickness for the slab check [nm].
    slab_tolerance : float or None
        Aim the fit at the film (``thickness_nm``, ``substrate_n``, ``coherent``): the fewest
        pairs whose R and T stay within this of the data's (None: the plain eps fit).
    substrate_n : float or None
        Constant index of a thick substrate under the film (None: free-standing).
    coherent : bool
        Coherent film (fringes) or incoherent (free-standing only).
    html : bool
        Write the HTML report, Markdown summary and figures.
    title : str
        Report title.
    range_ev : tuple of float or None
        (lo, hi) photon-energy window [eV]: only input points inside it are analysed (each
        source's provenance notes say how many were kept). None: everything.
    axis_out : str or None
        Axis unit of the extra repaired table (``repaired_<unit>.csv``); default: the first
        input's unit. One of :data:`kkcheck.units.AXIS_UNITS`.
    """

    axis: str | None = None
    quantity: str | None = None
    convention: ConventionChoice = "auto"
    reference: str | None = None
    correct: bool | str = True
    max_correction: float = 0.10
    overlap: OverlapChoice = "side_by_side"
    rank_sources: bool = True
    flagged: FlaggedChoice = "replace"
    steps: StepsChoice = "level"
    anchors_ev: tuple[float, ...] = ()
    tolerance: float = 0.01
    mskk: bool = True
    reflectance_scale: str = "auto"
    max_points: int = 3000
    do_fit: bool = False
    pairs: int | None = None
    tol: float | None = None
    chi2_target: float = 1.5
    frequency_unit: FrequencyUnitChoice = "eV"
    thickness_nm: float = 100.0
    slab_tolerance: float | None = None
    substrate_n: float | None = None
    coherent: bool = True
    html: bool = False
    title: str = "kkcheck report"
    range_ev: tuple[float, float] | None = None
    axis_out: str | None = None

    def __post_init__(self):
        check_choice("convention", self.convention, ConventionChoice)
        check_choice("overlap", self.overlap, OverlapChoice)
        check_choice("flagged", self.flagged, FlaggedChoice)
        check_choice("steps", self.steps, StepsChoice)
        check_choice("frequency_unit", self.frequency_unit, FrequencyUnitChoice)
        if self.correct not in (True, False, "force"):
            raise InputError(f'correct must be true, false or "force", got {self.correct!r}')
        if not self.max_correction > 0:
            raise InputError(f"max_correction must be > 0, got {self.max_correction!r}")
        _check_range_and_axis(self.range_ev, self.axis_out)
        if self.reflectance_scale not in ("auto", "fraction", "percent"):
            raise InputError(
                "reflectance_scale must be auto, fraction or percent, got "
                f"{self.reflectance_scale!r}"
            )

    @property
    def flag_policy(self) -> FlagPolicy:
        """What ``flagged`` means to each stage."""
        return FlagPolicy(self.flagged)

    def as_dict(self) -> dict:
        return dataclasses.asdict(self)


def _check_range_and_axis(range_ev, axis_out) -> None:
    from .units import AXIS_UNITS

    if axis_out is not None and axis_out not in AXIS_UNITS:
        raise InputError(f"axis_out must be one of {', '.join(AXIS_UNITS)}, got {axis_out!r}")
    if range_ev is not None:
        lo, hi = range_ev
        if not (0 < lo < hi):
            raise InputError(f"range_ev must be (lo, hi) with 0 < lo < hi [eV], got {range_ev!r}")


def input_specs(inputs, options: JobOptions) -> tuple[InputSpec, ...]:
    specs = []
    for item in inputs:
        if isinstance(item, InputSpec):
            specs.append(item)
        elif isinstance(item, dict):
            if "path" not in item:
                raise InputError(f"an input entry has no 'path': {item!r}")
            unknown = set(item) - {"path", "axis", "quantity", "name", "convention", "columns"}
            if unknown:
                raise InputError(
                    f"unknown key(s) {sorted(unknown)} in input entry for {item['path']}; "
                    "expected path, axis, quantity, name, convention, columns"
                )
            if "columns" in item and not isinstance(item["columns"], dict):
                raise InputError(
                    f"columns of input entry {item['path']} must be a table such as "
                    "{axis = 1, n = 2, k = 3}"
                )
            specs.append(InputSpec(**{k: v if k == "columns" else str(v) for k, v in item.items()}))
        else:
            specs.append(
                InputSpec(
                    str(item),
                    axis=options.axis,
                    quantity=options.quantity,
                    convention=options.convention,
                )
            )
    if not specs:
        raise InputError("no input files given; expected at least one table")
    return tuple(specs)


def job_options(**kw) -> JobOptions:
    """:class:`JobOptions` from keywords (TypeError naming unknown ones)."""
    known = {f.name for f in dataclasses.fields(JobOptions)}
    bad = set(kw) - known
    if bad:
        raise TypeError(f"unknown option(s): {', '.join(sorted(bad))}")
    if "anchors_ev" in kw and kw["anchors_ev"] is not None:
        kw["anchors_ev"] = tuple(float(a) for a in kw["anchors_ev"])
    if isinstance(kw.get("range_ev"), str):  # "400:1000nm" as on the command line
        from .api import parse_range

        kw["range_ev"] = parse_range(kw["range_ev"])
    elif kw.get("range_ev") is not None:
        kw["range_ev"] = tuple(float(a) for a in kw["range_ev"])
    return JobOptions(**kw)


#: TOML section -> {key in the file: JobOptions field}; the same names where possible.
CONFIG_SECTIONS = {
    "merge": {
        "reference": "reference",
        "correct": "correct",
        "max_correction": "max_correction",
        "overlap": "overlap",
        "rank_sources": "rank_sources",
    },
    "clean": {"flagged": "flagged", "steps": "steps"},
    "kk": {
        "anchors_ev": "anchors_ev",
        "max_points": "max_points",
        "tolerance": "tolerance",
        "mskk": "mskk",
    },
    "reflectance": {"scale": "reflectance_scale"},
    "fit": {
        "enabled": "do_fit",
        "pairs": "pairs",
        "tol": "tol",
        "chi2_target": "chi2_target",
        "frequency_unit": "frequency_unit",
    },
    "slab": {
        "thickness_nm": "thickness_nm",
        "tolerance": "slab_tolerance",
        "substrate_n": "substrate_n",
        "coherent": "coherent",
    },
    "report": {"html": "html"},
}
_TOP_KEYS = {"title", "out", "inputs", *CONFIG_SECTIONS}


def _read_toml(p: Path) -> dict:
    try:
        import tomllib
    except ModuleNotFoundError:  # Python 3.10
        import tomli as tomllib  # type: ignore[no-redef]

    try:
        raw = p.read_bytes()
    except FileNotFoundError:
        raise InputError("config file not found", path=str(p)) from None
    except OSError as exc:
        raise InputError(f"cannot read config file ({exc.strerror})", path=str(p)) from None
    try:
        return tomllib.loads(raw.decode("utf-8"))
    except UnicodeDecodeError:
        raise InputError("config file is not UTF-8 text", path=str(p)) from None
    except tomllib.TOMLDecodeError as exc:
        line = getattr(exc, "lineno", None)
        msg = str(exc).split(" (at line")[0]
        raise InputError(f"not valid TOML: {msg}", path=str(p), line=line) from None


def _config_inputs(cfg: dict, p: Path) -> list:
    if "inputs" not in cfg or not cfg["inputs"]:
        raise InputError("no 'inputs' list; expected inputs = [\"file.csv\", ...]", path=str(p))
    base = p.parent
    inputs = []
    for item in cfg["inputs"]:
        if isinstance(item, str):
            inputs.append(str(base / item))
        elif isinstance(item, dict) and "path" in item:
            inputs.append({**item, "path": str(base / item["path"])})
        else:
            raise InputError(
                f"an input must be a path or a table with 'path', got {item!r}", path=str(p)
            )
    return inputs


def _config_options(cfg: dict, p: Path) -> dict:
    kw: dict = {"do_fit": True, "html": True}
    if "title" in cfg:
        kw["title"] = str(cfg["title"])
    for sec, mapping in CONFIG_SECTIONS.items():
        table = cfg.get(sec, {})
        if not isinstance(table, dict):
            raise InputError(f"[{sec}] must be a table", path=str(p))
        bad = set(table) - set(mapping)
        if bad:
            raise InputError(
                f"unknown key(s) {sorted(bad)} in [{sec}]; expected {', '.join(sorted(mapping))}",
                path=str(p),
            )
        for k, v in table.items():
            kw[mapping[k]] = v
    return kw


def _confine(p: Path, inputs, out: Path | None, allow_outside: bool | None) -> None:
    """Refuse (or, when allowed, warn about) job-file paths that leave the job file's folder.

    Real paths are compared (``..`` and symlinks resolved), so ``../../etc/x`` and a symlink
    to it are both outside. Allowed with ``allow_outside`` (``kkcheck run --allow-outside``),
    each such path is reported as a warning.
    """
    import os
    import warnings

    base = Path(os.path.realpath(p.parent))
    allow = ALLOW_OUTSIDE.get() if allow_outside is None else allow_outside
    named = [("input", q) for q in inputs] + ([("output folder", out)] if out is not None else [])
    for what, q in named:
        real = Path(os.path.realpath(q))
        if real == base or base in real.parents:
            continue
        if not allow:
            raise InputError(
                f"the {what} {q} lies outside the job file's folder; expected paths inside "
                "it (kkcheck run --allow-outside reads or writes there on purpose)",
                path=str(p),
            )
        msg = f"{p}: the {what} {q} lies outside the job file's folder"
        warnings.warn(msg, UserWarning, stacklevel=3)


#: Default of ``allow_outside`` for :func:`load_config` (the command line's --allow-outside).
ALLOW_OUTSIDE = contextvars.ContextVar("kkcheck_allow_outside", default=False)


def load_config(path, *, allow_outside: bool | None = None) -> tuple[list, Path | None, JobOptions]:
    """Read a TOML job file; returns (inputs, out_dir, options). Paths are relative to it.

    Inputs and the output folder must lie inside the job file's folder unless
    ``allow_outside`` (default: :data:`ALLOW_OUTSIDE`, False) is set; then each outside path
    is reported as a warning.
    """
    p = Path(path)
    cfg = _read_toml(p)
    unknown = set(cfg) - _TOP_KEYS
    if unknown:
        raise InputError(
            f"unknown key(s) {sorted(unknown)}; expected {', '.join(sorted(_TOP_KEYS))}",
            path=str(p),
        )
    inputs = _config_inputs(cfg, p)
    kw = _config_options(cfg, p)
    out = Path(p.parent / cfg["out"]) if "out" in cfg else None
    _confine(p, [i["path"] if isinstance(i, dict) else i for i in inputs], out, allow_outside)
    try:
        return inputs, out, job_options(**kw)
    except InputError as exc:
        raise InputError(exc.message, path=str(p)) from None
    except TypeError as exc:
        raise InputError(str(exc), path=str(p)) from None
