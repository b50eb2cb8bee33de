"""Reading TOML tables with one-line errors that name the file, the key and the problem."""

from __future__ import annotations

import difflib
import math
import tomllib
from collections.abc import Iterable
from datetime import date
from pathlib import Path
from typing import Any

from fairpath.dates import as_date
from fairpath.errors import InputError

_MISSING = object()


def read_toml(path: str | Path) -> dict[str, Any]:
    """Load a TOML file; a missing file or a syntax error becomes an :class:`InputError`."""
    p = Path(path)
    try:
        text = p.read_bytes().decode("utf-8")
    except FileNotFoundError:
        raise InputError("file not found", source=str(path)) from None
    except IsADirectoryError:
        raise InputError("is a directory, not a TOML file", source=str(path)) from None
    except UnicodeDecodeError as exc:
        raise InputError(f"not UTF-8 text ({exc.reason} at byte {exc.start})",
                         source=str(path)) from None
    except OSError as exc:
        raise InputError(f"cannot read: {exc.strerror}", source=str(path)) from None
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML: {exc}", source=str(path)) from None


class Table:
    """A view of one TOML table that knows its file and key path.

    Every accessor records the keys it reads; :meth:`finish` rejects the keys nobody read,
    with the list of known ones and a did-you-mean.
    """

    def __init__(self, data: dict[str, Any], source: str | None, prefix: str = ""):
        if not isinstance(data, dict):
            raise InputError(f"expected a table, got {type(data).__name__}", source=source,
                             key=prefix or None)
        self.data = data
        self.source = source
        self.prefix = prefix
        self._known: set[str] = set()

    # -- helpers -------------------------------------------------------------------------
    def key(self, name: str) -> str:
        return f"{self.prefix}.{name}" if self.prefix else name

    def error(self, name: str | None, message: str) -> InputError:
        return InputError(message, source=self.source, key=self.key(name) if name else
                          (self.prefix or None))

    def has(self, name: str) -> bool:
        self._known.add(name)
        return name in self.data

    def raw(self, name: str, default: Any = _MISSING) -> Any:
        self._known.add(name)
        if name in self.data:
            return self.data[name]
        if default is _MISSING:
            raise self.error(name, "missing required key")
        return default

    def table(self, name: str, default: Any = _MISSING) -> Table | None:
        value = self.raw(name, default)
        if value is None:
            return None
        if not isinstance(value, dict):
            raise self.error(name, f"expected a table, got {_kind(value)}")
        return Table(value, self.source, self.key(name))

    def number(self, name: str, default: Any = _MISSING, *, positive: bool = False,
               nonnegative: bool = False, finite: bool = True) -> float:
        value = self.raw(name, default)
        if value is None:
            return None  # type: ignore[return-value]
        return self.check_number(name, value, positive=positive, nonnegative=nonnegative,
                                 finite=finite)

    def check_number(self, name: str, value: Any, *, positive: bool = False,
                     nonnegative: bool = False, finite: bool = True) -> float:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.error(name, f"expected a number, got {_kind(value)} {value!r}")
        value = float(value)
        if finite and not math.isfinite(value):
            raise self.error(name, f"must be a finite number, got {value}")
        if positive and not value > 0:
            raise self.error(name, f"must be positive, got {value:g}")
        if nonnegative and not value >= 0:
            raise self.error(name, f"must not be negative, got {value:g}")
        return value

    def integer(self, name: str, default: Any = _MISSING, *, minimum: int | None = None) -> int:
        value = self.raw(name, default)
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.error(name, f"expected an integer, got {_kind(value)} {value!r}")
        if minimum is not None and value < minimum:
            raise self.error(name, f"must be at least {minimum}, got {value}")
        return value

    def string(self, name: str, default: Any = _MISSING, *,
               choices: Iterable[str] | None = None) -> str:
        value = self.raw(name, default)
        if value is None:
            return None  # type: ignore[return-value]
        if not isinstance(value, str):
            raise self.error(name, f"expected a string, got {_kind(value)} {value!r}")
        if choices is not None:
            choices = list(choices)
            if value not in choices:
                raise self.error(name, f"unknown value {value!r}; expected one of "
                                 f"{', '.join(choices)}{did_you_mean(value, choices)}")
        return value

    def boolean(self, name: str, default: Any = _MISSING) -> bool:
        value = self.raw(name, default)
        if not isinstance(value, bool):
            raise self.error(name, f"expected true or false, got {value!r}")
        return value

    def date(self, name: str, default: Any = _MISSING) -> date:
        value = self.raw(name, default)
        if value is None:
            return None  # type: ignore[return-value]
        return as_date(value, source=self.source, key=self.key(name))

    def list(self, name: str, default: Any = _MISSING, *, nonempty: bool = True) -> list:
        value = self.raw(name, default)
        if value is None:
            return None  # type: ignore[return-value]
        if not isinstance(value, list):
            raise self.error(name, f"expected a list, got {_kind(value)}")
        if nonempty and not value:
            raise self.error(name, "must not be empty")
        return value

    def finish(self) -> None:
        """Reject keys that were never read."""
        unknown = [k for k in self.data if k not in self._known]
        if unknown:
            k = unknown[0]
            known = sorted(self._known)
            raise self.error(k, f"unknown key{did_you_mean(k, known)}; known keys here: "
                             f"{', '.join(known)}")


def did_you_mean(word: str, choices: Iterable[str]) -> str:
    close = difflib.get_close_matches(str(word), list(choices), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


def _kind(value: Any) -> str:
    return {dict: "a table", list: "a list", str: "a string", bool: "a boolean",
            int: "an integer", float: "a number"}.get(type(value), type(value).__name__)
