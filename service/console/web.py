"""What every console page shares: templates, security headers, sign-in and not-found handling.

Every console route is a :class:`ConsoleRoute`: its answers carry a strict
Content-Security-Policy (only our own scripts, styles and images; no framing),
and the three ways a page can end early are handled here once: no valid
session sends the person to the sign-in page, a resource the tenant does not
have (or that does not exist) is the not-found page, and a form without the
session's CSRF token is refused.
"""

from __future__ import annotations

from collections.abc import Callable, Coroutine
from pathlib import Path
from typing import Any
from urllib.parse import parse_qsl, quote

import jinja2
from fastapi import Request, Response
from fastapi.responses import HTMLResponse, RedirectResponse
from fastapi.routing import APIRoute
from sqlalchemy.orm import Session, sessionmaker

from storage.errors import NotFound

from .sessions import BadForm, ConsoleSession, ReadOnly, SignInNeeded, read_session

__all__ = ["ConsoleRoute", "SECURITY_HEADERS", "render", "read_form", "maker_of", "see_other", "MAX_FORM_BYTES", "KIND_WORDS", "STATUS_WORDS"]

HERE = Path(__file__).resolve().parent
MAX_FORM_BYTES = 2 * 1024 * 1024

SECURITY_HEADERS = {
    "Content-Security-Policy": (
        "default-src 'none'; script-src 'self'; style-src 'self'; img-src 'self'; connect-src 'self'; "
        "form-action 'self'; base-uri 'none'; frame-ancestors 'none'"
    ),
    "X-Frame-Options": "DENY",
    "X-Content-Type-Options": "nosniff",
    "Referrer-Policy": "same-origin",
}

_env = jinja2.Environment(
    loader=jinja2.FileSystemLoader(HERE / "templates"),
    autoescape=True,  # every value is escaped unless a template says otherwise (none does)
    undefined=jinja2.StrictUndefined,
    trim_blocks=True,
    lstrip_blocks=True,
)


def _number(value: Any, digits: int = 0) -> str:
    """A figure as a person reads it: thousands separated, rounded to what it means."""
    if value is None:
        return "–"
    try:
        x = float(value)
    except (TypeError, ValueError):
        return str(value)
    return f"{x:,.{digits}f}"


def _score(value: Any) -> str:
    """A score: whole numbers as such, others to four significant figures."""
    if value is None:
        return "–"
    x = float(value)
    return f"{x:,.0f}" if x.is_integer() else f"{x:.4g}"


def _percent(value: Any, digits: int = 0) -> str:
    return "–" if value is None else f"{float(value) * 100:.{digits}f}%"


_env.filters["number"] = _number
_env.filters["percent"] = _percent
_env.filters["score"] = _score
_env.filters["url"] = lambda s: quote(str(s), safe="")

KIND_WORDS = {
    "shortlist": "Shortlist", "forecast": "Reach forecast", "profile": "Network profile", "scores": "Scores",
    "layout": "Network picture", "recommendations": "Introductions", "referral_asks": "Referral asks",
    "link_evaluation": "Method check",
}
STATUS_WORDS = {"queued": "Waiting", "running": "Working", "succeeded": "Done", "failed": "Failed",
                "cancelled": "Cancelled"}
_env.globals.update(kinds=KIND_WORDS, statuses=STATUS_WORDS)


def maker_of(request: Request) -> sessionmaker[Session]:
    maker: sessionmaker[Session] = request.app.state.sessionmaker
    return maker


def render(request: Request, template: str, session: ConsoleSession | None, status: int = 200,
           **context: Any) -> HTMLResponse:
    """A page from ``templates/<template>`` with the signed-in session and its CSRF token."""
    html = _env.get_template(template).render(request_path=request.url.path, session=session, **context)
    return HTMLResponse(html, status_code=status, headers={"Cache-Control": "no-store"})


def see_other(url: str) -> RedirectResponse:
    return RedirectResponse(url, status_code=303)


async def read_form(request: Request) -> dict[str, str]:
    """An ``application/x-www-form-urlencoded`` body as a dict (the last value of a repeated name)."""
    body = await request.body()
    if len(body) > MAX_FORM_BYTES:
        raise BadForm()
    return dict(parse_qsl(body.decode("utf-8", errors="replace"), keep_blank_values=True))


def _signed_in(request: Request) -> ConsoleSession | None:
    """The session, for the header of an error page (None when there is none)."""
    try:
        return read_session(request)
    except SignInNeeded:
        return None


class ConsoleRoute(APIRoute):
    """A console route: security headers on every answer, sign-in and not-found pages."""

    def get_route_handler(self) -> Callable[[Request], Coroutine[Any, Any, Response]]:
        handler = super().get_route_handler()

        async def handle(request: Request) -> Response:
            try:
                response = await handler(request)
            except SignInNeeded:
                target = request.url.path if request.method == "GET" else "/console/"
                response = see_other(f"/console/sign-in?next={quote(target, safe='/')}")
                response.delete_cookie("bw_console", path="/console")
            except NotFound:
                response = render(request, "not_found.html", _signed_in(request), status=404)
            except BadForm:
                response = render(request, "refused.html", _signed_in(request), status=403,
                                  reason="This form has expired or did not come from this console. "
                                  "Go back, reload the page and send it again.")
            except ReadOnly:
                response = render(request, "refused.html", _signed_in(request), status=403,
                                  reason="The key you signed in with may look but not start or cancel work. "
                                  "Sign in with a key that has the write scope.")
            for name, value in SECURITY_HEADERS.items():
                response.headers.setdefault(name, value)
            return response

        return handle
