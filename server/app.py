"""The application factory. Nothing happens at import time: ``create_app(settings)`` builds it."""

from __future__ import annotations

import math
import re
from contextlib import asynccontextmanager
from urllib.parse import quote

from fastapi import FastAPI, Request, params
from fastapi.exceptions import RequestValidationError
from fastapi.responses import JSONResponse, RedirectResponse, Response
from fastapi.routing import APIRoute
from fastapi.templating import Jinja2Templates
from sqlalchemy import text
from sqlalchemy.exc import DataError, OperationalError
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.middleware.gzip import GZipMiddleware
from starlette.routing import compile_path

from . import __version__
from .api import docs_page as api_docs_page
from .cookies import CookieMiddleware
from .db import make_engine
from .errors import InputError, OverLimit
from .access import NotLoggedIn, Refused, has_inbox, may_cancel_job, may_see_structure
from .services.errors import Archived, Duplicate, Forbidden, NotFound, TooLarge
from .package_files import static_dir, templates_dir
from .plots.alt import figure_alt
from .ratelimit import FailureWindow, TokenBuckets, caller_key
from .serving import BodyDeadline
from .settings import Settings, get_settings
from . import hazards, mail, text_guard
from .web import format as format_filters
from .web import admin as admin_pages
from .web import auth as auth_pages
from .web import batches as batch_pages
from .web import campaign as campaign_pages
from .web import attachments as attachment_pages
from .web import comments as comment_pages
from .web import compare as compare_pages
from .web import freezes as freeze_pages
from .web import import_profiles as import_profile_pages
from .web import compounds as compound_pages
from .web import digest as digest_pages
from .web import measurements as measurement_pages
from .web import notifications as notification_pages
from .web import planning as planning_pages
from .web import samples as sample_pages
from .web import scaffolds as scaffold_pages
from .web.assets import PLOTLY_BUNDLE, VersionedStaticFiles, static_url
from .web.render import render

# The browser itself refuses to send anything to another host: scripts, fetches (connect-src),
# form posts (form-action) and images come only from this server; no page may be framed. blob: images
# are the PNGs a plot's "download" button makes in the browser (plotly.js draws the SVG into one).
CSP = (
    "default-src 'self'; script-src 'self'; connect-src 'self'; style-src 'self' 'unsafe-inline'; "
    "img-src 'self' data: blob:; object-src 'none'; base-uri 'self'; frame-ancestors 'none'; form-action 'self'"
)
GZIP_MIN_BYTES = 1024  # smaller answers gain nothing from compression


def _is_api(request: Request) -> bool:
    return request.url.path.startswith("/api/")


def _error(request: Request, status: int, detail: str, extra: dict | None = None) -> Response:
    if _is_api(request):
        return JSONResponse({"detail": detail, **(extra or {})}, status_code=status)
    return render(request, "pages/error.html", {"status": status, "detail": detail}, status_code=status)


def _install_error_handlers(app: FastAPI) -> None:
    @app.exception_handler(InputError)
    async def input_error(request: Request, exc: InputError) -> Response:
        return _error(request, 422, str(exc), {k: v for k, v in exc.to_dict().items() if k != "detail"})

    @app.exception_handler(NotFound)
    async def not_found(request: Request, exc: NotFound) -> Response:
        return _error(request, 404, str(exc))

    @app.exception_handler(Duplicate)
    async def duplicate(request: Request, exc: Duplicate) -> Response:
        return _error(request, 409, str(exc), {"existing": exc.existing})

    @app.exception_handler(Archived)
    async def archived(request: Request, exc: Archived) -> Response:
        return _error(request, 409, str(exc))

    @app.exception_handler(Forbidden)
    async def forbidden(request: Request, exc: Forbidden) -> Response:
        return _error(request, 403, str(exc))

    @app.exception_handler(RequestValidationError)
    async def validation(request: Request, exc: RequestValidationError) -> Response:
        parts = []
        for err in exc.errors():
            loc = [str(p) for p in err.get("loc", ()) if p not in ("body", "query", "path")]
            parts.append(f"{'.'.join(loc) or 'body'}: {err.get('msg')}")
        return _error(request, 422, "; ".join(parts), {"errors": jsonable_errors(exc)})

    @app.exception_handler(OperationalError)
    async def db_down(request: Request, exc: OperationalError) -> Response:
        return _error(request, 503, "the database is busy or unreachable; try again in a moment")

    @app.exception_handler(DataError)
    async def unstorable(request: Request, exc: DataError) -> Response:
        # The last line behind server.text_guard and the schemas' bounds: a value the database's column type
        # refuses (NUL in text, an integer past its width) is the caller's input, not a server fault.
        lines = str(getattr(exc, "orig", None) or exc).strip().splitlines()
        reason = lines[0] if lines else ""
        return _error(request, 422, f"a value cannot be stored: {reason or 'the database refused it'}")

    @app.exception_handler(OverLimit)
    async def over_limit(request: Request, exc: OverLimit) -> Response:
        body = exc.to_dict()
        return _error(request, exc.status, body.pop("detail"), body)

    @app.exception_handler(TooLarge)
    async def too_large(request: Request, exc: TooLarge) -> Response:
        return _error(request, 413, str(exc))

    @app.exception_handler(NotLoggedIn)
    async def login_required(request: Request, exc: NotLoggedIn) -> Response:
        return RedirectResponse(f"/login?next={quote(exc.next_url)}", status_code=303)

    @app.exception_handler(Refused)
    async def page_forbidden(request: Request, exc: Refused) -> Response:
        return _error(request, 403, exc.message)

    @app.exception_handler(StarletteHTTPException)
    async def http_error(request: Request, exc: StarletteHTTPException) -> Response:
        resp = _error(request, exc.status_code, str(exc.detail))
        for key, value in (exc.headers or {}).items():
            resp.headers[key] = value
        return resp


#: Answers that count as a refused upload: the file or its form was bad (malformed request, past a size or
#: work bound, unreadable type, unreadable or unanalysable content). 401/403/404/409 are not the file's fault.
REFUSED_UPLOAD = frozenset({400, 413, 415, 422})


def takes_file(app: FastAPI) -> list[str]:
    """The paths of the POST routes that take an uploaded file (a ``File()`` parameter): the uploads the
    failure limit counts. Included routers are walked (FastAPI >= 0.165 keeps them as branches)."""

    def walk(routes, prefix: str = ""):  # noqa: ANN001, ANN202
        for r in routes:
            if hasattr(r, "original_router"):
                yield from walk(r.original_router.routes, prefix + (r.include_context.prefix or ""))
            elif (isinstance(r, APIRoute) and "POST" in r.methods
                  and any(isinstance(f.field_info, params.File) for f in r.dependant.body_params)):
                yield prefix + r.path

    return sorted(set(walk(app.routes)))


def jsonable_errors(exc: RequestValidationError) -> list[dict]:
    return [{"loc": [str(p) for p in e.get("loc", ())], "msg": str(e.get("msg")), "type": str(e.get("type"))}
            for e in exc.errors()]


def create_app(settings: Settings | None = None) -> FastAPI:
    settings = settings or get_settings()
    engine = make_engine(settings.database_url, busy_ms=settings.sqlite_busy_ms)

    @asynccontextmanager
    async def lifespan(app: FastAPI):
        # The embedded default: one worker thread inside the server, so a laptop needs nothing else.
        embedded = None
        # The analysis pool's first child (and the forkserver it comes from) starts now, beside the start-up
        # rather than in it, so the first upload's read does not wait for it (server/budget.py).
        from .budget import pool_for

        app.state.analysis_warm = pool_for(settings).warm_in_background()
        if settings.embedded_worker:
            from .jobs.worker import start_embedded

            embedded = start_embedded(app, settings)
        yield
        if embedded is not None:
            from .jobs.worker import stop_embedded

            stop_embedded(*embedded, timeout_s=10)
        engine.dispose()

    app = FastAPI(
        title="Remanence API",
        version=__version__,
        summary="Registry and dashboard for molecular-ferroelectric campaigns.",
        lifespan=lifespan,
        # /docs is our own page (server.api.docs_page): the stock pages load a CDN the CSP blocks.
        docs_url=None,
        redoc_url=None,
        # Starlette's body limit: refuses by Content-Length, else counts the body as it streams, so an
        # oversized upload is never read whole. Room is left for the multipart envelope and form fields.
        max_body_size=settings.max_upload_bytes + 64 * 1024,
    )
    app.state.settings = settings
    app.state.engine = engine
    from .services.search import keep_index_in

    keep_index_in(engine, settings.data_dir)  # the in-process structure index survives restarts
    mail.attach(engine, settings)  # notification e-mail, when REMANENCE_SMTP_HOST is set
    from .services import notifications

    notifications.configure(engine, settings)  # the group window of REMANENCE_NOTIFICATION_GROUP_MINUTES
    templates = Jinja2Templates(directory=str(templates_dir()))
    templates.env.globals.update(version=__version__, static_url=static_url, plotly_bundle=PLOTLY_BUNDLE,
                                 may_see_structure=may_see_structure, may_cancel_job=may_cancel_job, has_inbox=has_inbox,
                                 form_cautions=hazards.form_cautions, hazard_defer=hazards.DEFER)
    format_filters.install(templates.env)
    templates.env.filters["figure_alt"] = figure_alt  # a figure's axes and data tables (figure_block macro)
    app.state.templates = templates

    @app.middleware("http")
    async def security_headers(request: Request, call_next):
        response = await call_next(request)
        response.headers.setdefault("Content-Security-Policy", CSP)
        response.headers.setdefault("X-Content-Type-Options", "nosniff")
        response.headers.setdefault("X-Frame-Options", "DENY")
        response.headers.setdefault("Referrer-Policy", "same-origin")
        return response

    @app.middleware("http")
    async def refuse_nul(request: Request, call_next):
        # NUL (U+0000) in a path, query string, JSON or form body is 422 before any handler (server/text_guard.py).
        field = text_guard.nul_in_query(request.url.path, request.query_params.multi_items())
        if field is None and request.method in ("POST", "PUT", "PATCH", "DELETE"):
            content_type = request.headers.get("content-type", "")
            if text_guard.reads(content_type):
                field = text_guard.nul_in_body(content_type, await request.body())
        if field is not None:
            return _error(request, 422, text_guard.refusal(field), {"field": field})
        return await call_next(request)

    search_buckets = TokenBuckets(settings.search_per_minute, settings.search_burst)

    @app.middleware("http")
    async def search_rate_limit(request: Request, call_next):
        # Any request that asks for a structure search (API, registry, explorer, outcome map) spends a token.
        params = request.query_params
        if any((params.get(name) or "").strip() for name in ("substructure", "similar")):
            wait_s = search_buckets.take(caller_key(request))
            if wait_s:
                response = _error(request, 429, f"too many structure searches: at most "
                                  f"{settings.search_per_minute:g} a minute (REMANENCE_SEARCH_PER_MINUTE), "
                                  f"{settings.search_burst} at once; try again in {math.ceil(wait_s)} s")
                response.headers["Retry-After"] = str(math.ceil(wait_s))
                return response
        return await call_next(request)

    # Refused uploads per caller (server/ratelimit.py): read from app.state at each request, so a test can put in
    # a window with its own clock.
    app.state.upload_failures = FailureWindow(settings.upload_failures, settings.upload_failure_window_s)
    upload_paths: list[re.Pattern] = []

    @app.middleware("http")
    async def upload_failure_limit(request: Request, call_next):
        if request.method != "POST":
            return await call_next(request)
        if not upload_paths:  # on the first POST: the routers are included after the middleware
            upload_paths.extend(compile_path(path)[0] for path in takes_file(app))
        if not any(pattern.match(request.url.path) for pattern in upload_paths):
            return await call_next(request)
        window: FailureWindow = request.app.state.upload_failures
        key = caller_key(request)
        wait_s = window.wait_s(key)
        if wait_s:
            response = _error(request, 429, f"too many refused uploads: {window.limit} in {window.window_s:g} s "
                              f"(REMANENCE_UPLOAD_FAILURES, REMANENCE_UPLOAD_FAILURE_WINDOW_S); fix the file and try "
                              f"again in {math.ceil(wait_s)} s", {"limit": "upload_failures", "limit_value": window.limit})
            response.headers["Retry-After"] = str(math.ceil(wait_s))
            return response
        response = await call_next(request)
        if response.status_code in REFUSED_UPLOAD:
            window.record(key)
        return response

    app.add_middleware(CookieMiddleware)  # writes the session, pre-login and device cookies (server/cookies.py)
    # Pages, JSON and text assets go compressed to browsers that ask; the CSRF token in pages is masked
    # per response (security.mask_token), so compression leaks nothing about it (BREACH).
    app.add_middleware(GZipMiddleware, minimum_size=GZIP_MIN_BYTES)
    # Added last, so outermost of our middleware: a slow body is cut off before other work is done for it.
    app.add_middleware(BodyDeadline, seconds=settings.body_timeout_s)
    _install_error_handlers(app)

    from .api.v1 import router as api_router

    app.include_router(api_router)
    app.include_router(api_docs_page.router)
    for pages in (auth_pages, compound_pages, batch_pages, scaffold_pages, measurement_pages, sample_pages,
                  campaign_pages, admin_pages, digest_pages, compare_pages, planning_pages, comment_pages,
                  attachment_pages,
                  freeze_pages, import_profile_pages, notification_pages):
        app.include_router(pages.router)
    # Versioned addresses (server/web/assets.py) are cached for a year, anything else revalidated.
    app.mount("/static", VersionedStaticFiles(directory=str(static_dir())), name="static")

    @app.get("/healthz", include_in_schema=False)
    def healthz() -> Response:
        """200 when the app can reach its database, 503 when it cannot (for load balancers and monitors)."""
        try:
            with engine.connect() as conn:
                conn.execute(text("SELECT 1"))
        except OperationalError:
            return JSONResponse({"ok": False, "version": __version__, "detail": "database unreachable"},
                                status_code=503)
        return JSONResponse({"ok": True, "version": __version__})

    return app
