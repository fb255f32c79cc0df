"""The admin page: accounts and instrument tokens (a new token is shown once)."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from ..deps import PageAdmin, RowId, SessionDep
from ..errors import InputError
from ..models import utcnow
from ..services import accounts, import_profiles
from ..services.errors import Duplicate, NotFound
from ..kinds import KINDS
from .render import redirect, render

router = APIRouter(include_in_schema=False)


def _page(request, session, actor, *, error=None, new_token=None, status_code=200):  # noqa: ANN001
    return render(request, "pages/admin.html",
                  {"users": accounts.list_users(session), "tokens": accounts.list_tokens(session), "error": error,
                   "new_token": new_token, "kinds": KINDS, "now": utcnow(),
                   "profiles": import_profiles.list_profiles(session)}, status_code=status_code, actor=actor)


@router.get("/admin", response_class=HTMLResponse)
def admin_page(request: Request, session: SessionDep, actor: PageAdmin):
    return _page(request, session, actor)


@router.post("/admin/users", response_class=HTMLResponse)
async def add_user(request: Request, session: SessionDep, actor: PageAdmin):
    form = await request.form()
    try:
        accounts.create_user(session=session, username=str(form.get("username", "")),
                             password=str(form.get("password", "")), role=str(form.get("role", "member")),
                             display_name=str(form.get("display_name", "")), actor=actor.label)
    except (InputError, Duplicate) as exc:
        return _page(request, session, actor, error=str(exc), status_code=422)
    return redirect("/admin", request)


@router.post("/admin/users/{username}/deactivate", response_class=HTMLResponse)
async def deactivate(username: str, request: Request, session: SessionDep, actor: PageAdmin):
    try:
        accounts.set_active(session=session, username=username, active=False, actor=actor.label)
    except NotFound as exc:
        return _page(request, session, actor, error=str(exc), status_code=404)
    return redirect("/admin", request)


@router.post("/admin/users/{username}/display-name", response_class=HTMLResponse)
async def display_name(username: str, request: Request, session: SessionDep, actor: PageAdmin):
    form = await request.form()
    try:
        accounts.set_display_name(session=session, username=username, display_name=str(form.get("display_name") or ""),
                                  actor=actor.label)
    except InputError as exc:
        return _page(request, session, actor, error=str(exc), status_code=422)
    except NotFound as exc:
        return _page(request, session, actor, error=str(exc), status_code=404)
    return redirect("/admin", request)


@router.post("/admin/tokens", response_class=HTMLResponse)
async def create_token(request: Request, session: SessionDep, actor: PageAdmin):
    form = await request.form()
    kinds = [k for k in form.getlist("kinds") if isinstance(k, str) and k in KINDS] or None
    try:
        token, secret = accounts.create_token(session=session, name=str(form.get("name", "")),
                                              scope=str(form.get("scope", "")), kinds=kinds, actor=actor.label,
                                              expires_in=accounts.parse_lifetime(str(form.get("expires", ""))),
                                              sees_embargoed=form.get("sees_embargoed") == "on",
                                              profile=str(form.get("profile", "")))
    except InputError as exc:
        return _page(request, session, actor, error=str(exc), status_code=422)
    # Rendered directly (no redirect) so the secret is shown once and never stored or put in a URL.
    return _page(request, session, actor, new_token={"id": token.id, "name": token.name, "secret": secret})


@router.post("/admin/tokens/{token_id}/revoke", response_class=HTMLResponse)
async def revoke(token_id: RowId, request: Request, session: SessionDep, actor: PageAdmin):
    try:
        accounts.revoke_token(session=session, token_id=token_id, actor=actor.label)
    except NotFound as exc:
        return _page(request, session, actor, error=str(exc), status_code=404)
    return redirect("/admin", request)
