"""The stage contract: what a stage declares, what the runner gives it, what it gives back.

A stage is one :class:`Stage` entry in ``stages/registry.py``.  Its *kind* says how the runner
drives it:

``map``
    ``apply(docs, params, context) -> Applied`` on each partition, on a worker.  ``context``
    is what ``build_context(recipe, params, cache, context_key)`` made once per run (a trained
    model, a loaded table), or, for a stage with a :class:`Survey`, what
    ``survey.context(context, survey)`` makes of it and the source's survey.
``global``
    ``decide(services, in_stage, parts, params) -> Decisions`` sees every partition first (on
    the workers, through ``services``); then ``apply(docs, params, decision)`` runs per
    partition with that partition's decision.
``ingest`` / ``export``
    The first and last stage, planned by the runner itself (files in, output folder out).

Every kind conserves units: each document and segment that goes in comes out, or leaves with
a ledger row (removed, or merged into a neighbour).  The runner checks it per partition.

A partition's cache key (:func:`partition_key`) holds the stage's name, the hash of its code and
of every corpuskit module it imports (see codeversion), its parameters, its context key, the
source's survey key, the decision and the input partition's key; the runner and ``status`` both
use it, so a change to any of them recomputes exactly what it affects.
"""
from __future__ import annotations

import dataclasses
from collections import Counter
from dataclasses import dataclass, field
from enum import Enum
from typing import Any, Callable, Iterable, Iterator, NamedTuple

from ..ledger import LedgerRow
from ..storage import stable_hash

__all__ = ["Kind", "Stage", "Survey", "Applied", "Figures", "Decisions", "Services", "Partition",
           "partition_key", "survey_key", "stage_version", "module_version", "no_context", "no_context_key"]


class Kind(str, Enum):
    INGEST = "ingest"
    MAP = "map"
    GLOBAL = "global"
    EXPORT = "export"


@dataclass(frozen=True)
class Partition:
    source: str
    key: str


class Figures:
    """Counters a map stage adds up over its partitions for the reports (rewrites per rule,
    round-trip outcomes, ...): a dataclass whose fields are all Counters.  Keys are strings or
    tuples of strings; the runner stores them in the partition's marker and merges them."""

    def merge(self, other: "Figures") -> "Figures":
        return type(self)(**{f.name: getattr(self, f.name) + getattr(other, f.name) for f in dataclasses.fields(self)})

    def as_dict(self) -> dict[str, list]:
        return {f.name: [[list(k) if isinstance(k, tuple) else k, n] for k, n in sorted(getattr(self, f.name).items())]
                for f in dataclasses.fields(self)}

    @classmethod
    def from_dict(cls, data: dict[str, list]) -> "Figures":
        return cls(**{f.name: Counter({tuple(k) if isinstance(k, list) else k: n for k, n in data.get(f.name, [])})
                      for f in dataclasses.fields(cls)})


class Applied(NamedTuple):
    """What a map or global stage's ``apply`` returns for one partition."""
    docs: list[dict]
    rows: list[LedgerRow]
    figures: Figures | None = None


@dataclass(frozen=True)
class Survey:
    """A per-source look at every partition before a map stage runs (e.g. lines repeated at page
    edges): ``partition(docs, params)`` on each partition, ``merge(parts, params)`` per source, and
    ``context(stage_context, survey)`` the context ``apply`` gets for a partition of that source."""
    partition: Callable[[list[dict], Any], Any]
    merge: Callable[[list[Any], Any], Any]
    context: Callable[[Any, Any], Any]


@dataclass(frozen=True)
class Decisions:
    """What a global stage decided: one JSON-able decision per input partition key, and its
    report (written to the cache as ``<stage>/report.json``)."""
    per_partition: dict[str, Any]
    report: dict[str, Any] = field(default_factory=dict)


@dataclass
class Services:
    """What global stages and export may use of the run: no more."""
    recipe: Any
    out: Any
    cache: Any
    engine: Any
    progress: Callable
    warnings: list[str] = field(default_factory=list)
    last_keys: dict[str, list[str]] = field(default_factory=dict)      # stage -> its partition keys, in order
    context_keys: dict[str, str] = field(default_factory=dict)         # map stage -> its context key this run

    def map(self, task: Callable, args: list[tuple]) -> Iterator[tuple[int, Any]]:
        """``task(*a)`` for each ``a`` on the workers, as (index, result) in completion order."""
        return self.engine.imap(task, args) if args else iter(())

    def start(self, task: Callable, *args: Any):
        """Begin ``task(*args)`` on a worker while this process goes on; ``.result()`` waits for
        it (with one worker it runs in this process when its result is asked for)."""
        return self.engine.start(task, *args)

    def rest(self, idle: bool = False) -> None:
        """Let the engine free memory before work in this process (``idle``: workers sleep)."""
        if hasattr(self.engine, "rest"):
            self.engine.rest(idle=idle)

    def warn(self, message: str) -> None:
        self.warnings.append(message)


def no_context_key(recipe, params) -> str:
    return ""


def no_context(recipe, params, cache, key) -> Any:
    return None


@dataclass(frozen=True)
class Stage:
    """One stage of the pipeline.  ``params`` is its recipe table's dataclass (``[stages.<name>]``)."""
    name: str
    kind: Kind
    params: type
    apply: Callable[[list[dict], Any, Any], Applied] | None = None
    context_key: Callable[[Any, Any], str] = no_context_key
    build_context: Callable[[Any, Any, Any, str], Any] = no_context
    survey: Survey | None = None
    decide: Callable[[Services, str, list[Partition], Any], Decisions] | None = None
    figures: type[Figures] | None = None
    idempotent: bool = False          # applying it to its own output changes nothing

    def __post_init__(self) -> None:
        kind = Kind(self.kind)
        needs = {Kind.MAP: ("apply",), Kind.GLOBAL: ("apply", "decide"), Kind.INGEST: (), Kind.EXPORT: ()}[kind]
        missing = [n for n in needs if getattr(self, n) is None]
        if missing:
            raise TypeError(f"stage '{self.name}' ({kind.value}) needs {', '.join(missing)}")
        if self.survey is not None and kind is not Kind.MAP:
            raise TypeError(f"stage '{self.name}': only map stages have surveys")
        if not dataclasses.is_dataclass(self.params):
            raise TypeError(f"stage '{self.name}': params must be a dataclass")

    @property
    def module(self) -> str:
        """The module that holds the stage's code."""
        return (self.apply or self.decide or self.params).__module__


def stage_version(module_name: str, version: str = "1") -> str:
    """What a cache key knows of code: a hand-kept version and the hash of the module and every
    corpuskit module it imports (see codeversion), so editing a helper cannot leave results stale."""
    from ..codeversion import code_version
    return f"{version}:{code_version(module_name)}"


def module_version(module) -> str:
    """``stage_version`` of a module object (its ``VERSION``, if it keeps one, and its code)."""
    return stage_version(module.__name__, getattr(module, "VERSION", "1"))


def _version(stage: Stage) -> str:
    import importlib
    return module_version(importlib.import_module(stage.module))


def survey_key(stage: Stage, params: Any, context_key: str, in_keys: Iterable[str]) -> str:
    """The key of one source's survey: over all of the source's input partitions."""
    return stable_hash(stage.name, _version(stage), params, context_key, list(in_keys))


def partition_key(stage: Stage, params: Any, in_key: str, context_key: str = "", survey: str = "",
                  decision: Any = None) -> str:
    """The cache key of a stage's output for one input partition."""
    return stable_hash(stage.name, _version(stage), params, context_key, survey, in_key, decision)
