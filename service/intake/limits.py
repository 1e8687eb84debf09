"""Size limits on what an upload may hold, and the checks that enforce them.

People's ids, labels and notes are short: the limits are generous for those
and refuse machine-made values (a 10-million-character id, a number of
5,000 digits, arrays nested a thousand deep) before they cost memory or time.
The id, label and value limits are settings of the service, passed in as
plain numbers; the others are fixed.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

__all__ = [
    "SizeLimits",
    "MAX_DEPTH",
    "MAX_NUMBER_CHARS",
    "MAX_RECORD_VALUES",
    "MAX_LINE_BYTES",
    "MAX_TOKEN_BYTES",
]

MAX_DEPTH = 32  # JSON nesting: the document, its records array, a record, and room for lists in notes
MAX_NUMBER_CHARS = 100  # digits, sign, point and exponent of one number as written
MAX_RECORD_VALUES = 10_000  # scalars in one JSON record (lists in node notes included)
MAX_LINE_BYTES = 1 << 20  # one NDJSON line (one record)
MAX_TOKEN_BYTES = 1 << 20  # one XML tag or comment in GraphML


@dataclass(frozen=True)
class SizeLimits:
    """Longest node id, label (segment, region, label, column name) and other value, in characters."""

    id_chars: int = 256
    label_chars: int = 512
    value_chars: int = 1024

    def __post_init__(self) -> None:
        for name in ("id_chars", "label_chars", "value_chars"):
            if getattr(self, name) < 1:
                raise ValueError(f"{name} must be at least 1")


def first_too_long(values: Sequence[object], limit: int) -> int:
    """Index of the first string longer than ``limit`` characters in ``values``; -1 when none.

    Non-strings are skipped. The common case (all strings, all short) is one
    C-level pass.
    """
    if not values:
        return -1
    try:
        if max(map(len, values)) <= limit:  # type: ignore[arg-type]
            return -1
    except TypeError:
        pass  # numbers among the values: look one by one
    for i, v in enumerate(values):
        if type(v) is str and len(v) > limit:
            return i
    return -1
