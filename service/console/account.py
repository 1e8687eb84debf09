"""Console sign-in and sign-out, the console's own stylesheet and script, and its home page."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Depends, Request, Response
from fastapi.responses import FileResponse

from storage.repo import keys as key_repo

from .sessions import COOKIE, OPEN_KEY, ConsoleSession, ReadOnly, SignInNeeded, check_csrf, new_cookie, read_session
from .web import HERE, ConsoleRoute, maker_of, read_form, render, see_other

__all__ = ["router", "SessionDep", "current_session", "WriterDep"]

router = APIRouter(route_class=ConsoleRoute, include_in_schema=False)

STATIC = {"console.css": "text/css", "console.js": "text/javascript", "icon.svg": "image/svg+xml"}


def current_session(request: Request) -> ConsoleSession:
    return read_session(request)


SessionDep = Annotated[ConsoleSession, Depends(current_session)]


def writer(session: SessionDep) -> ConsoleSession:
    """A session whose key may start and cancel jobs (``write`` scope)."""
    if not session.can_write:
        raise ReadOnly()
    return session


WriterDep = Annotated[ConsoleSession, Depends(writer)]


def _safe_next(target: str | None) -> str:
    """Only a console path, never another site (an open redirect)."""
    if target and target.startswith("/console/") and not target.startswith("//") and "\\" not in target:
        return target
    return "/console/graphs"


@router.get("/console/static/{name}")
def static(name: str) -> Response:
    if name not in STATIC:
        return Response(status_code=404)
    return FileResponse(HERE / "static" / name, media_type=STATIC[name],
                        headers={"Cache-Control": "no-cache"})


@router.get("/console/")
@router.get("/console")
def home() -> Response:
    return see_other("/console/graphs")


@router.get("/console/sign-in")
def sign_in_page(request: Request, next: str | None = None) -> Response:
    try:
        session: ConsoleSession | None = read_session(request)
    except SignInNeeded:
        session = None
    return render(request, "sign_in.html", session, next=_safe_next(next), error=None,
                  open_access=request.app.state.settings.auth_disabled)


@router.post("/console/sign-in")
async def sign_in(request: Request) -> Response:
    form = await read_form(request)
    plain = form.get("key", "").strip()
    target = _safe_next(form.get("next"))
    settings = request.app.state.settings
    key_id: str | None = None
    if not plain and settings.auth_disabled:
        key_id = OPEN_KEY
    elif plain:
        with maker_of(request)() as db:
            key = key_repo.get_key_by_secret(db, plain)
            key_id = key.id if key is not None else None
    if key_id is None:
        return render(request, "sign_in.html", None, status=401, next=target, open_access=settings.auth_disabled,
                      error="That key is not known here, or it was revoked or has expired. "
                      "Paste the whole key, starting with bw_.")
    value, max_age = new_cookie(request, key_id)
    response = see_other(target)
    response.set_cookie(COOKIE, value, max_age=max_age, path="/console", httponly=True, samesite="strict",
                        secure=request.url.scheme == "https")
    return response


@router.post("/console/sign-out")
async def sign_out(request: Request, session: SessionDep) -> Response:
    check_csrf(session, (await read_form(request)).get("csrf"))
    response = see_other("/console/sign-in")
    response.delete_cookie(COOKIE, path="/console", httponly=True, samesite="strict",
                           secure=request.url.scheme == "https")
    return response
