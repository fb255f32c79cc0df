"""Page or fragment: the one place that looks at HX-Request.

A page template extends ``base.html`` and includes its partials; an htmx request for the
same view gets only the named partial. ``Vary: HX-Request`` keeps caches from mixing them.
"""

from __future__ import annotations

from typing import Any, Optional

from fastapi import Request
from fastapi.responses import HTMLResponse, RedirectResponse, Response

from ..cookies import csrf_token
from ..deps import is_htmx


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
    ctx = {"actor": actor, "csrf_token": csrf_token(request), "settings": request.app.state.settings}
    ctx.update(context or {})
    name = partial if (partial and is_htmx(request)) else template
    response = templates.TemplateResponse(request, name, ctx, status_code=status_code)
    response.headers["Vary"] = "HX-Request"
    return response


def redirect(url: str, request: Request | None = None) -> Response:
    """303 after a successful POST; for htmx, a 200 carrying HX-Redirect so the whole page moves
    (a 3xx would be followed by the browser before htmx could see the header)."""
    if request is not None and is_htmx(request):
        return Response(status_code=200, headers={"HX-Redirect": url})
    return RedirectResponse(url, status_code=303)
