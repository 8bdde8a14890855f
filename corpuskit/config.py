"""Typed, frozen parameter objects: declaration, checking and building from TOML tables.

A leaf module: it imports nothing of the package but the error types, so readers, stages and the
recipe loader all declare their parameters with ``param`` without importing one another.
Every parameter object inherits ``Checked``: its ranges and choices are checked however it is
built, from a recipe (``build``, with file and key in the message) or from Python.
"""
from __future__ import annotations

import dataclasses
import difflib
import types
import typing
from dataclasses import field
from pathlib import Path
from typing import Any

from .errors import RecipeError

__all__ = ["param", "Checked", "build", "suggest", "check_value"]


def param(default: Any = dataclasses.MISSING, *, help: str = "", low: float | None = None,
          high: float | None = None, choices: tuple[str, ...] | None = None, **kw: Any) -> Any:
    """A dataclass field with the metadata the validator reads."""
    meta = {"help": help, "low": low, "high": high, "choices": choices}
    if isinstance(default, (list, dict)):
        value = default
        return field(default_factory=lambda: type(value)(value), metadata=meta, **kw)
    return field(default=default, metadata=meta, **kw)


class Checked:
    """Mixin for frozen parameter dataclasses: ranges and choices checked at construction."""

    def __post_init__(self) -> None:
        for f in dataclasses.fields(self):
            value = getattr(self, f.name)
            low, high, choices = f.metadata.get("low"), f.metadata.get("high"), f.metadata.get("choices")
            if isinstance(value, (int, float)) and not isinstance(value, bool):
                if low is not None and value < low or high is not None and value > high:
                    raise ValueError(f"key '{f.name}' = {value!r} is out of range; use a value between {low} and {high}")
            if choices and value not in choices:
                raise ValueError(f"key '{f.name}' = {value!r} is not allowed; use one of: {', '.join(choices)}")


def suggest(key: str, known: typing.Iterable[str]) -> str:
    close = difflib.get_close_matches(key, list(known), n=1, cutoff=0.6)
    return f"; did you mean '{close[0]}'?" if close else f"; known keys: {', '.join(sorted(known))}."


def _type_name(tp: Any) -> str:
    return {str: "a string", int: "an integer", float: "a number", bool: "true or false",
            list: "a list", dict: "a table"}.get(tp, str(tp))


def check_value(value: Any, tp: Any, meta: dict, where: str) -> Any:
    origin = typing.get_origin(tp)
    if origin in (typing.Union, types.UnionType):
        args = [a for a in typing.get_args(tp) if a is not type(None)]
        tp, origin = args[0], typing.get_origin(args[0])
    base = origin or tp
    if base is float and isinstance(value, int) and not isinstance(value, bool):
        value = float(value)
    ok = isinstance(value, base) and not (base in (int, float) and isinstance(value, bool))
    if not ok:
        raise RecipeError(f"{where} must be {_type_name(base)}, got {value!r}; {meta.get('help') or 'fix the value'}.")
    if base is list:
        (item_tp,) = typing.get_args(tp) or (Any,)
        if item_tp in (str, int, float) and not all(isinstance(v, item_tp) for v in value):
            raise RecipeError(f"{where} must be a list of {_type_name(item_tp)}s, got {value!r}.")
        value = tuple(value)
    low, high, choices = meta.get("low"), meta.get("high"), meta.get("choices")
    if low is not None and value < low or high is not None and value > high:
        raise RecipeError(f"{where} = {value!r} is out of range; use a value between {low} and {high}.")
    if choices and value not in choices:
        raise RecipeError(f"{where} = {value!r} is not allowed{suggest(str(value), choices)[:-1] if difflib.get_close_matches(str(value), choices, n=1) else ''}; "
                          f"use one of: {', '.join(choices)}.")
    return value


def build(cls: type, table: Any, where: str, file: Path | str) -> Any:
    """Build the frozen dataclass ``cls`` from a TOML table, with clear errors."""
    if not isinstance(table, dict):
        raise RecipeError(f"{file}: {where} must be a table, got {table!r}.")
    fields = {f.name: f for f in dataclasses.fields(cls) if f.init}
    hints = typing.get_type_hints(cls)
    for key in table:
        if key not in fields:
            raise RecipeError(f"{file}: {where} has unknown key '{key}'{suggest(key, fields)}")
    values = {}
    for name, f in fields.items():
        if name in table:
            values[name] = check_value(table[name], hints[name], dict(f.metadata), f"{file}: {where} key '{name}'")
        elif f.default is dataclasses.MISSING and f.default_factory is dataclasses.MISSING:  # type: ignore[misc]
            raise RecipeError(f"{file}: {where} is missing key '{name}'; add {name} = ... ({f.metadata.get('help', '')}).")
    try:
        return cls(**values)
    except ValueError as exc:
        raise RecipeError(f"{file}: {where}: {exc}") from None


