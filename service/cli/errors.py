"""The one error class of the command line: a mistake in what the user asked for.

``main`` prints it as one plain line on stderr (``bellwether: error: ...``)
and exits with code 2, the code argparse uses for bad arguments.
"""

from __future__ import annotations

__all__ = ["UserError"]


class UserError(Exception):
    """What was asked cannot be done as given; the message says how to fix it."""
