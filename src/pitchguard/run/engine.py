"""The worker pool of a tiled scan: local processes or a dask.distributed cluster."""

from __future__ import annotations

from pitchguard.errors import STOP_POLL_S, LayoutError, check_stop
from pitchguard.run.tasks import init_worker


class WorkerPool:
    """Local worker processes, or a dask.distributed cluster, for the tile tasks."""

    def __init__(self, path: str, jobs: int, scheduler: str | None, progress):
        self.path, self.scheduler, self.progress = path, scheduler, progress
        self.jobs = jobs
        self.client = self.pool = None

    def __enter__(self) -> WorkerPool:
        if self.scheduler:
            try:
                from distributed import Client
            except ImportError:
                raise LayoutError(
                    "--scheduler needs dask.distributed: pip install 'pitchguard[cluster]'"
                ) from None
            self.client = Client(self.scheduler)
        else:
            from concurrent.futures import ProcessPoolExecutor
            from multiprocessing import get_context

            self.pool = ProcessPoolExecutor(
                self.jobs, mp_context=get_context("fork"), initializer=init_worker
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
                fut = self.pool.submit(fn, *args)
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
            raise LayoutError(
                f"{self.path}: the layout reader crashed in a tile worker: the file is corrupt"
            ) from None
        except Exception as exc:
            if self.client is None:
                raise
            # A worker lost while reading: bad input.
            raise LayoutError(
                f"{self.path}: a tile failed on the cluster: {type(exc).__name__}: {exc}"
            ) from None
