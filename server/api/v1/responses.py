"""Documented error responses of the API routes (the OpenAPI `responses` of each endpoint)."""

from __future__ import annotations

from pydantic import BaseModel, ConfigDict


class Closed(BaseModel):
    """A typed answer that names every key it has (``additionalProperties: false`` in the OpenAPI document).

    A route that answers a service's dict with one of these validates the dict against it: a key the
    service adds without adding it here fails the request (and so the tests) instead of being dropped
    silently. Routes whose answers leave keys out for some callers (the embargo, a withheld compound) use
    ``response_model_exclude_unset=True``, so a key the dict lacks stays absent instead of becoming null.
    """

    model_config = ConfigDict(extra="forbid")


class ErrorOut(BaseModel):
    detail: str
    field: str | None = None
    line: int | None = None
    column: str | None = None


class DuplicateOut(BaseModel):
    detail: str
    existing: str | int  # a code, or a measurement id


class LimitOut(BaseModel):
    detail: str
    limit: str | None = None  # which bound was met (server/errors.py OverLimit), e.g. "cif_sites"
    limit_value: float | int | None = None  # the bound itself


LIMIT_ERRORS = {413: {"model": LimitOut, "description": "past a bound on work; `limit` names it"}}
QUOTA_ERRORS = {429: {"model": LimitOut, "description": "a per-account quota, or the caller's allowance of refused uploads, "
                                                        "is used up for now; `limit` names it"}}

AUTH_ERRORS = {
    401: {"model": ErrorOut, "description": "no or an invalid token/session"},
    403: {"model": ErrorOut, "description": "the caller's role or token scope does not allow this"},
}
INPUT_ERRORS = {422: {"model": ErrorOut, "description": "bad input; `detail` says what and where"}}
NOT_FOUND = {404: {"model": ErrorOut, "description": "no such thing"}}
ARCHIVED = {409: {"model": ErrorOut, "description": "archived: restore it before adding data"}}
DUPLICATE = {409: {"model": DuplicateOut, "description": "exists already; `existing` names it"}}
