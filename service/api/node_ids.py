"""Node ids in URL paths: how a client encodes one, and the route class that reads it back.

How an id is written in a path
------------------------------
A node id is any text, so it fills exactly one path segment, percent-encoded as
UTF-8 (RFC 3986, section 2.1): in Python ``urllib.parse.quote(node_id, safe="")``,
in JavaScript ``encodeURIComponent(node_id)``. ``/`` must be sent as ``%2F``,
``%`` as ``%25``, ``?`` as ``%3F``, ``#`` as ``%23``, a space as ``%20`` and a
non-ASCII character as its UTF-8 bytes (``ë`` as ``%C3%AB``); a ``+`` is a plus
sign, not a space; any other character may be sent as it is or encoded. The
segment is decoded once: ``50%25`` is the id ``50%`` and ``a%252Fb`` the five
characters ``a%2Fb``. ``Mr Hi/0`` is ``Mr%20Hi%2F0``, ``zoë/ø`` is
``zo%C3%AB%2F%C3%B8``. An id the version lacks is the route's ``not-found``
problem, resource ``node``.

- A literal ``/`` ends the segment, so ``/nodes/a/b`` is not the id ``a/b``.
  Every raw path that does not split into the route's segments, with ``%2F``
  only inside the node id (``/nodes/a/b``, a trailing ``/nodes/a%2Fb/``,
  ``/nodes/a/b/recommendations``), is the ``not-found`` problem saying to send
  ``%2F``. ``%2f`` counts as ``%2F``.
- A decoded segment that is not UTF-8 (``%FF``) is the ``invalid-parameter``
  problem, field ``node_id``.
- An empty segment names no node (uploads refuse empty ids) and is never read
  as the empty id: ``/nodes/`` matches no route, and ``/nodes//recommendations``
  puts a literal ``/`` where the id belongs; both are the ``not-found`` problem.
- ``.`` and ``..`` are removed by clients as dot segments before sending:
  send them as ``%2E`` and ``%2E%2E``.

How the routes read it
----------------------
Starlette decodes the path before routing, so ``%2F`` and ``/`` look the same
there. :class:`NodeIdRoute` matches ``{node_id}`` as any decoded text, then checks
the raw path (ASGI ``raw_path``): when the raw path does not fit, the match is
only partial, so a sibling route that fits wins (``/nodes/{node_id}/recommendations``
takes ``/nodes/x/recommendations``; ``/nodes/{node_id}`` takes
``/nodes/x%2Frecommendations``, the id ``x/recommendations``). A request no route
fits gets the problem above from the first route it partly matched, raised by a
dependency after authorisation, as an unknown id is. The handler reads the id
from ``request.path_params["node_id"]`` (or a ``node_id: str`` parameter): the
raw segment, decoded once.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any, TypeVar
from urllib.parse import unquote

from fastapi import APIRouter, Depends, Request
from fastapi.routing import APIRoute
from starlette.routing import Match
from starlette.types import Scope

from storage.errors import NotFound

from .errors import InvalidParams

__all__ = ["NodeIdRoute", "node_route"]

PARAM = "{node_id}"
# Scope key: the problem a NodeIdRoute found in the raw path, raised once authorisation passed.
_PROBLEM = "bellwether.node_id_problem"
F = TypeVar("F", bound=Callable[..., Any])


def _encoded_slashes(segment: str) -> int:
    return segment.upper().count("%2F")


def _raise_problem(request: Request) -> None:
    problem = request.scope.get(_PROBLEM)
    if problem is not None:
        raise problem


class NodeIdRoute(APIRoute):
    """A route whose ``{node_id}`` is exactly one raw path segment (see the module doc)."""

    def __init__(self, path: str, endpoint: Callable[..., Any], **kwargs: Any) -> None:
        if path.count(PARAM) != 1:
            raise ValueError(f"{path!r}: a node route holds {PARAM} exactly once")
        head, tail = path.split(PARAM)
        self.segments_after = tail.count("/")
        kwargs["dependencies"] = [*(kwargs.get("dependencies") or ()), Depends(_raise_problem)]
        super().__init__(f"{head}{{node_id:path}}{tail}", endpoint, **kwargs)

    def matches(self, scope: Scope) -> tuple[Match, Scope]:
        match, child = super().matches(scope)
        if match is Match.NONE:
            return match, child
        decoded = str(child["path_params"]["node_id"])
        if not decoded:  # names no node; a match would also redirect .../nodes to .../nodes/
            return Match.NONE, {}
        problem, node_id = self._read_raw(scope.get("raw_path"), decoded)
        child["path_params"] = {**child["path_params"], "node_id": node_id}
        child[_PROBLEM] = problem
        return (Match.PARTIAL if isinstance(problem, NotFound) else match), child

    def _read_raw(self, raw: bytes | None, decoded: str) -> tuple[Exception | None, str]:
        """(problem or None, id) from the raw path; ``decoded``: the id the decoded path matched.

        The id is the raw segment with ``segments_after`` segments after it. The raw path fits
        when no other segment holds ``%2F`` and that one holds as many as ``decoded`` holds
        ``/``: the other segments then decode without a ``/``, so the raw path splits where
        the template does and the segment decodes to the whole of ``decoded``.
        """
        if not raw:  # a server without raw_path: the decoded path is all there is
            return None, decoded
        parts = raw.split(b"?", 1)[0].decode("latin-1").split("/")
        at = len(parts) - 1 - self.segments_after
        fits = at >= 1 and _encoded_slashes(parts[at]) == decoded.count("/") and not any(
            _encoded_slashes(p) for i, p in enumerate(parts) if i != at
        )
        if not fits:
            detail = "node not found: a node id holding '/' must be sent percent-encoded as %2F"
            return NotFound(detail, resource="node", id=decoded), decoded
        try:
            return None, unquote(parts[at], encoding="utf-8", errors="strict")
        except UnicodeDecodeError:
            detail = "the node id is not percent-encoded UTF-8"
            return InvalidParams(detail, field="node_id"), decoded


def node_route(router: APIRouter, path: str, **kwargs: Any) -> Callable[[F], F]:
    """``@router.get(path, **kwargs)`` for a path holding ``{node_id}``: a :class:`NodeIdRoute`."""

    def add(endpoint: F) -> F:
        router.add_api_route(path, endpoint, methods=["GET"], route_class_override=NodeIdRoute,
                             **kwargs)
        return endpoint

    return add
