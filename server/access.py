"""Who may read or write what, embargo included: the one place that decides.

The API dependencies (``server/deps.py``), the web pages and the services that build answers all
ask this module; nothing else looks at roles, scopes or the ``embargoed`` flag to decide access.

The access table (a caller is a logged-in user with a role, or an API token with a scope):

| actor                  | read | see embargoed structures | upload measurements | other writes | admin |
|------------------------|------|--------------------------|---------------------|--------------|-------|
| nobody (no login)      | no   | no                       | no                  | no           | no    |
| user, role viewer      | yes  | yes                      | no                  | no           | no    |
| user, role member      | yes  | yes                      | yes                 | yes          | no    |
| user, role admin       | yes  | yes                      | yes                 | yes          | yes   |
| token, scope read      | yes  | only if granted          | no                  | no           | no    |
| token, scope upload    | yes  | no                       | yes (its kinds)     | no           | no    |
| token, scope write     | yes  | yes                      | yes                 | yes          | no    |

Notifications (an inbox, follows of compounds, event preferences) belong to accounts: every logged-in
user has their own, whatever the role (a viewer may mark its notifications read and follow compounds);
tokens have none (:func:`has_inbox`). A notification about a compound is shown only to a reader who may
see that compound (``services/notifications.py`` asks :func:`may_see_structure` when it writes one, and
filters with :func:`structure_visible` when it reads them).

A queued or running job may be cancelled only by whoever queued it (same account or token) or
an admin (:func:`may_cancel_job`).

A read token sees embargoed compounds only when an admin grants it at creation
(``remanence token create --scope read --embargoed``, or the box on the admin page); a read token
without the grant is treated like an upload token for the embargo.

"Read" without a login is limited to the login page and, when the admin publishes it, the status
page (which then shows embargoed compounds by code only).

The embargo: for a caller who may not see embargoed structures, an embargoed compound's
structure and everything derived from it (SMILES, InChI/InChIKey, formula, masses, side chains,
drawing) is withheld, and its label and notes too, since labels often spell out the structure. Its
code stays visible (codes are handed out in order and say nothing about the structure). Lists use
:func:`structure_visible` as a query condition; single records use :func:`may_see_structure`.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Optional

from sqlalchemy import case, null, or_, true
from sqlalchemy.sql.elements import ColumnElement

from .models import Compound

# What a request needs, in increasing order of privilege.
READ = "read"
UPLOAD = "upload"
WRITE = "write"
ADMIN = "admin"

# Why an API caller is refused (the API's 403 ``detail``); pages give their own, friendlier words.
API_REFUSALS = {
    UPLOAD: "{label} may not upload measurements",
    WRITE: "{label} may not change the registry (needs a member account or a write token)",
    ADMIN: "only an admin may do this",
}
PAGE_REFUSALS = {
    UPLOAD: "Your account can read the registry but not change it; ask an admin for a member role.",
    WRITE: "Your account can read the registry but not change it; ask an admin for a member role.",
    ADMIN: "Only an admin may do this.",
}


@dataclass(frozen=True)
class Actor:
    """The caller of a request, once authenticated."""

    kind: str  # "user" | "token"
    name: str
    role: Optional[str] = None
    scope: Optional[str] = None
    kinds: Optional[tuple[str, ...]] = None
    user_id: Optional[int] = None
    token_id: Optional[int] = None
    via_cookie: bool = False
    embargo_grant: bool = False  # read tokens: granted to see embargoed compounds
    profile: str = ""  # upload tokens bound to an import profile read every file through it

    @property
    def label(self) -> str:
        if self.kind == "user":
            return f"user:{self.name}"
        return f"token:{self.token_id} ({self.name})"

    @property
    def can_write(self) -> bool:
        return self.role in ("admin", "member") or self.scope == "write"

    @property
    def is_admin(self) -> bool:
        return self.role == "admin"

    @property
    def sees_people(self) -> bool:
        """Account, token and worker names: not for upload tokens (an instrument PC's secret)."""
        return not (self.kind == "token" and self.scope == "upload")

    @property
    def can_see_embargoed(self) -> bool:
        if self.kind == "user":
            return True
        return token_sees_embargoed(self.scope, self.embargo_grant)

    def can_upload(self, kind: str | None = None) -> bool:
        if self.can_write:
            return True
        if self.scope == "upload":
            return self.kinds is None or kind is None or kind in self.kinds
        return False


def account_actor(user) -> Actor:  # noqa: ANN001 - a models.User
    """The actor an account is when it reads (a notification's recipient, before it logs in)."""
    return Actor(kind="user", name=user.username, role=user.role, user_id=user.id)


#: Why a token is refused an inbox (403 ``detail``).
NO_INBOX = "notifications belong to accounts; a token has no inbox"


def has_inbox(actor: Optional[Actor]) -> bool:
    """Whether ``actor`` has an inbox of its own: a logged-in account of any role; never a token."""
    return actor is not None and actor.kind == "user" and actor.user_id is not None


def token_sees_embargoed(scope: Optional[str], granted: bool) -> bool:
    """Whether a token of ``scope`` sees embargoed compounds: write tokens yes, upload tokens never,
    read tokens only with the admin's grant."""
    return scope == "write" or (scope == "read" and bool(granted))


class NotLoggedIn(Exception):
    """A page needs a login; the web answer is a redirect to the login form, back to ``next_url``."""

    def __init__(self, next_url: str) -> None:
        self.next_url = next_url


class Refused(Exception):
    """A page refuses this caller (403); ``message`` says why, in words for people."""

    def __init__(self, message: str) -> None:
        self.message = message


def allows(actor: Optional[Actor], need: str, *, kind: str | None = None) -> bool:
    """Whether ``actor`` (None: nobody logged in) may do something that needs ``need``."""
    if actor is None:
        return False
    if need == READ:
        return True
    if need == UPLOAD:
        return actor.can_upload(kind)
    if need == WRITE:
        return actor.can_write
    if need == ADMIN:
        return actor.is_admin
    raise ValueError(f"unknown need {need!r}")


def sees_embargoed(actor: Optional[Actor]) -> bool:
    """Whether ``actor`` may see embargoed structures (nobody logged in may not)."""
    return actor is not None and actor.can_see_embargoed


def may_see_structure(actor: Optional[Actor], compound: Compound) -> bool:
    """For one record: whether ``actor`` may see this compound's structure, label and notes."""
    return not compound.embargoed or sees_embargoed(actor)


def structure_visible(actor: Optional[Actor]) -> ColumnElement[bool]:
    """The query-layer form of :func:`may_see_structure`: a condition on ``Compound`` for a select,
    true for every row if the actor sees embargoed structures, else only for rows not embargoed."""
    if sees_embargoed(actor):
        return true()
    return Compound.embargoed == False  # noqa: E712 - SQL expression


def structure_value(actor: Optional[Actor], expr):  # noqa: ANN001, ANN201 - any SQL expression
    """A structure-derived column (molar mass, side-chain carbons, scaffold, computed barrier...) as
    ``actor`` may use it in a query: NULL for embargoed rows when the actor may not see them, so a
    sort over it places those rows by code alone and says nothing about their structure."""
    if sees_embargoed(actor):
        return expr
    return case((Compound.embargoed == True, null()), else_=expr)  # noqa: E712 - SQL expression


def structure_condition(actor: Optional[Actor], cond: ColumnElement[bool]) -> ColumnElement[bool]:
    """A filter on something structure-derived (side chains, scaffold, bridge, label, notes...): for
    an actor who may not see embargoed structures it never matches an embargoed row, so the presence
    or absence of an embargoed code in the answer says nothing about its structure."""
    if sees_embargoed(actor):
        return cond
    return (Compound.embargoed == False) & cond  # noqa: E712 - SQL expression


def structure_missing(actor: Optional[Actor], missing: ColumnElement[bool]) -> ColumnElement[bool]:
    """The rows a sort over a structure-derived column places as "no value": those without one, and
    for an actor who may not see embargoed structures every embargoed row too (the partner of
    :func:`structure_value` and :func:`structure_condition` for index-friendly keyset pages)."""
    if sees_embargoed(actor):
        return missing
    return or_(missing, Compound.embargoed == True)  # noqa: E712 - SQL expression


def code_or_structure_condition(actor: Optional[Actor], code_cond: ColumnElement[bool],
                                structure_cond: ColumnElement[bool]) -> ColumnElement[bool]:
    """A text search over the code (always open) and over label/notes (withheld for embargoed rows)."""
    return or_(code_cond, structure_condition(actor, structure_cond))


def withheld_codes(session, actor: Optional[Actor]) -> frozenset[str]:  # noqa: ANN001 - a SQLModel session
    """The codes of the embargoed compounds whose structure ``actor`` may not see (empty for members):
    answers that are not compound records (jobs, measurements) look their compound's code up here."""
    if sees_embargoed(actor):
        return frozenset()
    from sqlmodel import select

    return frozenset(session.exec(select(Compound.code).where(Compound.embargoed == True)).all())  # noqa: E712


#: Why a caller who neither queued a job nor is an admin may not cancel it (403 ``detail``).
NOT_JOB_OWNER = "only the account or token that queued this job, or an admin, may cancel it"


def may_cancel_job(actor: Optional[Actor], created_by: str) -> bool:
    """Whether ``actor`` may cancel a job queued by ``created_by`` (an actor label, ``Job.created_by``):
    the caller who queued it (the same account, or the same token) or an admin. Other writers may
    not, so one account cannot empty another's queue."""
    if actor is None:
        return False
    return actor.is_admin or (bool(created_by) and created_by == actor.label)


def job_as_seen(job: dict, withheld: frozenset[str]) -> dict:
    """A job (``server.jobs.queue.job_read``) as a caller sees it: for an embargoed compound the caller
    may not see, the result (barrier, bowl depth, dipole and the SMILES used, all computed from the
    structure), the progress message and the error text are withheld; state and times stay."""
    if job.get("compound") not in withheld:
        return job
    return {**job, "result": None, "message": "", "error": "withheld (embargoed compound)" if job.get("error") else None}


def may_change_comment(actor: Optional[Actor], created_by: str) -> bool:
    """Edit or archive a comment: its author (same actor label) if they may still write, or an admin."""
    return allows(actor, WRITE) and (actor.is_admin or actor.label == created_by)
