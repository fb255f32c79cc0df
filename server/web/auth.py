"""Logging in and out: the login form, the session it starts, and logout."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Form, Request
from fastapi.responses import HTMLResponse

from ..deps import OptionalActor, SessionDep, SettingsDep, check_csrf
from ..security import same_token
from ..services import accounts
from .render import redirect, render

router = APIRouter(include_in_schema=False)


def _safe_next(url: str | None) -> str:
    # Only same-site paths: never redirect to another host after login.
    if url and url.startswith("/") and not url.startswith("//") and "\\" not in url:
        return url
    return "/compounds"


# --- login -------------------------------------------------------------------------------------


@router.get("/login", response_class=HTMLResponse)
def login_form(request: Request, next: str = "/compounds") -> HTMLResponse:
    return render(request, "pages/login.html", {"next": _safe_next(next), "error": None})


@router.post("/login", response_class=HTMLResponse)
def login(
    request: Request,
    session: SessionDep,
    settings: SettingsDep,
    username: Annotated[str, Form()] = "",
    password: Annotated[str, Form()] = "",
    csrf_token: Annotated[str, Form()] = "",
    next: Annotated[str, Form()] = "/compounds",
):
    if not same_token(csrf_token, request.session.get("csrf")):
        return render(request, "pages/login.html", {"next": _safe_next(next), "error": "The form expired; try again."},
                      status_code=403)
    user = accounts.authenticate(session=session, username=username, password=password)
    if user is None:
        return render(
            request, "pages/login.html",
            {"next": _safe_next(next), "error": "Wrong user name or password (or too many tries: wait five minutes)."},
            status_code=401,
        )
    request.session.clear()
    request.session["uid"] = user.id
    request.session["pw"] = user.password_hash[-16:]  # a password change ends old sessions
    return redirect(_safe_next(next))


@router.post("/logout")
async def logout(request: Request, actor: OptionalActor):
    await check_csrf(request, actor)
    request.session.clear()
    return redirect("/login")
