"""Background jobs: a queue in the database, claimed by workers.

* :mod:`server.jobs.queue`: the job state machine (queued -> running -> done | failed |
  cancelled), each transition one short transaction guarded by a conditional UPDATE.
* :mod:`server.jobs.worker`: the loop that claims a job, runs its handler with progress and
  cancellation, keeps the heartbeat going and records the outcome.
* :mod:`server.jobs.handlers`: what each job kind does (``HANDLERS``).
"""
