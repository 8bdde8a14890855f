"""Errors a user can fix.  Each carries one sentence naming the place and the fix."""
from __future__ import annotations


class CorpusError(Exception):
    """Base class; ``exit_code`` follows the command-line contract."""

    exit_code = 1


class RecipeError(CorpusError):
    """A mistake in the recipe or in how the command was called (exit code 2)."""

    exit_code = 2


class DataError(CorpusError):
    """A run that failed on the data itself (exit code 1)."""

    exit_code = 1


class LockedError(CorpusError):
    """Another run holds the output folder."""

    exit_code = 2
