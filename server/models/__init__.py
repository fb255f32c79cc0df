"""SQLModel tables by area. Importing this package registers every table on ``SQLModel.metadata``."""

from sqlmodel import SQLModel

from .accounts import ROLES, SCOPES, ApiToken, LoginThrottle, User, WebSession
from .audit import AuditEvent
from .collab import (COMMENT_TARGETS, IMAGE_TYPES, ArchiveIn, ArchiveStep, Attachment, AttachmentPage, AttachmentRead, Comment, CommentIn, CommentPage, CommentRead, FreezeCreate, FreezePublication,
                     PaperFreeze, PaperFreezeCompound)
from .jobs import JOB_STATES, Job
from .notifications import (CompoundFollow, Notification, NotificationGroup, NotificationPage, NotificationPart,
                            NotificationPreference, NotificationRead, NotificationReadMark)
from .measurements import (SAMPLE_FORMS, SERIES_VARIABLES, BarrierEstimate, CrystalPhase, ImportProfile, Measurement,
                           MeasurementSeries, RawFile, Sample, SampleCreate, SamplePreparation,
                           is_live, live_measurement, live_parents, not_retired)
from .registry import (
    BATCH_STATES,
    Batch,
    BatchCreate,
    BatchRead,
    CodeCounter,
    Compound,
    CompoundCreate,
    CompoundPage,
    CompoundRead,
    CompoundUpdate,
    Scaffold,
    ScaffoldCreate,
    ScaffoldRead,
    SideChainRead,
    SideChainSpec,
)
from .planning import (LIFE_STATES, PLAN_STATES, PRIORITIES, BatchPrecursor, CompoundPlan, RankingRead, Reagent,
                       ReagentCreate, ReagentRead, ReagentUpdate, RouteCopy, RouteIn, RouteRead, SynthesisStep)
from .site import SiteSetting
from .stats import IDENTITY_STATES, CompoundSideChain, CompoundStats
from .types import UTCDateTime, utcnow

metadata = SQLModel.metadata

__all__ = [
    "ApiToken", "ArchiveIn", "ArchiveStep", "Attachment", "AttachmentPage", "AttachmentRead", "IMAGE_TYPES", "AuditEvent", "COMMENT_TARGETS", "Comment", "CommentIn", "CommentPage", "CommentRead", "FreezeCreate", "FreezePublication", "PaperFreeze", "PaperFreezeCompound", "CompoundSideChain", "CompoundStats", "IDENTITY_STATES", "BATCH_STATES", "BarrierEstimate", "Batch", "BatchCreate", "BatchRead", "CodeCounter", "Compound",
    "CompoundCreate", "CompoundPage", "CompoundRead", "CompoundUpdate", "CrystalPhase", "ScaffoldCreate",
    "ScaffoldRead", "SiteSetting", "SideChainRead", "SideChainSpec",
    "ImportProfile", "JOB_STATES", "Job", "LoginThrottle", "WebSession", "Measurement", "MeasurementSeries", "SAMPLE_FORMS", "SERIES_VARIABLES", "Sample", "SampleCreate", "SamplePreparation",
    "is_live", "live_measurement", "live_parents", "not_retired", "ROLES", "RawFile", "SCOPES", "Scaffold", "UTCDateTime", "User",
    "metadata", "utcnow",
    "CompoundFollow", "Notification", "NotificationGroup", "NotificationPage", "NotificationPart", "NotificationPreference", "NotificationRead",
    "NotificationReadMark",
    "LIFE_STATES", "PLAN_STATES", "PRIORITIES", "BatchPrecursor", "CompoundPlan", "RankingRead", "Reagent", "ReagentCreate", "ReagentRead", "ReagentUpdate", "RouteCopy", "RouteIn", "RouteRead", "SynthesisStep",
]
