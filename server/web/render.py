"""Page or fragment: the one place that looks at the htmx request headers.

A page template extends ``base.html`` and includes its partials; an htmx request for the
same view gets only the named partial. A history restore (htmx asks again with
``HX-History-Restore-Request: true`` when its cache has no copy of the page) gets the full page,
since htmx then swaps the answer in as the whole body. ``Vary`` keeps caches from mixing them.
Every render carries the current account, error pages included, so the menu matches the caller.
"""

from __future__ import annotations

from typing import Any, Optional

from fastapi import Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from ..cookies import csrf_token
from ..deps import current_actor
from ..services import notifications


def is_htmx(request: Request) -> bool:
    """An htmx request that swaps part of a page (not a boosted link, which loads a whole page)."""
    return request.headers.get("hx-request") == "true" and request.headers.get("hx-boosted") != "true"


def wants_fragment(request: Request) -> bool:
    """Whether to answer with a fragment: an htmx swap, but not a history restore."""
    return is_htmx(request) and request.headers.get("hx-history-restore-request") != "true"


def render(
    request: Request,
    template: str,
    context: Optional[dict[str, Any]] = None,
    *,
    partial: Optional[str] = None,
    status_code: int = 200,
    actor: Any = None,
) -> HTMLResponse:
    templates = request.app.state.templates
    ctx = {"actor": actor if actor is not None else current_actor(request), "csrf_token": csrf_token(request),
           "settings": request.app.state.settings}
    ctx.update(context or {})
    name = partial if (partial and wants_fragment(request)) else template
    if name == template:  # a whole page: its menu shows the unread count
        ctx.setdefault("unread_count", _unread(request, ctx["actor"]))
    response = templates.TemplateResponse(request, name, ctx, status_code=status_code)
    response.headers["Vary"] = "HX-Request, HX-History-Restore-Request"
    return response


def _unread(request: Request, actor: Any) -> int:
    """The menu's unread badge (one count query, accounts only)."""
    return notifications.badge_count(request.app.state.engine, actor)


def fragment_or_redirect(request: Request, template: str, context: dict[str, Any], url: str, *,
                         actor: Any = None) -> Response:
    """After a post: for an htmx swap, the updated fragment; otherwise a redirect to ``url``."""
    if wants_fragment(request):
        return render(request, template, context, actor=actor)
    return redirect(url, request)


def redirect(url: str, request: Request | None = None) -> Response:
    """303 after a successful POST; for htmx, a 200 carrying HX-Redirect so the whole page moves
    (a 3xx would be followed by the browser before htmx could see the header)."""
    if request is not None and is_htmx(request):
        return Response(status_code=200, headers={"HX-Redirect": url})
    return RedirectResponse(url, status_code=303)
