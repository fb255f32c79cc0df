"""Logging in and out: the login form, the session it starts, and logout."""

from __future__ import annotations

from typing import Annotated

from fastapi import APIRouter, Form, Request
from fastapi.responses import HTMLResponse

from .. import cookies
from ..deps import OptionalActor, SessionDep, SettingsDep, check_csrf
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
    if not cookies.csrf_matches(request, csrf_token):
        return render(request, "pages/login.html", {"next": _safe_next(next), "error": "The form expired; try again."},
                      status_code=403)
    outcome = accounts.authenticate(session=session, username=username, password=password,
                                    client=cookies.client_address(request),
                                    device=lambda user: cookies.device_of(request, user))
    if outcome.user is None:
        error = (f"Too many tries for this name or from this browser; wait {-(-outcome.retry_after_s // 60)} min."
                 if outcome.throttled else "Wrong user name or password.")
        resp = render(request, "pages/login.html", {"next": _safe_next(next), "error": error}, status_code=401)
        if outcome.throttled:
            resp.headers["Retry-After"] = str(outcome.retry_after_s)
        return resp
    cookies.log_in(request, session, outcome.user)
    return redirect(_safe_next(next))


@router.post("/logout")
async def logout(request: Request, session: SessionDep, actor: OptionalActor):
    await check_csrf(request, actor)
    cookies.log_out(request, session)
    return redirect("/login")
