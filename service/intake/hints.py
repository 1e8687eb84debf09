"""Which header columns probably mean what: hints for a CSV whose names do not match.

Spreadsheet exports name their columns ``From,To,Interactions`` or
``Member ID`` rather than ``source,target,weight`` or ``id``. When a read
fails on the header, :func:`suggest_columns` maps each role the reader needs
to a column of the header by common names, compared case-insensitively with
spaces, hyphens and dots read as underscores. The caller turns the mapping
into the options to send again.
"""

from __future__ import annotations

import re
from collections.abc import Mapping, Sequence
from dataclasses import dataclass

__all__ = ["EDGE_NAMES", "NODE_NAMES", "ColumnHint", "suggest_columns", "normalise"]

# Role -> names that usually mean it (common practice in exports), most specific first.
EDGE_NAMES: Mapping[str, tuple[str, ...]] = {
    "source": ("source", "src", "from", "sender", "from_id", "source_id", "caller", "origin",
               "follower", "node1", "node_1", "person1", "person_1", "member1", "member_1", "a"),
    "target": ("target", "dst", "to", "recipient", "receiver", "to_id", "target_id", "callee",
               "destination", "dest", "followee", "node2", "node_2", "person2", "person_2",
               "member2", "member_2", "b"),
    "weight": ("weight", "count", "interactions", "calls", "messages", "emails", "contacts",
               "frequency", "freq", "times", "strength", "n", "value", "amount", "total"),
    "probability": ("probability", "prob", "p", "likelihood"),
}
NODE_NAMES: Mapping[str, tuple[str, ...]] = {
    "id": ("id", "member_id", "memberid", "member", "person_id", "person", "user_id", "userid", "user",
           "node_id", "node", "customer_id", "customer", "contact_id", "contact", "name", "email",
           "username", "handle", "key"),
}
_REQUIRED = frozenset({"source", "target", "id"})


def normalise(name: str) -> str:
    """``" Member-ID "`` -> ``"member_id"``."""
    return re.sub(r"[\s.\-]+", "_", name.strip().lower()).strip("_")


@dataclass(frozen=True)
class ColumnHint:
    """Roles mapped to header columns, and the header columns left over.

    ``columns`` holds only roles whose column differs from what was asked
    (``{"source": "From"}``); ``complete`` says every required role has a
    column; ``leftover`` are columns no role uses.
    """

    columns: dict[str, str]
    complete: bool
    leftover: tuple[str, ...]


def suggest_columns(header: Sequence[str], asked: Mapping[str, str | None]) -> ColumnHint:
    """Map the roles in ``asked`` (role -> the column name asked for, None for an
    optional role left to its default) to columns of ``header``.

    A role keeps its asked column when the header has it exactly. Otherwise
    the first header column whose normalised name is the asked name or one of
    the role's common names is taken, else one that has such a name (of three
    letters or more) as a word; a column is used for one role only.

    >>> h = suggest_columns(["From", "To", "Interactions"],
    ...                     {"source": "source", "target": "target", "weight": None, "probability": None})
    >>> h.columns, h.complete, h.leftover
    ({'source': 'From', 'target': 'To', 'weight': 'Interactions'}, True, ())
    """
    names = {**EDGE_NAMES, **NODE_NAMES}
    used: set[str] = set()
    found: dict[str, str] = {}
    for role, want in asked.items():
        if want is not None and want in header:
            found[role] = want
            used.add(want)
    norm = [(col, normalise(col)) for col in header]
    for role, want in asked.items():
        if role in found:
            continue
        wanted = ([normalise(want)] if want is not None else []) + list(names.get(role, ()))
        col = next((c for w in wanted for c, n in norm if n == w and c not in used), None)
        if col is None:  # a common name as one word of the column's name ("Total Calls")
            col = next((c for w in wanted if len(w) > 2 for c, n in norm
                        if w in n.split("_") and c not in used), None)
        if col is not None:
            found[role] = col
            used.add(col)
    complete = all(r in found for r in asked if r in _REQUIRED or asked[r] is not None)
    changed = {r: c for r, c in found.items() if c != asked[r] and not (asked[r] is None and c == r)}
    leftover = tuple(c for c in header if c not in used)
    return ColumnHint(changed, complete, leftover)
