"""Background jobs (reprocessing, uploads): a thread per job, progress and cancel by job id."""

from __future__ import annotations

import threading
import traceback
import uuid
from dataclasses import dataclass, field
from typing import Any, Callable

from ..errors import InputError


class Cancelled(Exception):
    """Raised inside a job's progress callback once the user cancels it."""


@dataclass
class Job:
    id: str
    kind: str
    total: int
    done: int = 0
    step: str = "queued"
    state: str = "running"  # running, done, failed, cancelled
    error: str | None = None
    value: Any = None
    info: dict = field(default_factory=dict)
    cancel_event: threading.Event = field(default_factory=threading.Event)

    @property
    def fraction(self) -> float:
        return 1.0 if self.state == "done" else min(0.99, self.done / max(self.total, 1))


class JobManager:
    def __init__(self, keep: int = 16):
        self._jobs: dict[str, Job] = {}
        self._lock = threading.Lock()
        self._keep = keep

    def start(self, kind: str, total: int, work: Callable[[Callable[[str], None]], Any], **info) -> str:
        """Run ``work(tick)`` in a thread; ``tick(step_name)`` advances progress and honours cancel."""
        job = Job(id=uuid.uuid4().hex[:12], kind=kind, total=total, info=info)

        def tick(name: str) -> None:
            if job.cancel_event.is_set():
                raise Cancelled()
            job.done += 1
            job.step = name

        def body():
            try:
                job.value = work(tick)
                job.state = "cancelled" if job.cancel_event.is_set() else "done"
            except Cancelled:
                job.state = "cancelled"
            except InputError as exc:
                job.state, job.error = "failed", str(exc)
            except Exception as exc:  # the server keeps running; the user gets one line
                job.state, job.error = "failed", f"{type(exc).__name__}: {exc}"
                traceback.print_exc()

        with self._lock:
            self._jobs[job.id] = job
            while len(self._jobs) > self._keep:
                oldest = next(iter(self._jobs))
                if self._jobs[oldest].state == "running":
                    break
                self._jobs.pop(oldest)
        threading.Thread(target=body, name=f"cloakrcs-{kind}-{job.id}", daemon=True).start()
        return job.id

    def get(self, job_id: str | None) -> Job | None:
        return self._jobs.get(job_id) if job_id else None

    def cancel(self, job_id: str | None) -> None:
        job = self.get(job_id)
        if job is not None:
            job.cancel_event.set()
