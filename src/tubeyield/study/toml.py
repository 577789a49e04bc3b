"""TOML tables with key paths: every key a table may hold is listed where the table is read, anything else is an
error with a did-you-mean hint, so a misspelt key never silently falls back to a default."""

from __future__ import annotations

import difflib
import math
import tomllib
from pathlib import Path

from tubeyield.errors import StudyError


class Table:
    """A TOML table with its key path; `take` reads a key, `close` rejects any key not read."""

    def __init__(self, data, path: str):
        if not isinstance(data, dict):
            raise StudyError(path, f"a table (key = value pairs), got {type(data).__name__} {data!r}")
        self.data = data
        self.path = path
        self.seen: set[str] = set()

    def key(self, name: str) -> str:
        return f"{self.path}.{name}" if self.path else name

    def has(self, name: str) -> bool:
        return name in self.data

    def take(self, name: str, default=..., *, types=None, what: str | None = None):
        self.seen.add(name)
        if name not in self.data:
            if default is ...:
                raise StudyError(self.key(name), f"{what or 'a value'}; the key is missing")
            return default
        value = self.data[name]
        if types is not None and (not isinstance(value, types) or isinstance(value, bool) and bool not in as_tuple(types)):
            raise StudyError(self.key(name), f"{what or type_names(types)}, got {value!r}")
        return value

    def table(self, name: str, default=..., *, what: str | None = None) -> "Table | None":
        value = self.take(name, default, what=what or f"a [{self.key(name)}] table")
        if value is None:
            return None
        return Table(value, self.key(name))

    def close(self, allowed: tuple[str, ...] | None = None) -> None:
        known = tuple(allowed) if allowed is not None else tuple(self.seen)
        for k in self.data:
            if k not in self.seen and k not in known:
                hint = difflib.get_close_matches(k, known, n=1, cutoff=0.6)
                extra = f"; did you mean '{hint[0]}'?" if hint else (f"; known keys: {', '.join(sorted(known))}" if known else "")
                raise StudyError(self.key(k), f"no such key here{extra}")


def as_tuple(t):
    return t if isinstance(t, tuple) else (t,)


def type_names(types) -> str:
    names = {str: "a string", int: "an integer", float: "a number", bool: "true or false", list: "a list", dict: "a table"}
    return " or ".join(names.get(t, t.__name__) for t in as_tuple(types))


def number(value, key: str, *, low: float | None = None, integer: bool = False) -> float:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise StudyError(key, f"{'an integer' if integer else 'a number'}, got {value!r}")
    if integer and not float(value).is_integer():
        raise StudyError(key, f"an integer, got {value!r}")
    if not math.isfinite(value):
        raise StudyError(key, f"a finite number, got {value!r}")
    if low is not None and value < low:
        raise StudyError(key, f"a number >= {low:g}, got {value!r}")
    return float(value)


def read_text(path: Path, what: str = "study file") -> str:
    """A UTF-8 text file of at most caps.MAX_FILE_BYTES; a StudyError naming the file otherwise."""
    from tubeyield.study.caps import MAX_FILE_BYTES
    try:
        if path.is_file() and path.stat().st_size > MAX_FILE_BYTES:
            raise StudyError("", f"a {what} of at most {MAX_FILE_BYTES:,} bytes, this one has "
                                 f"{path.stat().st_size:,}", file=str(path))
        return path.read_text(encoding="utf-8")
    except FileNotFoundError:
        raise StudyError("", f"an existing {what}; no such file", file=str(path)) from None
    except IsADirectoryError:
        raise StudyError("", f"a {what}, not a directory", file=str(path)) from None
    except (OSError, UnicodeDecodeError) as exc:
        raise StudyError("", f"a readable UTF-8 text file ({exc.__class__.__name__}: {exc})", file=str(path)) from None


def parse_toml(text: str) -> dict:
    """TOML text -> dict. Nesting deep enough to exhaust the parser's recursion is a StudyError, not a crash."""
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise StudyError("", f"valid TOML ({exc})") from None
    except RecursionError:
        raise StudyError("", "valid TOML nested at most a few hundred levels deep (this text nests arrays or "
                             "tables deeper than the parser can follow)") from None
