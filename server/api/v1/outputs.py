"""Outputs for meetings and papers: vector figures of measurements and compounds, the report pack."""

from __future__ import annotations

from typing import Literal, Optional

from fastapi import APIRouter, Request
from fastapi.responses import Response

from ... import access
from ...deps import Reader, RowId, SessionDep
from ...services import digest, figures_vector, measurements, registry, report_pack
from ...services.errors import NotFound
from .responses import AUTH_ERRORS, INPUT_ERRORS, NOT_FOUND

router = APIRouter(tags=["outputs"])

FIGURE_CONTENT = {200: {"content": {t: {} for t in figures_vector.FORMATS.values()}}}


def _figure_response(data: bytes, fmt: str, name: str) -> Response:
    return Response(data, media_type=figures_vector.FORMATS[fmt],
                    headers={"Content-Disposition": f'inline; filename="{name}.{fmt}"'})


@router.get("/measurements/{measurement_id}/figure.{fmt}", responses={**AUTH_ERRORS, **NOT_FOUND, **FIGURE_CONTENT},
            response_class=Response)
def measurement_figure(measurement_id: RowId, fmt: Literal["svg", "pdf"], session: SessionDep,
                       actor: Reader) -> Response:
    """The measurement's figure in publication style (8.5 cm wide) as SVG or PDF; 404 for kinds without one."""
    m = measurements.get_measurement(session, measurement_id)
    # a figure draws the results (a crystal's, the atoms themselves): none for a caller who may not see
    # the embargoed compound, as for its raw file and its measurement page (server/access.py)
    if not measurements.may_download_raw(session, m, actor):
        raise NotFound(f"no figure for measurement {m.id}")
    fig = figures_vector.measurement_plot(session, m)
    return _figure_response(figures_vector.render(fig, fmt), fmt, f"measurement-{m.id}-{m.kind}")


@router.get("/compounds/{code}/figures/{name}.{fmt}", responses={**AUTH_ERRORS, **NOT_FOUND, **FIGURE_CONTENT},
            response_class=Response)
def compound_figure(code: str, name: str, fmt: Literal["svg", "pdf"], session: SessionDep,
                    actor: Reader) -> Response:
    """A compound-level figure (``switching``: Pr and Ec against T) as SVG or PDF; 404 when there is too
    little data (fewer than two loops with a temperature) or the compound is embargoed from this caller."""
    compound = registry.get_compound(session, code)
    if not access.may_see_structure(actor, compound):
        raise NotFound(f"no figures for {code}")
    fig = figures_vector.compound_plot(session, compound, name)
    if fig is None:
        raise NotFound(f"too little data for the {name} figure of {code}")
    return _figure_response(figures_vector.render(fig, fmt), fmt, f"{code}-{name}")


@router.get("/compounds/{code}/report.zip", responses={**AUTH_ERRORS, **NOT_FOUND,
                                                        200: {"content": {"application/zip": {}}}},
            response_class=Response)
def compound_report(code: str, session: SessionDep, actor: Reader) -> Response:
    """The compound's report pack: one-page summary (HTML, PDF), figures (SVG, PDF), CSV tables, raw
    files, CIFs and manifest.json with checksums and analysis versions. Embargoed compounds: 403 for a
    caller who may not see embargoed structures."""
    compound = registry.get_compound(session, code)
    data = report_pack.report_pack(session, compound, actor=actor)
    return Response(data, media_type="application/zip",
                    headers={"Content-Disposition": f'attachment; filename="{compound.code}-report.zip"'})


@router.get("/digest.atom", responses={**AUTH_ERRORS, **INPUT_ERRORS, 200: {"content": {"application/atom+xml": {}}}},
            response_class=Response)
def digest_feed(request: Request, session: SessionDep, actor: Reader, since: Optional[str] = None) -> Response:
    """The weekly digest as an Atom feed (RFC 4287) for feed readers; needs a read token. Embargoed
    compounds appear by code only. ``since`` is YYYY-MM-DD (default: seven days ago)."""
    d = digest.build(session, digest.parse_since(since), actor=actor, by_code_only=True)
    base = str(request.base_url).rstrip("/")
    return Response(digest.atom(d, feed_url=f"{base}/api/v1/digest.atom", site_url=base),
                    media_type="application/atom+xml; charset=utf-8")
