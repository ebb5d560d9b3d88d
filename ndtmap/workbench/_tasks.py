"""Running the workbench's computations now or on a worker thread (private).

:class:`TaskRunner` runs each job either at once (foreground) or on one
worker thread, so the interface stays responsive while a large map is
computed. Jobs have a kind ("map", "indications", ...): a job waiting to
start is replaced by a newer one of the same kind (the latest edit wins).
The job's result is handed to its ``done`` function, an error to ``failed``.
"""

from __future__ import annotations

import threading
import time
from collections import OrderedDict
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

from ndtmap.workbench._compute import Progress


@dataclass
class _Job:
    kind: str
    work: Callable[[Progress], Any]
    done: Callable[[Any], None]
    failed: Callable[[BaseException], None]


class TaskRunner:
    """Run jobs in the foreground or on one worker thread.

    Parameters
    ----------
    background : bool
        True: a worker thread; False: at once, in the caller's thread.
    report : callable(fraction, text)
        Told the progress of the running job (fraction None: unknown; text
        '' and fraction 1.0 when all jobs are done).
    """

    def __init__(self, *, background: bool, report: Progress) -> None:
        self.background = bool(background)
        self._report = report
        self._lock = threading.Lock()
        self._pending: OrderedDict[str, _Job] = OrderedDict()
        self._thread: threading.Thread | None = None
        self._idle = threading.Event()
        self._idle.set()
        self.last_seconds: dict[str, float] = {}

    def submit(self, kind: str, work: Callable[[Progress], Any], done: Callable[[Any], None],
               failed: Callable[[BaseException], None]) -> None:
        """Run `work(progress)` and hand its result to `done` (its exception to `failed`)."""
        job = _Job(kind, work, done, failed)
        if not self.background:
            self._run(job)
            self._report(1.0, "")
            return
        with self._lock:
            self._pending.pop(kind, None)
            self._pending[kind] = job
            self._idle.clear()
            if self._thread is None:
                self._thread = threading.Thread(target=self._loop, name="ndtmap-workbench", daemon=True)
                self._thread.start()

    def _run(self, job: _Job) -> None:
        t0 = time.perf_counter()
        try:
            result = job.work(self._report)
        except Exception as exc:  # noqa: BLE001 - every error goes to the interface, none is lost
            job.failed(exc)
            return
        finally:
            self.last_seconds[job.kind] = time.perf_counter() - t0
        try:
            job.done(result)
        except Exception as exc:  # noqa: BLE001
            job.failed(exc)

    def _loop(self) -> None:
        while True:
            with self._lock:
                job = self._pending.popitem(last=False)[1] if self._pending else None
            if job is not None:
                self._run(job)
                continue
            self._report(1.0, "")
            with self._lock:
                if not self._pending:
                    self._thread = None
                    self._idle.set()
                    return

    @property
    def busy(self) -> bool:
        """True while jobs are waiting or running."""
        return not self._idle.is_set()

    def wait(self, timeout: float | None = None) -> bool:
        """Wait until every job has run; False if `timeout` (s) passed first."""
        return self._idle.wait(timeout)
