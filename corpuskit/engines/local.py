"""The local engine: a process pool over partitions, sized to the machine.

Each task reads one partition from the cache and writes its result there, so
memory is bounded by partition size, not corpus size.
"""
from __future__ import annotations

import multiprocessing as mp
import os
from concurrent.futures import ProcessPoolExecutor, as_completed
from typing import Any, Callable, Iterator, Sequence

__all__ = ["LocalEngine"]


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

    def rest(self) -> None:
        """Let the workers exit before a long step in this process (the pool starts again on the
        next ``imap``), so idle workers do not hold memory meanwhile."""
        self.close()

    def _executor(self) -> ProcessPoolExecutor:
        if self._pool is None:
            self._pool = ProcessPoolExecutor(self.workers, mp_context=mp.get_context("forkserver"))
        return self._pool

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
        except BaseException:
            for f in futures:
                f.cancel()
            raise
