"""The Dask engine: the same task functions on a ``dask.distributed`` cluster.

With no scheduler address a local cluster of N worker processes is started
and closed with the run.  Tasks read and write the shared cache folder, so
workers must see the output folder (one machine, or a shared filesystem).
"""
from __future__ import annotations

from typing import Any, Callable, Iterator, Sequence

__all__ = ["DaskEngine"]


class DaskEngine:
    name = "dask"

    def __init__(self, workers: int | None = None, scheduler: str | None = None):
        try:
            from distributed import Client, LocalCluster
        except ImportError:  # pragma: no cover - the extra is part of `make` set-up
            from ..errors import RecipeError
            raise RecipeError("--engine dask needs the 'dask' extra; install with pip install 'corpuskit[dask]'.") from None
        import dask

        self.workers = workers or 2
        self._cluster = None
        if scheduler:
            self.client = Client(scheduler)
        else:
            # The workers' statistical profiler samples the running task's stack every 10 ms; on
            # this pure-Python work it cost a third of the run time (20 MB, one worker: stages
            # 45-60% slower than the local engine), so a cluster started here runs without it.
            with dask.config.set({"distributed.worker.profile.enabled": False}):
                self._cluster = LocalCluster(n_workers=self.workers, threads_per_worker=1, processes=True,
                                             dashboard_address=":0", silence_logs=40)
            self.client = Client(self._cluster)

    def __enter__(self) -> "DaskEngine":
        return self

    def __exit__(self, *exc: Any) -> None:
        self.close()

    def close(self) -> None:
        self.client.close()
        if self._cluster is not None:
            self._cluster.close()

    def rest(self, idle: bool = False) -> None:
        """Workers of a cluster stay up between steps; they (and this process) trim their heaps."""
        from .local import trim_memory

        self.client.run(trim_memory)
        trim_memory()

    def start(self, func: Callable, *args: Any):
        """Begin ``func(*args)`` on the cluster; ``.result()`` waits for it."""
        return self.client.submit(func, *args, pure=False)

    def imap(self, func: Callable, args: Sequence[tuple]) -> Iterator[tuple[int, Any]]:
        from distributed import as_completed

        futures = [self.client.submit(func, *a, pure=False) for a in args]
        index = {f.key: i for i, f in enumerate(futures)}
        for fut in as_completed(futures):
            yield index[fut.key], fut.result()

    def frame_map(self, rows, key_column: str, func: Callable, meta: dict):
        """Shuffle rows by ``key_column`` on the cluster (rows with one key meet in one
        partition), apply ``func`` to each partition and gather the results.

        Used by near-duplicate detection: documents sharing a band hash meet on one worker.
        """
        import dask.dataframe as dd

        ddf = dd.from_pandas(rows, npartitions=max(1, self.workers))
        shuffled = ddf.shuffle(on=key_column)
        return shuffled.map_partitions(func, meta=meta).compute(scheduler=self.client)
