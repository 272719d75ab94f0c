"""The keeper: one thread per worker process that looks after what lies in the database.

Every round (a quarter of ``job_lease_seconds``, at most 15 s) it writes the sign of life of
the household jobs this process computes, marks failed the running jobs of workers that have
stopped (see :mod:`dualcost.api.operations.job_store`), and thereby finds out whether the
database answers (``/ready`` reads :attr:`dualcost.storage.Database.healthy`). Once an hour,
and at start, it removes the saved runs older than ``run_retention_days``. It runs in a thread
of its own, never in the compute threads or on the event loop.
"""

from __future__ import annotations

import logging
import threading
import time

from ..config import Settings
from ..core.errors import StorageUnavailable
from .operations.job_store import JobStore
from .runs import RunStore

log = logging.getLogger("dualcost.api")
#: Seconds between two removals of old saved runs.
RETENTION_EVERY_SECONDS = 3600.0


class Keeper:
    def __init__(self, jobs: JobStore, runs: RunStore, settings: Settings) -> None:
        self.jobs, self.runs, self.settings = jobs, runs, settings
        self.interval = min(15.0, settings.job_lease_seconds / 4)
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="dualcost-keeper", daemon=True)
        self._last_purge = -RETENTION_EVERY_SECONDS

    def start(self) -> None:
        self._thread.start()

    def stop(self) -> None:
        """End the rounds, then fail the jobs still running here (the process is stopping)."""
        self._stop.set()
        self._thread.join(timeout=10)
        try:
            self.jobs.stop()
        except StorageUnavailable as exc:
            log.warning("running household jobs not marked failed at shutdown: %s", exc)

    def round(self) -> None:
        """One round: heartbeats and stopped workers' jobs; old runs when it is time."""
        try:
            self.jobs.beat()
            if time.monotonic() - self._last_purge >= RETENTION_EVERY_SECONDS:
                removed = self.runs.purge(self.settings.run_retention_days)
                self._last_purge = time.monotonic()
                if removed:
                    log.info("removed %d saved run(s) older than %s days", removed,
                             self.settings.run_retention_days)
        except StorageUnavailable as exc:
            log.warning("the database cannot be reached: %s", exc)
            self.jobs.db.ping()

    def _run(self) -> None:
        while True:
            self.round()
            if self._stop.wait(self.interval):
                return
