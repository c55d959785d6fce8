"""One planning thread beside the socket loop: start a job, cancel it, collect its result.

The socket loop hands a job to :meth:`PlanWorker.start` and goes on serving control
requests and heartbeats; the worker runs :func:`veer.node.jobs.run_job`, puts the result
in a queue and wakes the loop through a ZeroMQ ``inproc`` PAIR socket (so the loop waits
on one poller). :meth:`PlanWorker.cancel` sets the job's cancel event; the planner
checks it between expansions.
"""

from __future__ import annotations

import logging
import queue
import threading

import zmq

from veer.planning import Planner

from .jobs import Job, JobResult, run_job

__all__ = ["PlanWorker", "MAX_QUEUED_JOBS"]

log = logging.getLogger("veer.node")

MAX_QUEUED_JOBS = 4
"""Bound of the job and result queues. The node runs one job at a time (a new one starts
only after the last one's result was collected), so one job and the stop marker is the
most they ever hold; the bound turns a bug into a refused job instead of growing memory."""


class PlanWorker:
    """A daemon thread that runs one job at a time.

    Parameters
    ----------
    planner : Planner
    context : zmq.Context
        The context of the socket loop (inproc sockets must share it).
    wake_address : str
        inproc address the loop binds a PAIR socket to; the worker connects and sends one
        empty frame per finished job.
    """

    def __init__(self, planner: Planner, context: zmq.Context, wake_address: str):
        self.planner = planner
        self._context = context
        self._wake_address = wake_address
        self._jobs: queue.Queue = queue.Queue(maxsize=MAX_QUEUED_JOBS)
        self.results: queue.Queue[JobResult] = queue.Queue(maxsize=MAX_QUEUED_JOBS)
        self._cancel: dict[int, threading.Event] = {}
        self._lock = threading.Lock()
        self._stop = threading.Event()
        self._thread = threading.Thread(target=self._run, name="veer-node-planner", daemon=True)

    def begin(self) -> None:
        self._thread.start()

    def start(self, job: Job) -> bool:
        """Queue ``job``; False (and nothing queued) when the queue is full, which the node reports."""
        with self._lock:
            self._cancel[job.job_id] = threading.Event()
        try:
            self._jobs.put_nowait(job)
        except queue.Full:
            with self._lock:
                self._cancel.pop(job.job_id, None)
            return False
        return True

    def cancel(self, job_id: int) -> None:
        with self._lock:
            event = self._cancel.get(job_id)
        if event is not None:
            event.set()

    def stop(self, timeout_s: float = 0.5) -> None:
        """Cancel every job and wait up to ``timeout_s`` for the thread to end."""
        self._stop.set()
        with self._lock:
            for event in self._cancel.values():
                event.set()
        try:
            self._jobs.put_nowait(None)
        except queue.Full:  # the thread sees the stop flag after its current job
            pass
        self._thread.join(timeout_s)

    @property
    def alive(self) -> bool:
        return self._thread.is_alive()

    def _run(self) -> None:
        wake = self._context.socket(zmq.PAIR)
        wake.setsockopt(zmq.LINGER, 0)
        wake.connect(self._wake_address)
        try:
            while not self._stop.is_set():
                try:
                    job = self._jobs.get(timeout=0.2)
                except queue.Empty:
                    continue
                if job is None:
                    break
                with self._lock:
                    cancel = self._cancel.get(job.job_id) or threading.Event()
                result = run_job(self.planner, job, cancel)
                with self._lock:
                    self._cancel.pop(job.job_id, None)
                while not self._stop.is_set():  # bounded queue: wait for the loop to collect
                    try:
                        self.results.put(result, timeout=0.2)
                        break
                    except queue.Full:
                        continue
                try:
                    wake.send(b"", zmq.NOBLOCK)
                except zmq.ZMQError:  # the loop is gone or busy: it drains the queue anyway
                    pass
        finally:
            wake.close(linger=0)
