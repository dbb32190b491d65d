"""The worker pool of a tiled scan: local processes or a dask.distributed cluster."""

from __future__ import annotations

import os
import time

from pitchguard.errors import STOP_POLL_S, LayoutError, check_stop
from pitchguard.option_bounds import SCHEDULER_TIMEOUT_S
from pitchguard.processes import (
    JOBS_PER_CORE,
    death_message,
    die_with_parent,
    prepare_parent_death,
    usable_cores,
    worker_count,
)
from pitchguard.run.tasks import init_worker

DEATH_WAIT_S = 2.0
"""How long a broken pool's workers are given to be reaped, to tell what ended one."""

CONNECT_TIMEOUT_S = SCHEDULER_TIMEOUT_S


def connect(address: str):
    """A dask.distributed client of the scheduler at ``address``, or a
    PitchguardError with one line saying why there is none."""
    from pitchguard.option_bounds import checked_scheduler, unreachable

    checked_scheduler("scheduler", address)
    try:
        from distributed import Client
    except ImportError:
        raise unreachable(
            address, "this needs dask.distributed: pip install 'pitchguard[cluster]'"
        ) from None
    try:
        if not address.startswith("inproc://"):  # in this process: nothing to wait for
            _handshake(address, CONNECT_TIMEOUT_S)
        return Client(address, timeout=CONNECT_TIMEOUT_S)
    except Exception as exc:  # the library's errors for what it cannot reach or parse
        check_stop()
        raise unreachable(address, str(exc).strip() or type(exc).__name__) from None


def _handshake(address: str, timeout: float) -> None:
    """Greet the scheduler at ``address`` and part, or raise why not within
    ``timeout`` s.  The library bounds the connection but not the wait for the
    greeting, so a port that accepts and never speaks would hold a client for
    ever; this runs on a thread of its own, which the command need not wait for."""
    import asyncio
    import threading

    from distributed.comm import connect as open_comm

    outcome: dict = {}
    quiet = TimeoutError(f"no answer within {timeout:g} s")

    async def greet() -> None:
        comm = await asyncio.wait_for(open_comm(address, timeout=timeout), timeout)
        await comm.close()

    def run() -> None:
        try:
            asyncio.run(greet())
        except TimeoutError:
            outcome["error"] = quiet
        except Exception as exc:
            outcome["error"] = exc

    greeter = threading.Thread(target=run, name="pitchguard-scheduler-greeting", daemon=True)
    greeter.start()
    deadline = time.monotonic() + timeout + 1.0  # the greeting gives up at ``timeout``
    while greeter.is_alive() and time.monotonic() < deadline:
        greeter.join(STOP_POLL_S)
        check_stop()
    if greeter.is_alive():
        raise quiet
    if "error" in outcome:
        raise outcome["error"]


def init_local_worker(parent: int) -> None:
    """Set up a local worker: tied to the command's life (processes.die_with_parent),
    then as :func:`init_worker`."""
    die_with_parent(parent)
    init_worker()


def planned_jobs(jobs: int | None, scheduler: str | None, note=None) -> int:
    """Local workers to plan the tiles for (processes.worker_count); ``note``
    hears when an explicit ``jobs`` is more than the cores can use."""
    n = worker_count(jobs)
    if jobs is not None and n < jobs and not scheduler and note is not None:
        note(
            f"--jobs {jobs}: at most {JOBS_PER_CORE} workers per usable core "
            f"({usable_cores()} here) run at a time; using {n}"
        )
    return n


class WorkerPool:
    """Local worker processes, or a dask.distributed cluster, for the tile tasks."""

    def __init__(
        self, path: str, jobs: int, scheduler: str | None, progress, tasks: int | None = None
    ):
        """``jobs`` local workers, no more than ``tasks`` can keep busy; ``path``
        names the layout in messages."""
        self.path, self.scheduler, self.progress = path, scheduler, progress
        self.jobs = min(jobs, max(1, tasks)) if tasks is not None else jobs
        # Cluster workers run in folders of their own: they get the layout's full path.
        self.task_path = os.path.abspath(path) if scheduler else path
        self.client = self.pool = None
        self.started: dict = {}  # pid -> Process: the local workers, kept to tell how one ended

    def __enter__(self) -> WorkerPool:
        if self.scheduler:
            self.client = connect(self.scheduler)
        else:
            from concurrent.futures import ProcessPoolExecutor
            from multiprocessing import get_context

            prepare_parent_death()
            self.pool = ProcessPoolExecutor(
                self.jobs,
                mp_context=get_context("fork"),
                initializer=init_local_worker,
                initargs=(os.getpid(),),
            )
        return self

    def __exit__(self, exc_type, *exc) -> None:
        if self.client is not None:
            self.client.close()
        if self.pool is not None:
            if exc_type is not None:
                # Interrupted or failed: stop the workers now rather than let them
                # finish their tiles (they die quietly, see init_worker).
                procs = list((getattr(self.pool, "_processes", None) or {}).values())
                for proc in procs:
                    proc.terminate()
                for proc in procs:  # reaped (they die at once: SIGTERM is left at default)
                    proc.join(timeout=1.0)
                self.pool.shutdown(wait=False, cancel_futures=True)
            else:
                self.pool.shutdown(wait=True, cancel_futures=True)

    @property
    def workers(self) -> int:
        if self.client is not None:
            return max(1, len(self.client.scheduler_info().get("workers", {})))
        return self.jobs

    def stream(self, tasks: list[tuple], handle, in_flight: int | None = None) -> None:
        """Run ``tasks`` (``(fn, args, tag)``; ``args`` may be a function making
        them when the task starts), at most ``in_flight`` at a time.

        Each result goes to ``handle(tag, result)`` as it arrives; the tasks
        ``handle`` returns (same form) go ahead of those still waiting, in
        order.  Returns when no task is left.
        """
        import queue
        from collections import deque
        from concurrent.futures.process import BrokenProcessPool

        waiting = deque(tasks)
        arrived: queue.SimpleQueue = queue.SimpleQueue()
        limit = in_flight or max(1, len(waiting))
        running = 0

        def start(task) -> None:
            fn, args, tag = task
            if callable(args):  # made when the task starts
                args = args()
            if self.client is not None:
                fut = self.client.submit(fn, *args, pure=False)
            else:
                try:
                    fut = self.pool.submit(fn, *args)
                except BrokenProcessPool:  # a worker died since the last result
                    raise self._broken() from None
                self.started.update(getattr(self.pool, "_processes", None) or {})
            fut.add_done_callback(lambda f: arrived.put((tag, f)))

        while waiting or running:
            while waiting and running < limit:
                start(waiting.popleft())
                running += 1
            try:
                tag, fut = arrived.get(timeout=STOP_POLL_S)
            except queue.Empty:  # a stop noted where it could not be raised
                check_stop()
                continue
            running -= 1
            check_stop()
            waiting.extendleft(reversed(handle(tag, self._result(fut))))

    def _result(self, fut):
        from concurrent.futures.process import BrokenProcessPool

        try:
            return fut.result()
        except BrokenProcessPool:
            raise self._broken() from None
        except Exception as exc:
            if self.client is None:
                raise
            # A worker lost while reading: bad input.
            raise LayoutError(
                f"{self.path}: a tile failed on the cluster: {type(exc).__name__}: {exc}"
            ) from None

    def _broken(self) -> LayoutError:
        why = death_message("a tile worker", self._ended(), "reading and scanning tiles")
        return LayoutError(f"{self.path}: {why}")

    def _ended(self) -> int | None:
        """The exit code that best tells why the pool broke: a signal other than
        the SIGTERM the pool sends the survivors once one worker is gone, else
        SIGTERM (sent from outside), else an exit status."""
        import signal

        deadline = time.monotonic() + DEATH_WAIT_S
        codes = []
        for proc in self.started.values():
            while proc.exitcode is None and time.monotonic() < deadline:
                time.sleep(0.01)
            if proc.exitcode is not None:
                codes.append(proc.exitcode)
        for pick in (
            lambda c: c < 0 and c != -signal.SIGTERM,
            lambda c: c < 0,
            lambda c: c != 0,
        ):
            found = [c for c in codes if pick(c)]
            if found:
                return found[0]
        return None
