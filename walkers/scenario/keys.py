"""The vocabulary of the scenario schema: keys, choices, sections, value kinds and limits."""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

#: Most particles a single run (one ensemble member) may hold.
MAX_PARTICLES = 10**8
#: Most cells an output grid may hold.
MAX_OUTPUT_CELLS = 10**8
#: Flow roles a flow file may supply, with the dimension of their units (None: no units).
FLOW_ROLES: dict[str, str | None] = {
    "u": "velocity",
    "v": "velocity",
    "depth": "length",
    "bed_level": "length",
    "water_level": "length",
    "mask": None,
    "area": "area",
}

# --------------------------------------------------------------------------------------------
# The schema: data describing every key.
# --------------------------------------------------------------------------------------------

KINDS = {
    "text": "text",
    "choice": "one of the allowed words",
    "integer": "whole number",
    "number": "number (no units)",
    "boolean": "true or false",
    "quantity": "number with units",
    "quantities": "list of numbers with units",
    "integers": "list of whole numbers",
    "numbers": "list of numbers (no units)",
    "time": "ISO 8601 date-time with a zone",
    "times_or_offsets": "list of ISO 8601 date-times or time offsets",
    "coordinate": "grid coordinate (m, or degrees on geographic grids)",
    "degrees": "degrees (number)",
    "points": "list of [x, y] pairs",
    "paths": "file path or list of file paths",
    "unit": "unit name",
}


@dataclass(frozen=True)
class Key:
    """One scenario key: its kind (see :data:`KINDS`), help text and checks.

    dimension : for quantities and unit names, the physical dimension (see walkers.scenario.units).
    default : the value used when the key is absent, written as in the file (None: no default).
    allowed : for ``kind="choice"``, the accepted words.
    bound : ``"positive"`` (> 0) or ``"nonnegative"`` (>= 0) for numbers and quantities.
    length : for lists, the exact number of items (0: any number >= 1).
    only_when : the key is allowed only when another key is present (``"files"``) or has a given
        value (``"method=estimated"``) in the same table.
    """

    kind: str
    help: str
    dimension: str | None = None
    default: Any = None
    required: bool = False
    allowed: tuple[str, ...] = ()
    bound: str = ""
    length: int = 0
    only_when: str = ""


@dataclass(frozen=True)
class Choice:
    """Alternative groups of keys of which exactly one group must be given (each group complete).

    ``required=False``: at most one group. ``only_when`` as for :class:`Key`.
    """

    alternatives: tuple[tuple[str, ...], ...]
    required: bool = True
    only_when: str = ""


@dataclass(frozen=True)
class Section:
    """A table of the scenario file (``many=True``: an array of tables, ``[[name]]``)."""

    help: str
    keys: dict[str, Key | Section]
    many: bool = False
    required: bool = False
    choices: tuple[Choice, ...] = ()
    only_when: str = ""
