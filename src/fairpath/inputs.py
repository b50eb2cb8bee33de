"""Reading TOML tables with one-line errors that name the file, the key and the problem."""

from __future__ import annotations

import csv
import difflib
import io
import math
import tomllib
from collections.abc import Iterable
from datetime import date, datetime, time
from pathlib import Path
from typing import Any

from fairpath.errors import InputError

_MISSING = object()
#: Longest rendering of a value inside an error message (the rest is cut to "...").
SHOW_LIMIT = 60
#: Largest size of an amount (quantity, notional, payout, rebate) or a price level (spot,
#: strike, fixing) in a file: beyond it products of two of them approach float overflow.
MAX_AMOUNT = 1e15
#: Largest vol a file may give, flat or a surface quote (500%): a larger one is a percentage
#: typed as a number.
MAX_VOL = 5.0


def read_toml(path: str | Path) -> dict[str, Any]:
    """Load a TOML file; a missing file or a syntax error becomes an :class:`InputError`."""
    p = Path(path)
    try:
        text = p.read_bytes().decode("utf-8-sig")  # a byte-order mark (Windows editors) is fine
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
    except tomllib.TOMLDecodeError as exc:  # the message ends "(at line L, column C)"
        raise InputError(f"not valid TOML: {one_line(str(exc))}", source=str(path)) from None
    except RecursionError:
        raise InputError("not valid TOML: arrays or tables nested too deeply",
                         source=str(path)) from None
    except ValueError:  # tomllib's int() of more digits than Python converts (4300)
        raise InputError("not valid TOML: an integer has too many digits to read",
                         source=str(path)) from None


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
        name = key_label(name)
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
            # a misspelt key is better reported as what it is than as a missing one
            unread = [k for k in self.data if k not in self._known and isinstance(k, str)]
            close = difflib.get_close_matches(name, unread, n=1, cutoff=0.6)
            hint = f" (found {show(close[0])}: a typo?)" if close else ""
            raise self.error(name, f"missing required key{hint}")
        return default

    def table(self, name: str, default: Any = _MISSING) -> Table | None:
        value = self.raw(name, default)
        if value is None:
            return None
        if not isinstance(value, dict):
            raise self.error(name, f"expected a table, got {_kind(value)}")
        return Table(value, self.source, self.key(name))

    def number(self, name: str, default: Any = _MISSING, *, positive: bool = False,
               nonnegative: bool = False, finite: bool = True,
               limit: float | None = None) -> float:
        value = self.raw(name, default)
        if value is None:
            return None  # type: ignore[return-value]
        return self.check_number(name, value, positive=positive, nonnegative=nonnegative,
                                 finite=finite, limit=limit)

    def check_number(self, name: str, value: Any, *, positive: bool = False,
                     nonnegative: bool = False, finite: bool = True,
                     limit: float | None = None) -> float:
        """``value`` as a float; ``limit`` bounds its size (amounts and price levels)."""
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.error(name, f"expected a number, got {_kind(value)} {show(value)}")
        try:
            value = float(value)
        except OverflowError:  # a TOML integer beyond the range of a float
            raise self.error(name, f"must be a finite number, got {show(value)}") from None
        if finite and not math.isfinite(value):
            raise self.error(name, f"must be a finite number, got {value}")
        if positive and not value > 0:
            raise self.error(name, f"must be positive, got {value:g}")
        if nonnegative and not value >= 0:
            raise self.error(name, f"must not be negative, got {value:g}")
        if limit is not None and abs(value) > limit:
            raise self.error(name, f"{value:g} is beyond {limit:g} in size, larger than any "
                             "amount or level this tool prices")
        return value

    def check_vol(self, name: str, value: Any, *, positive: bool = False, hint: str = ""
                  ) -> float:
        """A Black vol: finite, not negative (``positive``: above zero), at most ``MAX_VOL``
        (else a percentage typed as a number; ``hint`` is added to that message)."""
        v = self.check_number(name, value, positive=positive, nonnegative=True)
        if v > MAX_VOL:
            raise self.error(name, f"{v:g} is a vol of {v:.0%}; a percentage? write "
                             f"{v / 100:g} for {v:g}%{hint}")
        return v

    def integer(self, name: str, default: Any = _MISSING, *, minimum: int | None = None) -> int:
        value = self.raw(name, default)
        if isinstance(value, bool) or not isinstance(value, int):
            raise self.error(name, f"expected an integer, got {_kind(value)} {show(value)}")
        if minimum is not None and value < minimum:
            raise self.error(name, f"must be at least {minimum}, got {show(value)}")
        return value

    def string(self, name: str, default: Any = _MISSING, *,
               choices: Iterable[str] | None = None) -> str:
        value = self.raw(name, default)
        if value is None:
            return None  # type: ignore[return-value]
        if not isinstance(value, str):
            raise self.error(name, f"expected a string, got {_kind(value)} {show(value)}")
        if choices is not None:
            choices = list(choices)
            if value not in choices:
                raise self.error(name, f"unknown value {show(value)}; expected one of "
                                 f"{', '.join(choices)}{did_you_mean(value, choices)}")
        return value

    def boolean(self, name: str, default: Any = _MISSING) -> bool:
        value = self.raw(name, default)
        if not isinstance(value, bool):
            raise self.error(name, f"expected true or false, got {_kind(value)} {show(value)}")
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


def as_date(value: object, *, source: str | None = None, key: str | None = None) -> date:
    """Accept a TOML date (``datetime.date``) or an ISO string ``YYYY-MM-DD``."""
    if isinstance(value, date) and not hasattr(value, "hour"):
        return value
    if isinstance(value, str):
        try:
            return date.fromisoformat(value.strip())
        except ValueError:
            pass
    raise InputError(f"expected a date like 2027-12-01, got {show(value)}", source=source,
                     key=key)


def did_you_mean(word: str, choices: Iterable[str]) -> str:
    close = difflib.get_close_matches(str(word), list(choices), n=1, cutoff=0.6)
    return f" (did you mean {close[0]!r}?)" if close else ""


def one_line(text: str) -> str:
    """``text`` with every line break (``str.splitlines`` sense) turned into a space."""
    return " ".join(text.splitlines())


def key_label(name: object) -> str:
    """A key as it appears in messages: as written when it is printable without blanks, quoted
    (``'X Y'``) otherwise, so a key holding a line break cannot garble the message."""
    name = str(name)
    if name and name.isprintable() and not any(c.isspace() or c in "'\"" for c in name):
        return name
    return show(name)


def show(value: Any, limit: int = SHOW_LIMIT) -> str:
    """A value for an error message: its ``repr`` on one line, cut to ``limit`` characters;
    an integer too long to print in full is described by its number of digits."""
    if isinstance(value, int) and not isinstance(value, bool) and value.bit_length() > 100:
        digits = int(value.bit_length() * math.log10(2)) + 1
        return f"{'-' if value < 0 else ''}an integer of about {digits} digits"
    try:
        text = one_line(repr(value))
    except (ValueError, RecursionError):  # pragma: no cover - a huge int deep in a table
        text = f"<{type(value).__name__}>"
    return text if len(text) <= limit else text[: limit - 3] + "..."


def _kind(value: Any) -> str:
    return {dict: "a table", list: "a list", str: "a string", bool: "a boolean",
            int: "an integer", float: "a number", date: "a date", datetime: "a date-time",
            time: "a time"}.get(type(value), type(value).__name__)


def read_csv_table(path: str | Path, required: tuple[str, ...], optional: tuple[str, ...] = ()
                   ) -> list[tuple[int, dict[str, str]]]:
    """``(line, row)`` for every record of a CSV with a header row, cells stripped.

    A byte-order mark is accepted and header names are stripped; a missing required column,
    an unknown column (with a did-you-mean), a record with more cells than the header, or
    malformed CSV (an unclosed quote...) is refused with the file and the line.
    """
    p = Path(path)
    try:
        text = p.read_text(encoding="utf-8-sig")
    except FileNotFoundError:
        raise InputError("file not found", source=str(path)) from None
    except IsADirectoryError:
        raise InputError("is a directory, not a CSV file", source=str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise InputError(f"cannot read: {exc}", source=str(path)) from None
    if "\x00" in text:
        raise InputError("contains a NUL byte: not a text CSV file", source=str(path))
    reader = csv.reader(io.StringIO(text), strict=True)
    try:
        header = next(reader, None)
        if header is None:
            raise InputError("is empty: expected a header row with columns "
                             f"{', '.join(required)}", source=str(path))
        cols = [h.strip() for h in header]
        missing = [c for c in required if c not in cols]
        if missing:
            raise InputError(f"missing column(s) {', '.join(missing)}; the file has "
                             f"{', '.join(c or '(blank)' for c in cols) or 'no header'}",
                             source=str(path))
        known = required + optional
        for c in cols:
            if c not in known:
                raise InputError(f"unknown column {c!r}{did_you_mean(c, known)}; known: "
                                 f"{', '.join(known)}", source=str(path))
        rows = []
        for cells in reader:
            line = reader.line_num
            if not any(x.strip() for x in cells):
                continue
            if len(cells) > len(cols):
                raise InputError(f"{len(cells)} cells for {len(cols)} columns",
                                 source=f"{path} line {line}")
            cells = cells + [""] * (len(cols) - len(cells))
            rows.append((line, {c: x.strip() for c, x in zip(cols, cells, strict=True)}))
    except csv.Error as exc:
        raise InputError(f"line {reader.line_num}: not valid CSV: {exc}",
                         source=str(path)) from None
    return rows
