"""JSON API, version 1. Routers are thin: parse, call one service, answer with a Read model."""

from fastapi import APIRouter

from . import admin, attachments, barriers, comments, compounds, freezes, import_profiles, jobs, measurements, notifications, outputs, planning, samples, scaffolds

router = APIRouter(prefix="/api/v1")
router.include_router(compounds.router)
router.include_router(scaffolds.router)
router.include_router(measurements.router)
router.include_router(samples.router)
router.include_router(import_profiles.router)
router.include_router(barriers.router)
router.include_router(jobs.router)
router.include_router(admin.router)
router.include_router(outputs.router)
router.include_router(planning.router)
router.include_router(comments.router)
router.include_router(attachments.router)
router.include_router(freezes.router)
router.include_router(notifications.router)
