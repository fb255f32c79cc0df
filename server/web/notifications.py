"""The inbox page (``/inbox``): notifications newest first (a group of like events opens to its events),
mark read, mark all read, the event preferences form; the follow button of the compound page posts here
too. Plain forms (CSRF token, 303 back), so they work without JavaScript; with htmx the mark-read forms
swap the list back in (``partials/inbox_list.html``). Every answer that changes what is unread carries
``HX-Trigger: notifications-changed``, on which the menu badge asks ``GET /inbox/badge`` for itself."""

from __future__ import annotations

from fastapi import APIRouter, Query, Request
from fastapi.responses import HTMLResponse, Response

from .. import access
from ..deps import MAX_ID, PageAccount, RowId, SessionDep, current_actor
from ..errors import InputError
from ..services import accounts, notifications, registry
from .render import fragment_or_redirect, redirect, render

#: The event the menu badge listens for (``partials/unread_badge.html``).
CHANGED = {"HX-Trigger": "notifications-changed"}

router = APIRouter(include_in_schema=False)


def _rows(session, actor, unread_only: bool) -> list[dict]:  # noqa: ANN001
    items = notifications.inbox(session, actor, unread_only=unread_only, limit=notifications.PAGE_LIMIT)
    return [{"n": n, "when": (n.group.last_at if n.group else n.created_at).strftime("%Y-%m-%d %H:%M UTC")}
            for n in items]


def _page(request: Request, session, actor, *, unread_only: bool = False, error: str = "",  # noqa: ANN001
          name_error: str = "", status_code: int = 200):
    settings = request.app.state.settings
    return render(request, "pages/inbox.html",
                  {"rows": _rows(session, actor, unread_only), "unread_only": unread_only,
                   "prefs": notifications.preferences(session, actor),
                   "mail_on": bool(settings.smtp_host), "error": error,
                   "limit": notifications.PAGE_LIMIT, "name_error": name_error,
                   "keep_read_days": f"{settings.notification_keep_read_days:g}",
                   "keep_unread_days": (f"{settings.notification_keep_unread_days:g} days"
                                        if settings.notification_keep_unread_days > 0 else "never"),
                   "display_name": accounts.account_of(session, actor).display_name or ""},
                  partial="partials/inbox_list.html", actor=actor, status_code=status_code)


def _after_mark(request: Request, session, actor, unread_only: bool) -> Response:  # noqa: ANN001
    """The list again (htmx) or back to the inbox; either way the badge hears of the change."""
    url = "/inbox?unread=true" if unread_only else "/inbox"
    response = fragment_or_redirect(request, "partials/inbox_list.html",
                                    {"rows": _rows(session, actor, unread_only), "unread_only": unread_only},
                                    url, actor=actor)
    response.headers.update(CHANGED)
    return response


@router.get("/inbox", response_class=HTMLResponse)
def inbox(request: Request, session: SessionDep, actor: PageAccount, unread: bool = False):
    return _page(request, session, actor, unread_only=unread)


@router.get("/inbox/badge", response_class=HTMLResponse)
def badge(request: Request, shown: int = Query(0, ge=0, le=MAX_ID, description="the count the badge shows")):
    """The menu's unread count alone (``partials/unread_badge.html``), for the badge to refresh itself;
    204 when it still shows the right number (``shown``), or for a caller without an inbox (a poll
    from a tab whose login ended changes nothing and does not send it to the login page). It does not
    slide the login's expiry (``cookies.UNATTENDED_PATHS``)."""
    actor = current_actor(request)
    if not access.has_inbox(actor):
        return Response(status_code=204, headers={"Cache-Control": "no-store"})
    count = notifications.badge_count(request.app.state.engine, actor)
    if count == shown:
        return Response(status_code=204, headers={"Cache-Control": "no-store"})
    response = render(request, "partials/unread_badge.html", {"unread_count": count}, actor=actor)
    response.headers["Cache-Control"] = "no-store"
    return response


@router.post("/inbox/read-all", response_class=HTMLResponse)
async def read_all(request: Request, session: SessionDep, actor: PageAccount):
    form = await request.form()
    notifications.mark_all_read(session, actor)
    return _after_mark(request, session, actor, form.get("unread") == "true")


@router.post("/inbox/{notification_id}/read", response_class=HTMLResponse)
async def read_one(notification_id: RowId, request: Request, session: SessionDep, actor: PageAccount):
    form = await request.form()
    n = notifications.mark_read(session, actor, notification_id, read=form.get("read", "1") != "0")
    if form.get("open"):  # "open" marks it read and follows its link
        response = redirect(n.url or "/inbox", request)
        response.headers.update(CHANGED)
        return response
    return _after_mark(request, session, actor, form.get("unread") == "true")


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
