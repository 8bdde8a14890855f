"""The version of a stage's code, for cache keys: a hash of its module's source and of every
corpuskit module it imports, directly or through others.  Editing a helper a stage uses makes the
stage's cached results stale; editing an unrelated module does not."""
from __future__ import annotations

import ast
import hashlib
import importlib.util
from functools import lru_cache
from pathlib import Path

__all__ = ["code_version", "imported_modules"]

PACKAGE = "corpuskit"


def _resolve(module_name: str, package: str, node: ast.ImportFrom) -> list[str]:
    if node.level:
        base = package.split(".")
        base = base[:len(base) - node.level + 1]
        target = ".".join(base + ([node.module] if node.module else []))
    else:
        target = node.module or ""
    if not target.startswith(PACKAGE):
        return []
    found = [target]
    spec = importlib.util.find_spec(target)
    if spec is not None and spec.submodule_search_locations:   # `from . import transliterate` names a module
        for alias in node.names:
            candidate = f"{target}.{alias.name}"
            if importlib.util.find_spec(candidate) is not None:
                found.append(candidate)
    return found


@lru_cache(maxsize=None)
def imported_modules(module_name: str) -> frozenset[str]:
    """corpuskit modules ``module_name`` imports, transitively (itself included)."""
    seen: set[str] = set()
    todo = [module_name]
    while todo:
        name = todo.pop()
        if name in seen or _source(name) is None:
            continue
        seen.add(name)
        todo += _direct_imports(name)
    return frozenset(seen)


@lru_cache(maxsize=None)
def _source(name: str) -> str | None:
    spec = importlib.util.find_spec(name)
    return spec.origin if spec is not None and spec.origin and spec.origin.endswith(".py") else None


@lru_cache(maxsize=None)
def _direct_imports(name: str) -> tuple[str, ...]:
    """The corpuskit modules one module's source names in its imports (parsed once per process)."""
    spec = importlib.util.find_spec(name)
    package = name if spec.submodule_search_locations else name.rpartition(".")[0]
    found: list[str] = []
    for node in _run_time_nodes(ast.parse(Path(spec.origin).read_text("utf-8"))):
        if isinstance(node, ast.ImportFrom):
            found += _resolve(name, package, node)
        elif isinstance(node, ast.Import):
            found += [a.name for a in node.names if a.name.startswith(PACKAGE)]
    return tuple(found)


def _run_time_nodes(tree: ast.Module):
    """Every node of a module but those under ``if TYPE_CHECKING:`` (imports for type checkers,
    which never run) and in a module-level ``__getattr__`` (PEP 562: what a package loads when an
    attribute it lacks is asked for, such as corpuskit's public API; ``from corpuskit import
    transliterate`` loads the submodule, not that)."""
    todo = [n for n in tree.body if not (isinstance(n, ast.FunctionDef) and n.name == "__getattr__")]
    while todo:
        node = todo.pop()
        yield node
        if isinstance(node, ast.If) and _names_type_checking(node.test):
            todo += node.orelse
        else:
            todo += ast.iter_child_nodes(node)


def _names_type_checking(test: ast.expr) -> bool:
    return (isinstance(test, ast.Name) and test.id == "TYPE_CHECKING") or \
        (isinstance(test, ast.Attribute) and test.attr == "TYPE_CHECKING")


@lru_cache(maxsize=None)
def code_version(module_name: str) -> str:
    """SHA-256 (16 hex digits) over the sources of ``module_name`` and the corpuskit modules it uses."""
    h = hashlib.sha256()
    for name in sorted(imported_modules(module_name)):
        h.update(name.encode())
        h.update(Path(_source(name)).read_bytes())
    return h.hexdigest()[:16]
