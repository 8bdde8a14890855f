"""The local engine: a process pool over partitions, sized to the machine.

Each task reads one partition from the cache and writes its result there, so
memory is bounded by partition size, not corpus size.  Workers are forked from
a server process that has already imported the stages (their pages are shared,
and a new worker starts in milliseconds), and between stages they exit when one
has grown beyond REST_ABOVE_MB, so what one stage's tasks leave in a worker's
heap does not stay for the rest of the run.
"""
from __future__ import annotations

import ctypes
import multiprocessing as mp
import os
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from typing import Any, Callable, Iterator, Sequence

__all__ = ["LocalEngine", "Later", "trim_memory"]

PRELOAD = ["corpuskit.runner"]   # imported once by the server that forks the workers
REST_ABOVE_MB = 128              # workers exit between steps when one holds more than this


def private_mb(pid: int) -> float:
    """Memory only this process holds (private pages, in MB), from Linux's smaps_rollup;
    infinity where that cannot be read, so that callers err towards freeing memory."""
    try:
        with open(f"/proc/{pid}/smaps_rollup", encoding="ascii") as f:
            return sum(int(line.split()[1]) for line in f if line.startswith(("Private_Clean:", "Private_Dirty:"))) / 1024
    except (OSError, ValueError, IndexError):
        return float("inf")


def trim_memory() -> None:
    """Hand freed heap pages back to the system (glibc's ``malloc_trim``; elsewhere nothing)."""
    try:
        ctypes.CDLL("libc.so.6").malloc_trim(0)
    except (OSError, AttributeError):  # pragma: no cover - not glibc
        pass


class Later:
    """A task run when its result is first asked for (in this process)."""

    def __init__(self, func: Callable, args: tuple):
        self._func, self._args, self._done = func, args, False
        self._value: Any = None

    def result(self) -> Any:
        if not self._done:
            self._value, self._done = self._func(*self._args), True
        return self._value


class LocalEngine:
    name = "local"

    def __init__(self, workers: int | None = None):
        self.workers = max(1, workers or len(os.sched_getaffinity(0)))
        self._pool: ProcessPoolExecutor | None = None

    def __enter__(self) -> "LocalEngine":
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

    def close(self) -> None:
        if self._pool is not None:
            self._pool.shutdown(wait=True, cancel_futures=True)
            self._pool = None

    def rest(self, idle: bool = False) -> None:
        """Between steps: let the workers exit (the pool starts again on the next ``imap``) if
        one holds more than REST_ABOVE_MB of its own memory, so what a stage's tasks left in
        their heaps does not stay for the rest of the run, or if they would sit ``idle`` through
        a long step in this process; trim this process's heap."""
        if self._pool is not None and (idle or max(map(private_mb, self._pool._processes), default=0) > REST_ABOVE_MB):
            self.close()
        trim_memory()

    def _executor(self) -> ProcessPoolExecutor:
        if self._pool is None:
            context = mp.get_context("forkserver")
            context.set_forkserver_preload(PRELOAD)
            self._pool = ProcessPoolExecutor(self.workers, mp_context=context)
        return self._pool

    def start(self, func: Callable, *args: Any):
        """Begin ``func(*args)`` on a worker while this process goes on; ``.result()`` waits for it.
        With one worker it runs in this process when its result is asked for."""
        if self.workers == 1:
            return Later(func, args)
        return self._executor().submit(func, *args)

    def imap(self, func: Callable, args: Sequence[tuple]) -> Iterator[tuple[int, Any]]:
        """Yield (index, result) as tasks finish; one worker or one task runs in this process."""
        if self.workers == 1 or len(args) <= 1:
            for i, a in enumerate(args):
                yield i, func(*a)
            return
        pool = self._executor()
        futures = {pool.submit(func, *a): i for i, a in enumerate(args)}
        try:
            for fut in as_completed(futures):
                yield futures[fut], fut.result()
        except BrokenProcessPool:
            self._pool = None
            from ..errors import DataError
            raise DataError("a worker process stopped before finishing its task (out of memory, killed, or it failed "
                            "while starting: a script that calls corpuskit.run() must do so under "
                            "`if __name__ == \"__main__\":`); finished work is kept, run again.") from None
        except BaseException:
            for f in futures:
                f.cancel()
            raise
