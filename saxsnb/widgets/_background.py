"""Whole-series results computed in the background for the panels' model.

:class:`BackgroundResults` is the part of :class:`~saxsnb.widgets.model.SeriesModel`
that runs its ``result(...)`` calls in one daemon thread when the model is
``deferred`` and hands each result to the panels on the notebook's event loop (or,
without one, at the next frame step or :meth:`BackgroundResults.wait`). A dask
series is computed on the active distributed client if there is one, else chunk by
chunk in that thread. The ``busy`` trait says what is running.
"""

from __future__ import annotations

import asyncio
import queue
import threading
import time
from concurrent.futures import Future

import traitlets

__all__ = ["BackgroundResults"]


def _running_loop():
    """The event loop of the notebook kernel running this code, or None.

    Only a kernel's loop counts: another library's loop left running in this thread (a
    browser driver's, say) never runs our callbacks, and results must then be delivered
    at the next step or by ``wait()``."""
    try:
        from IPython import get_ipython
    except ImportError:
        return None
    shell = get_ipython()
    if shell is None or getattr(shell, "kernel", None) is None:
        return None
    try:
        loop = asyncio.get_event_loop()
    except RuntimeError:
        return None
    return loop if loop.is_running() else None


def _row_scheduler():
    """Scheduler of the small computations of a step (a frame's rows): in this thread
    (no thread-pool round trip), unless a distributed client is active (its workers
    may hold the data)."""
    try:
        from distributed import default_client

        default_client()
    except (ImportError, ValueError):
        return "sync"
    return None


class BackgroundResults(traitlets.HasTraits):
    """Background computation of cached results (mixed into ``SeriesModel``, which
    provides ``key``, ``result``, ``lazy``, ``deferred`` and the state set in its
    ``__init__``: ``_lock``, ``_results``, ``_jobs``, ``_job_names``, ``_job_start``,
    ``_queue``, ``_worker``, ``_pending``, ``_loop``, ``_tasks``)."""

    #: What is being computed in the background ("" when nothing), with its progress.
    busy = traitlets.Unicode("")

    # ----------------------------------------------------------- background
    def peek(self, analysis: str, /, **params):
        """The cached ``result(analysis, **params)``, or None when it is not computed yet
        (nothing is started)."""
        key = self.key(analysis, **params)
        with self._lock:
            hit = self._results.get(key)
        return None if hit is None else hit[0]

    def when_ready(self, analysis: str, callback, /, **params) -> bool:
        """Call ``callback(result, error)`` with ``result(analysis, **params)``.

        At once when the result is cached, or when the model is not :attr:`deferred`
        (computed here; ``error`` is the exception when it failed, else None). A
        deferred model computes it in a background thread instead (once, however many
        panels ask; a dask series on the active distributed client, if any) and calls
        ``callback`` on the notebook's event loop when it is done (without one, at
        :meth:`deliver`: the next frame step or :meth:`wait`); :attr:`busy` says what
        is running meanwhile.

        Returns
        -------
        True when ``callback`` was called before returning.
        """
        key = self.key(analysis, **params)
        with self._lock:
            hit = self._results.get(key)
        if hit is not None:
            callback(hit[0], None)
            return True
        if not self.deferred:
            try:
                res = self.result(analysis, **params)
            except Exception as exc:  # handed to the panel, which reports it
                callback(None, exc)
            else:
                callback(res, None)
            return True
        job = self._submit(key, analysis, params)
        job.add_done_callback(lambda f: self._post(lambda: self._finish(f, callback)))
        return False

    def _submit(self, key, analysis: str, params: dict) -> Future:
        with self._lock:
            job = self._jobs.get(key)
            if job is not None:
                return job
            if self._queue is None:
                # one daemon thread (a kernel or interpreter that exits does not wait for it)
                self._queue = queue.SimpleQueue()
                self._loop = _running_loop()
                self._worker = threading.Thread(target=self._serve, args=(self._queue,), daemon=True,
                                                name="saxsnb-panels")
                self._worker.start()
            every = params.get("every", 1)
            self._job_names[key] = analysis if every == 1 else f"{analysis} (one frame in {every})"
            job = Future()
            self._jobs[key] = job
            self._queue.put((job, key, analysis, params))
        self._show_busy()
        return job

    def _serve(self, jobs: queue.SimpleQueue) -> None:
        """The background thread: run the queued jobs one after the other; it ends
        after 2 s without work (the next job starts a new one)."""
        while True:
            try:
                job, key, analysis, params = jobs.get(timeout=2.0)
            except queue.Empty:
                with self._lock:  # idle: the thread ends (it holds the model while it runs)
                    if jobs.empty():
                        self._queue = None
                        self._worker = None
                        return
                continue
            if not job.set_running_or_notify_cancel():
                continue
            try:
                out = self._run_job(key, analysis, params)
            except BaseException as exc:  # handed to the callbacks
                job.set_exception(exc)
            else:
                job.set_result(out)

    def _run_job(self, key, analysis: str, params: dict):
        self._job_start[key] = time.perf_counter()
        with _TaskCounter(self._tasks):
            try:
                return self.result(analysis, **params)
            finally:
                with self._lock:
                    self._jobs.pop(key, None)
                self._post(self._show_busy)

    def _finish(self, job: Future, callback) -> None:
        exc = job.exception()
        callback(None if exc is not None else job.result(), exc)

    def _post(self, fn) -> None:
        """Run ``fn`` on the notebook's event loop (thread-safe), else at :meth:`deliver`."""
        loop = self._loop
        if loop is not None and loop.is_running():
            loop.call_soon_threadsafe(fn)
        else:
            with self._lock:
                self._pending.append(fn)

    def deliver(self) -> int:
        """Run the callbacks of finished background work waiting for this thread
        (without an event loop; see :meth:`when_ready`). Returns how many ran."""
        done = 0
        while True:
            with self._lock:
                if not self._pending:
                    return done
                fn = self._pending.pop(0)
            fn()
            done += 1

    def wait(self, timeout: float | None = None) -> None:
        """Block until the background work (and the work its results start) is done
        and drawn. ``timeout`` (s) bounds the wait (TimeoutError past it)."""
        end = None if timeout is None else time.perf_counter() + timeout
        while True:
            with self._lock:
                jobs = list(self._jobs.values())
            for job in jobs:
                left = None if end is None else max(0.0, end - time.perf_counter())
                try:
                    job.result(timeout=left)
                except TimeoutError:
                    raise
                except Exception:  # reported by the panels' callbacks
                    pass
            if self._loop is not None and self._loop.is_running():
                return  # the loop runs the callbacks
            if not self.deliver():
                with self._lock:
                    if not self._jobs and not self._pending:
                        return

    def _show_busy(self) -> None:
        with self._lock:
            names = [self._job_names.get(k, "?") for k in self._jobs]
        if not names:
            text = ""
        else:
            started, finished = self._tasks
            part = f", {100 * finished / started:.0f} % of the dask tasks started" if started else ""
            text = f"computing in the background: {', '.join(dict.fromkeys(names))}{part}"
        if text != self.busy:
            self.busy = text

    @traitlets.observe("frame")
    def _deliver_on_step(self, change) -> None:
        if self._pending and (self._loop is None or not self._loop.is_running()):
            self.deliver()


class _TaskCounter:
    """Counts the dask tasks started and finished while a background job runs (the
    local schedulers' callbacks; on a distributed client none fire)."""

    def __init__(self, counts: list):
        self.counts = counts
        self.cb = None

    def __enter__(self):
        try:
            from dask.callbacks import Callback
        except ImportError:
            return self
        counts = self.counts

        class _Count(Callback):
            def _start(self, dsk):
                counts[0] += len(dsk)

            def _posttask(self, key, result, dsk, state, id):
                counts[1] += 1

        self.cb = _Count()
        self.cb.__enter__()
        return self

    def __exit__(self, *exc):
        if self.cb is not None:
            self.cb.__exit__(*exc)
        return False
