"""The recipe reference: every key of every table, generated from the parameter declarations.

``python -m corpuskit.reference > RECIPE.md`` writes it; a test checks that RECIPE.md is in step.
"""
from __future__ import annotations

import dataclasses
import typing

__all__ = ["render"]


def _type(tp) -> str:
    origin = typing.get_origin(tp)
    if origin in (list, tuple):
        (item,) = typing.get_args(tp) or (str,)
        return f"list of {_type(item)}"
    return {str: "string", int: "integer", float: "number", bool: "true/false", dict: "table", list: "list"}.get(
        origin or tp, str(tp))


def _default(f) -> str:
    if f.default is not dataclasses.MISSING:
        value = f.default
    elif f.default_factory is not dataclasses.MISSING:  # type: ignore[misc]
        value = f.default_factory()  # type: ignore[misc]
    else:
        return "(required)"
    if isinstance(value, str):
        return f'`"{value}"`' if value else '`""`'
    if isinstance(value, bool):
        return f"`{str(value).lower()}`"
    if isinstance(value, dict):
        return "`{" + ", ".join(f"{k} = {v}" for k, v in value.items()) + "}`" if value else "`{}`"
    return f"`{value}`"


def _range(meta) -> str:
    low, high, choices = meta.get("low"), meta.get("high"), meta.get("choices")
    if choices:
        return " / ".join(f"`{c}`" for c in choices)
    if low is not None or high is not None:
        return f"{'' if low is None else low} to {'' if high is None else high}"
    return ""


def _table(title: str, cls, note: str = "") -> list[str]:
    hints = typing.get_type_hints(cls)
    lines = [f"## {title}", ""]
    if note:
        lines += [note, ""]
    lines += ["| key | type | default | range | what it does |", "|---|---|---|---|---|"]
    for f in dataclasses.fields(cls):
        if not f.init:
            continue
        help_text = (f.metadata.get("help") or "").replace("|", "\\|")
        lines.append(f"| `{f.name}` | {_type(hints[f.name])} | {_default(f)} | {_range(f.metadata)} | {help_text} |")
    return lines + [""]


def render() -> str:
    from .readers import READERS
    from .recipe import CorpusSpec, SourceSpec
    from .stages.registry import STAGES

    out = ["# Recipe reference", "",
           "Every key a recipe may set, generated from the code (`python -m corpuskit.reference > RECIPE.md`).",
           "Unknown keys are an error with a did-you-mean suggestion; values outside a range are refused by",
           "`corpuskit check` and by every run before its first stage.", ""]
    out += _table("[corpus]", CorpusSpec)
    out += _table("[[sources]]", SourceSpec, "One table per source. Paths are relative to the recipe.")
    for fmt, module in READERS.items():
        out += _table(f'[sources.options] for format = "{fmt}"', module.Options)
    for name, stage in STAGES.items():
        if dataclasses.fields(stage.params):
            out += _table(f"[stages.{name}]", stage.params)
    return "\n".join(out).rstrip() + "\n"


if __name__ == "__main__":
    print(render(), end="")
