"""Engines run the same task functions over partitions: in this process, a process pool, or Dask."""
from .local import LocalEngine

__all__ = ["LocalEngine", "make_engine"]


def make_engine(name: str, workers: int | None = None, scheduler: str | None = None):
    if name == "local":
        return LocalEngine(workers)
    if name == "dask":
        from .dask import DaskEngine
        return DaskEngine(workers, scheduler)
    from ..errors import RecipeError
    raise RecipeError(f"--engine '{name}' is not known; use 'local' or 'dask'.")
