"""Operations middleware: one pure ASGI middleware per concern.

``service/app.py`` lists them outermost first, in this order:

1. :class:`RequestIds` (:mod:`.request_ids`): the request id, on the answer
   and on every log line written while the request is served.
2. :class:`AccessLog` (:mod:`.access_log`): one JSON line per request.
3. :class:`RequestMetrics` (:mod:`.request_metrics`): in flight, count and
   duration by route template and status.
4. :class:`InternalErrors` (:mod:`.internal_errors`): an escaped exception
   is logged and answered with the ``internal-error`` problem.
5. :class:`AllowHeader` (:mod:`.allow_header`): a 405's ``Allow`` lists every
   method the path takes.
6. :class:`LoopbackOnly` (:mod:`.loopback`): with authentication off, only
   loopback clients reach ``/v1`` (403).
7. :class:`RateLimits` (:mod:`.rate_limits`): a token bucket per key (429).
8. :class:`BodyLimits` (:mod:`.body_limits`): body size (413) and JSON shape
   (422 ``json-limit``); uploads are limited by the spool instead.

The first four wrap the checks so that refused requests are logged, counted
and carry the request id too. The checks then run in README "Errors" order:
the rate, the body's size and shape, and only then the routes (the key and
its scope, the graph, the fields). None buffers an upload: bodies stream
through, and only a small non-upload body is read whole (to count and measure it).
"""

from __future__ import annotations

from service.telemetry.logs import JsonFormatter, RequestIdFilter, configure_logging, request_id_var

from .access_log import LOGGED_PARAMS, AccessLog
from .allow_header import AllowHeader, allowed_methods
from .body_limits import UPLOAD_ROUTES, BodyLimits, is_upload
from .internal_errors import InternalErrors
from .loopback import LoopbackOnly, is_loopback
from .rate_limits import RateLimits, TokenBuckets
from .request_ids import REQUEST_ID_HEADER, RequestIds
from .request_metrics import RequestMetrics

__all__ = [
    "LOGGED_PARAMS",
    "REQUEST_ID_HEADER",
    "UPLOAD_ROUTES",
    "AccessLog",
    "AllowHeader",
    "BodyLimits",
    "InternalErrors",
    "JsonFormatter",
    "LoopbackOnly",
    "RateLimits",
    "RequestIdFilter",
    "RequestIds",
    "RequestMetrics",
    "TokenBuckets",
    "allowed_methods",
    "configure_logging",
    "is_loopback",
    "is_upload",
    "request_id_var",
]
