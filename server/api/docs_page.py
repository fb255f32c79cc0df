"""The API documentation page (``/docs``), served entirely from our own static files.

FastAPI's stock page loads Swagger UI from a public CDN and starts it with an inline script;
the app's content security policy (``script-src 'self'``) rightly blocks both, which left the
page blank. Here Swagger UI comes from ``static/vendor/swagger-ui-dist-<version>/`` (the npm
package ``swagger-ui-dist``, Apache-2.0, licence beside it) and ``static/js/api-docs.js`` starts
it, so the page works offline and under the unchanged policy.

ReDoc, which FastAPI also exposes by default, is not served: ``/redoc`` redirects here, so an
old bookmark lands on a working page rather than a blank one.
"""

from __future__ import annotations

from fastapi import APIRouter, Request
from fastapi.responses import HTMLResponse, RedirectResponse

SWAGGER_UI_VERSION = "5.35.0"
SWAGGER_UI_DIR = f"/static/vendor/swagger-ui-dist-{SWAGGER_UI_VERSION}"
PAGE_TITLE = "Remanence API"

router = APIRouter(include_in_schema=False)


@router.get("/docs", response_class=HTMLResponse)
def api_docs(request: Request) -> HTMLResponse:
    templates = request.app.state.templates
    return templates.TemplateResponse(request, "pages/api_docs.html", {
        "title": PAGE_TITLE,
        "swagger_ui_dir": SWAGGER_UI_DIR,
        "openapi_url": request.app.openapi_url,
    })


@router.get("/redoc")
def redoc() -> RedirectResponse:
    return RedirectResponse("/docs", status_code=308)
