"""Limits on the shape of a JSON request body, checked on the raw bytes before anything parses it.

Python's and pydantic's JSON code has limits of its own that surface as
internal errors rather than as a refusal: a list nested some hundreds deep
overflows pydantic's serializer when the body is hashed for idempotency, and
a number of more than 4,300 digits is refused by ``int()``. So every JSON
body (not uploads: those have their own readers) is scanned once here, with
one regular expression over its tokens, and refused with the ``json-limit``
problem when it nests deeper than :data:`MAX_DEPTH`, holds a number written
with more than :data:`MAX_NUMBER_CHARS` characters or a string of more than
:data:`MAX_STRING_CHARS` characters (as written, escapes included).

The scan only measures: a body that is not JSON at all passes through to the
route, which answers its own ``validation-error``. Written by hand because it
is a dozen lines and no JSON library reports depth without first building
the whole value (which is what overflows).
"""

from __future__ import annotations

import re
from dataclasses import dataclass

__all__ = ["MAX_DEPTH", "MAX_NUMBER_CHARS", "MAX_STRING_CHARS", "JsonShape", "measure", "is_json_body"]

#: The deepest legitimate body (a schedule: job, params, rules, a list of objects) nests 6 deep.
MAX_DEPTH = 32
#: A 64-bit seed has 19 digits; a float in full precision with exponent about 25 characters.
MAX_NUMBER_CHARS = 100
#: Longer than any text field the API accepts (descriptions: 5,000 characters, escaped up to 6 bytes each).
MAX_STRING_CHARS = 65_536

# A string (possibly unterminated), an opening or closing bracket, or a number-like run.
_TOKEN = re.compile(rb'"(?:[^"\\]|\\.)*"?|[\[{]|[\]}]|-?[0-9][0-9.eE+\-]*')


@dataclass(frozen=True)
class JsonShape:
    depth: int  # deepest nesting of arrays and objects (a bare scalar: 0)
    longest_number: int  # characters of the longest number token
    longest_string: int  # characters between the quotes of the longest string, as written

    def problem(self) -> tuple[str, dict[str, int]] | None:
        """(detail, extension members) for the first limit exceeded, or None."""
        if self.depth > MAX_DEPTH:
            return (
                f"the JSON body nests {self.depth} levels deep; at most {MAX_DEPTH} are accepted",
                {"depth": self.depth, "max_depth": MAX_DEPTH},
            )
        if self.longest_number > MAX_NUMBER_CHARS:
            return (
                f"the JSON body holds a number written with {self.longest_number} characters; "
                f"at most {MAX_NUMBER_CHARS} are accepted",
                {"number_chars": self.longest_number, "max_number_chars": MAX_NUMBER_CHARS},
            )
        if self.longest_string > MAX_STRING_CHARS:
            return (
                f"the JSON body holds a string of {self.longest_string} characters; "
                f"at most {MAX_STRING_CHARS} are accepted",
                {"string_chars": self.longest_string, "max_string_chars": MAX_STRING_CHARS},
            )
        return None


def measure(raw: bytes) -> JsonShape:
    """Depth, longest number and longest string of the JSON text ``raw`` (any text is measured)."""
    depth = deepest = longest_number = longest_string = 0
    for m in _TOKEN.finditer(raw):
        first = raw[m.start()]
        if first == 0x22:  # '"'
            longest_string = max(longest_string, m.end() - m.start() - 2)
        elif first in (0x5B, 0x7B):  # '[' '{'
            depth += 1
            deepest = max(deepest, depth)
        elif first in (0x5D, 0x7D):  # ']' '}'
            depth = max(depth - 1, 0)
        else:
            longest_number = max(longest_number, m.end() - m.start())
    return JsonShape(deepest, longest_number, max(longest_string, 0))


def is_json_body(content_type: str | None) -> bool:
    """A body FastAPI would parse as JSON: no Content-Type, ``application/json`` or ``*/*+json``."""
    if not content_type:
        return True
    media = content_type.split(";", 1)[0].strip().lower()
    return media == "application/json" or (media.startswith("application/") and media.endswith("+json"))
