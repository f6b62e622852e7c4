"""The vocabulary every stage shares: choice-valued options, checked once, up front.

Each string option of a job is a :data:`typing.Literal` alias here, and :func:`check_choice`
is the one place that turns an unknown value into a one-line error listing the choices. The
same names are used from the TOML file through the Python API to the stage functions.

:class:`FlagPolicy` is what "flagged" means to each stage: the sigma factor of flagged points
in the KK test, whether the repair replaces them, and which flag bits the pole-pair fit
down-weights.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal, get_args

from .errors import InputError
from .spectrum import Flag

__all__ = [
    "FlaggedChoice",
    "StepsChoice",
    "OverlapChoice",
    "ConventionChoice",
    "FrequencyUnitChoice",
    "RepairChoice",
    "FlagPolicy",
    "DOWNWEIGHT_FACTOR",
    "check_choice",
    "choices",
]

#: What to do with flagged points: flag only, inflate their sigma, or replace them by the
#: KK-consistent prediction before the fit.
FlaggedChoice = Literal["keep", "downweight", "replace"]
#: Detector-changeover steps: level one side on trial, or flag only.
StepsChoice = Literal["level", "keep"]
#: Overlapping sources: weighted blend, or both kept side by side.
OverlapChoice = Literal["side_by_side", "blend"]
#: Time convention of an input: detected, or stated.
ConventionChoice = Literal["auto", "exp(-iwt)", "exp(+iwt)"]
#: Frequency unit of model.json.
FrequencyUnitChoice = Literal["eV", "rad/s"]
#: What the repair replaces.
RepairChoice = Literal["none", "replace_flagged", "replace_flagged_and_regions", "model"]

#: Sigma factor of a down-weighted point (KK test, fit): it keeps 1/100 of its weight.
DOWNWEIGHT_FACTOR = 10.0


def choices(alias) -> tuple[str, ...]:
    """The allowed values of a ``Literal`` alias, in declaration order."""
    return tuple(get_args(alias))


def check_choice(name: str, value, alias) -> str:
    """Return ``value`` if it is one of ``alias``'s choices, else raise a one-line InputError.

    Examples
    --------
    >>> check_choice("flagged", "keep", FlaggedChoice)
    'keep'
    """
    allowed = choices(alias)
    if value not in allowed:
        raise InputError(
            f"{name} = {value!r} is not a choice; expected one of " + ", ".join(allowed)
        )
    return value


@dataclass(frozen=True)
class FlagPolicy:
    """What the user's ``flagged`` choice means to each stage.

    Attributes
    ----------
    choice : {"keep", "downweight", "replace"}
    """

    choice: FlaggedChoice = "replace"

    def __post_init__(self):
        check_choice("flagged", self.choice, FlaggedChoice)

    @property
    def kk_sigma_factor(self) -> float:
        """Factor on the sigma of SPIKE/STEP points in the KK test (1 with "keep")."""
        return 1.0 if self.choice == "keep" else DOWNWEIGHT_FACTOR

    @property
    def repair_choice(self) -> RepairChoice:
        """The repair policy: flagged points are replaced only with "replace"."""
        return "replace_flagged" if self.choice == "replace" else "none"

    @property
    def fit_downweighted_bits(self) -> int:
        """Flag bits whose points weigh 1/DOWNWEIGHT_FACTOR**2 in the pole-pair fit."""
        return 0 if self.choice == "keep" else int(Flag.SPIKE | Flag.STEP)
