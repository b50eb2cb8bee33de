"""Exceptions and warning categories used across fairpath."""

from __future__ import annotations


class FairpathError(Exception):
    """Base class of every error raised on purpose by fairpath."""


class InputError(FairpathError, ValueError):
    """A file, key or argument is wrong.

    The message is one line naming the source (file or argument), the key and the problem,
    e.g. ``market.toml: assets.NORDA.vol: must be positive, got -0.2``.
    """

    def __init__(self, message: str, *, source: str | None = None, key: str | None = None):
        parts = [p for p in (source, key) if p]
        full = ": ".join([*parts, message]) if parts else message
        super().__init__(full)
        self.source = source
        self.key = key
        self.problem = message


class FairpathWarning(UserWarning):
    """A request is legal but weak (the result is still computed)."""


class SamplingWarning(FairpathWarning):
    """A sampler setting weakens the estimate (e.g. a Sobol count that is not a power of two)."""
