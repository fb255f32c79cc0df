"""The inbox page (``/inbox``): notifications newest first, mark read, mark all read, the event
preferences form; the follow button of the compound page posts here too. Plain forms (CSRF token,
303 back), so they work without JavaScript."""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse

from ..deps import PageAccount, RowId, SessionDep
from ..errors import InputError
from ..services import accounts, notifications, registry
from .render import redirect, render

router = APIRouter(include_in_schema=False)


def _page(request: Request, session, actor, *, unread_only: bool = False, error: str = "",  # noqa: ANN001
          name_error: str = "", status_code: int = 200):
    items = notifications.inbox(session, actor, unread_only=unread_only, limit=notifications.PAGE_LIMIT)
    rows = [{"n": n, "when": n.created_at.strftime("%Y-%m-%d %H:%M UTC")} for n in items]
    return render(request, "pages/inbox.html",
                  {"rows": rows, "unread_only": unread_only, "prefs": notifications.preferences(session, actor),
                   "mail_on": bool(request.app.state.settings.smtp_host), "error": error,
                   "limit": notifications.PAGE_LIMIT, "name_error": name_error,
                   "display_name": accounts.account_of(session, actor).display_name or ""},
                  actor=actor, status_code=status_code)


@router.get("/inbox", response_class=HTMLResponse)
def inbox(request: Request, session: SessionDep, actor: PageAccount, unread: bool = False):
    return _page(request, session, actor, unread_only=unread)


@router.post("/inbox/read-all", response_class=HTMLResponse)
def read_all(request: Request, session: SessionDep, actor: PageAccount):
    notifications.mark_all_read(session, actor)
    return redirect("/inbox", request)


@router.post("/inbox/{notification_id}/read", response_class=HTMLResponse)
async def read_one(notification_id: RowId, request: Request, session: SessionDep, actor: PageAccount):
    form = await request.form()
    n = notifications.mark_read(session, actor, notification_id, read=form.get("read", "1") != "0")
    # "open" marks it read and follows its link; otherwise back to the inbox
    return redirect(n.url or "/inbox" if form.get("open") else "/inbox", request)


@router.post("/inbox/preferences", response_class=HTMLResponse)
async def preferences(request: Request, session: SessionDep, actor: PageAccount):
    form = await request.form()
    try:
        notifications.set_preferences(session=session, actor=actor, inbox_events=form.getlist("inbox"),
                                      email_events=form.getlist("email"), email=str(form.get("email") or ""))
    except InputError as exc:
        return _page(request, session, actor, error=str(exc), status_code=422)
    return redirect("/inbox#preferences", request)


@router.post("/inbox/display-name", response_class=HTMLResponse)
async def display_name(request: Request, session: SessionDep, actor: PageAccount):
    """The account's own display name (how it signs records); any role may set its own."""
    form = await request.form()
    try:
        accounts.set_display_name(session=session, username=actor.name, display_name=str(form.get("display_name") or ""),
                                  actor=actor.label)
    except InputError as exc:
        return _page(request, session, actor, name_error=str(exc), status_code=422)
    return redirect("/inbox#my-name", request)


@router.post("/compounds/{code}/follow", response_class=HTMLResponse)
async def follow(code: str, request: Request, session: SessionDep, actor: PageAccount):
    compound = registry.get_compound(session, code)
    want = (await request.form()).get("follow", "1") != "0"
    notifications.set_following(session=session, actor=actor, compound=compound, follow=want)
    return redirect(f"/compounds/{compound.code}", request)
