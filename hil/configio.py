"""Reading TOML configuration files with every problem reported at once.

A :class:`Reader` walks one TOML table. Each accessor checks presence, type and range, records a
:class:`Problem` (error or warning) instead of raising, and returns a usable placeholder so the
walk goes on and *all* problems in a file are found in one pass. :meth:`Reader.done` flags keys
nobody asked for (a mistyped gain must never be silently ignored). At the end,
:meth:`Problems.raise_if_errors` raises one :class:`ConfigError` carrying every line.

Messages read ``FILE: key.path = value unit: what is wrong (allowed range)``.

Values are range-checked in the file's own units (what the engineer typed) and then converted to
SI by the caller-supplied ``si`` function, e.g. ``math.radians`` for ``_deg`` keys.
"""

from __future__ import annotations

import math
import tomllib
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, Callable, Iterable

__all__ = ["ConfigError", "Problem", "Problems", "Reader", "read_toml", "REQUIRED", "NO_VALUE"]


class _Required:
    def __repr__(self) -> str:  # pragma: no cover - debugging aid
        return "REQUIRED"


REQUIRED: Any = _Required()
"""Sentinel default: the key must be present."""


@dataclass(frozen=True)
class Problem:
    """One problem in a configuration file."""

    file: str
    key: str
    value: Any
    unit: str
    message: str
    severity: str = "error"  # "error" or "warning"

    def __str__(self) -> str:
        where = f"{self.file}: {self.key}" if self.key else f"{self.file}"
        if self.value is _MISSING:
            lhs = where
        else:
            unit = f" {self.unit}" if self.unit else ""
            lhs = f"{where} = {_show(self.value)}{unit}"
        prefix = "warning: " if self.severity == "warning" else ""
        return f"{prefix}{lhs}: {self.message}"


class _Missing:
    def __repr__(self) -> str:  # pragma: no cover - debugging aid
        return "<missing>"


_MISSING: Any = _Missing()
NO_VALUE: Any = _MISSING
"""Use as ``Problem.value`` when a problem concerns a whole file or table, not one value."""


def _show(value: Any) -> str:
    if isinstance(value, bool):  # as written in TOML
        return "true" if value else "false"
    if isinstance(value, str):
        return repr(value)
    if isinstance(value, float):
        return repr(value)
    if isinstance(value, dict):
        return "{table}"
    text = repr(value)
    return text if len(text) <= 60 else text[:57] + "..."


class ConfigError(Exception):
    """A configuration file (or several) could not be accepted.

    ``problems`` holds every error and warning found; ``str()`` gives one line per error.
    """

    def __init__(self, problems: Iterable[Problem]):
        self.problems = list(problems)
        errors = [p for p in self.problems if p.severity == "error"]
        super().__init__("\n".join(str(p) for p in errors) or "configuration error")

    @property
    def errors(self) -> list[Problem]:
        return [p for p in self.problems if p.severity == "error"]


@dataclass
class Problems:
    """Collector shared by all readers of one load (possibly several files)."""

    items: list[Problem] = field(default_factory=list)

    def add(self, problem: Problem) -> None:
        if problem not in self.items:  # a shared key read for two fins is reported once
            self.items.append(problem)

    @property
    def errors(self) -> list[Problem]:
        return [p for p in self.items if p.severity == "error"]

    @property
    def warnings(self) -> list[Problem]:
        return [p for p in self.items if p.severity == "warning"]

    def raise_if_errors(self) -> None:
        if self.errors:
            raise ConfigError(self.items)


def read_toml(path: str | Path, problems: Problems) -> dict | None:
    """Parse a TOML file; on failure record one error and return ``None``."""
    p = Path(path)
    name = str(path)
    try:
        with p.open("rb") as fh:
            return tomllib.load(fh)
    except FileNotFoundError:
        problems.add(Problem(name, "", _MISSING, "", "file not found"))
    except IsADirectoryError:
        problems.add(Problem(name, "", _MISSING, "", "is a directory, expected a TOML file"))
    except PermissionError:
        problems.add(Problem(name, "", _MISSING, "", "permission denied"))
    except tomllib.TOMLDecodeError as exc:
        problems.add(Problem(name, "", _MISSING, "", f"not valid TOML: {exc}"))
    except UnicodeDecodeError as exc:
        problems.add(Problem(name, "", _MISSING, "", f"not UTF-8 text: {exc.reason}"))
    return None


# Converters from the trade units of config keys to SI (pass as ``si=`` to the accessors).
_KNOT = 1852.0 / 3600.0


def deg(x: float) -> float:
    """degrees → rad"""
    return math.radians(x)


def kn(x: float) -> float:
    """knots → m/s"""
    return x * _KNOT


def kilo(x: float) -> float:
    """kN, kN·m, kN·m·s ... → N, N·m, N·m·s ..."""
    return x * 1000.0


def pct(x: float) -> float:
    """percent → fraction"""
    return x / 100.0


def _range_text(lo, hi, lo_open, hi_open, unit) -> str:
    u = f" {unit}" if unit else ""
    if lo is not None and hi is not None:
        left = "(" if lo_open else "["
        right = ")" if hi_open else "]"
        return f"allowed {left}{lo:g}, {hi:g}{right}{u}"
    if lo is not None:
        return f"allowed {'>' if lo_open else '>='} {lo:g}{u}"
    if hi is not None:
        return f"allowed {'<' if hi_open else '<='} {hi:g}{u}"
    return "allowed any finite number"


class Reader:
    """Checked access to one TOML table.

    Parameters
    ----------
    file:
        File name used in messages.
    table:
        The parsed TOML table (dict). ``None`` means the table is missing or unreadable; every
        accessor then returns its placeholder without adding more problems.
    problems:
        The shared collector.
    prefix:
        Key path of this table (``"vessel.damping"``), used in messages.
    """

    def __init__(
        self,
        file: str | Path,
        table: dict | None,
        problems: Problems,
        prefix: str = "",
        key_paths: dict[str, str] | None = None,
    ):
        self.file = str(file)
        self.table = table
        self.problems = problems
        self.prefix = prefix
        self.key_paths = key_paths or {}
        self._used: set[str] = set()

    # -- helpers -------------------------------------------------------------------------------
    def path(self, key: str) -> str:
        base = key.split("[", 1)[0]
        if base in self.key_paths:
            return self.key_paths[base] + key[len(base):]
        return f"{self.prefix}.{key}" if self.prefix else key

    def error(self, key: str, value: Any, unit: str, message: str) -> None:
        """Record an error at ``key`` of this table (cross-field checks use this)."""
        self.problems.add(Problem(self.file, self.path(key), value, unit, message, "error"))

    def warn(self, key: str, value: Any, unit: str, message: str) -> None:
        """Record a warning at ``key`` of this table."""
        self.problems.add(Problem(self.file, self.path(key), value, unit, message, "warning"))

    def known(self, *keys: str) -> None:
        """Mark ``keys`` as belonging to this table without reading them (e.g. an optional key
        whose absence selects a default computed elsewhere, or a key of the other alternative)."""
        self._used.update(keys)

    def has(self, key: str) -> bool:
        return self.table is not None and key in self.table

    def _get(self, key: str, default: Any, unit: str = "") -> tuple[bool, Any]:
        """Return (present, raw value); record a 'missing' error when required and absent."""
        self._used.add(key)
        if self.table is None:
            return False, None
        if key in self.table:
            return True, self.table[key]
        if default is REQUIRED:
            u = f" ({unit})" if unit else ""
            self.problems.add(
                Problem(self.file, self.path(key), _MISSING, unit, f"missing required key{u}")
            )
        return False, None

    # -- scalars -------------------------------------------------------------------------------
    def number(
        self,
        key: str,
        *,
        unit: str = "",
        lo: float | None = None,
        hi: float | None = None,
        lo_open: bool = False,
        hi_open: bool = False,
        default: Any = REQUIRED,
        si: Callable[[float], float] | None = None,
        warn_lo: float | None = None,
        warn_hi: float | None = None,
        warn_why: str = "",
    ) -> float:
        """A finite real number in ``[lo, hi]`` (open ends as flagged), converted by ``si``.

        Returns the default (converted) when absent and optional, ``nan`` when the value is bad.
        """
        present, raw = self._get(key, default, unit)
        if not present:
            if default is REQUIRED or default is None:
                return math.nan if default is REQUIRED else None  # type: ignore[return-value]
            return si(default) if si else float(default)
        if isinstance(raw, bool) or not isinstance(raw, (int, float)):
            self.error(key, raw, unit, f"expected a number ({_range_text(lo, hi, lo_open, hi_open, unit)})")
            return math.nan
        value = float(raw)
        if not math.isfinite(value):
            self.error(key, raw, unit, f"must be finite ({_range_text(lo, hi, lo_open, hi_open, unit)})")
            return math.nan
        bad = (
            (lo is not None and (value < lo or (lo_open and value == lo)))
            or (hi is not None and (value > hi or (hi_open and value == hi)))
        )
        if bad:
            self.error(key, raw, unit, f"out of range ({_range_text(lo, hi, lo_open, hi_open, unit)})")
            return math.nan
        if warn_hi is not None and value > warn_hi:
            why = f": {warn_why}" if warn_why else ""
            self.warn(key, raw, unit, f"unusually high (above {warn_hi:g} {unit}){why}".replace("  ", " "))
        if warn_lo is not None and value < warn_lo:
            why = f": {warn_why}" if warn_why else ""
            self.warn(key, raw, unit, f"unusually low (below {warn_lo:g} {unit}){why}".replace("  ", " "))
        return si(value) if si else value

    def integer(
        self,
        key: str,
        *,
        lo: int | None = None,
        hi: int | None = None,
        default: Any = REQUIRED,
        unit: str = "",
    ) -> int:
        """An integer in ``[lo, hi]``; returns the default when absent, 0 when bad."""
        present, raw = self._get(key, default, unit)
        if not present:
            return 0 if default is REQUIRED else default
        if isinstance(raw, bool) or not isinstance(raw, int):
            self.error(key, raw, unit, f"expected an integer ({_range_text(lo, hi, False, False, unit)})")
            return 0
        if (lo is not None and raw < lo) or (hi is not None and raw > hi):
            self.error(key, raw, unit, f"out of range ({_range_text(lo, hi, False, False, unit)})")
            return 0
        return raw

    def boolean(self, key: str, *, default: Any = REQUIRED) -> bool:
        present, raw = self._get(key, default)
        if not present:
            return False if default is REQUIRED else default
        if not isinstance(raw, bool):
            self.error(key, raw, "", "expected true or false")
            return False
        return raw

    def string(self, key: str, *, choices: Iterable[str] | None = None, default: Any = REQUIRED) -> str:
        present, raw = self._get(key, default)
        if not present:
            return "" if default is REQUIRED else default
        if not isinstance(raw, str):
            self.error(key, raw, "", "expected a string" + (f" (one of {', '.join(choices)})" if choices else ""))
            return ""
        if choices is not None:
            allowed = list(choices)
            if raw not in allowed:
                self.error(key, raw, "", f"not recognised (allowed: {', '.join(allowed)})")
                return ""
        return raw

    def path_value(self, key: str, *, default: Any = REQUIRED, must_exist: bool = True) -> Path | None:
        """A file path, resolved relative to this file's folder."""
        present, raw = self._get(key, default)
        if not present:
            return None if default is REQUIRED else default
        if not isinstance(raw, str) or not raw:
            self.error(key, raw, "", "expected a file path (string)")
            return None
        p = Path(raw)
        if not p.is_absolute():
            p = Path(self.file).parent / p
        if must_exist and not p.is_file():
            self.error(key, raw, "", f"file not found (looked for {p})")
            return None
        return p

    def numbers(
        self,
        key: str,
        *,
        unit: str = "",
        lo: float | None = None,
        hi: float | None = None,
        lo_open: bool = False,
        hi_open: bool = False,
        min_len: int = 1,
        max_len: int | None = None,
        increasing: bool = False,
        default: Any = REQUIRED,
        si: Callable[[float], float] | None = None,
    ) -> tuple[float, ...]:
        """An array of finite numbers, each in range, optionally strictly increasing."""
        present, raw = self._get(key, default, unit)
        if not present:
            if default is REQUIRED or default is None:
                return () if default is REQUIRED else None  # type: ignore[return-value]
            return tuple(si(v) if si else float(v) for v in default)
        if not isinstance(raw, list):
            self.error(key, raw, unit, "expected an array of numbers")
            return ()
        if len(raw) < min_len or (max_len is not None and len(raw) > max_len):
            span = f"{min_len}..{max_len}" if max_len is not None else f">= {min_len}"
            self.error(key, raw, unit, f"expected {span} values, got {len(raw)}")
            return ()
        out = []
        ok = True
        for i, v in enumerate(raw):
            if isinstance(v, bool) or not isinstance(v, (int, float)) or not math.isfinite(float(v)):
                self.error(f"{key}[{i}]", v, unit, f"expected a finite number ({_range_text(lo, hi, lo_open, hi_open, unit)})")
                ok = False
                continue
            f = float(v)
            if (lo is not None and (f < lo or (lo_open and f == lo))) or (
                hi is not None and (f > hi or (hi_open and f == hi))
            ):
                self.error(f"{key}[{i}]", v, unit, f"out of range ({_range_text(lo, hi, lo_open, hi_open, unit)})")
                ok = False
                continue
            out.append(f)
        if not ok:
            return ()
        if increasing:
            for i in range(1, len(out)):
                if not out[i] > out[i - 1]:
                    self.error(f"{key}[{i}]", raw[i], unit, f"must be strictly increasing (previous value {raw[i-1]!r})")
                    return ()
        return tuple(si(v) if si else v for v in out)

    # -- tables --------------------------------------------------------------------------------
    def table_reader(self, key: str, *, required: bool = True) -> "Reader | None":
        """A reader for sub-table ``key``; ``None`` when optional and absent."""
        present, raw = self._get(key, REQUIRED if required else None)
        if not present:
            return Reader(self.file, None, self.problems, self.path(key)) if required else None
        if not isinstance(raw, dict):
            self.error(key, raw, "", "expected a table ([section])")
            return Reader(self.file, None, self.problems, self.path(key))
        return Reader(self.file, raw, self.problems, self.path(key))

    def tables(self, key: str, *, required: bool = False) -> list["Reader"]:
        """Readers for an array of tables (``[[key]]``)."""
        present, raw = self._get(key, REQUIRED if required else None)
        if not present:
            return []
        if not isinstance(raw, list) or not all(isinstance(t, dict) for t in raw):
            self.error(key, raw, "", "expected an array of tables ([[section]])")
            return []
        return [Reader(self.file, t, self.problems, f"{self.path(key)}[{i}]") for i, t in enumerate(raw)]

    def one_of(self, keys: Iterable[str]) -> str | None:
        """Which one of mutually exclusive ``keys`` is present; error if none or several."""
        keys = list(keys)
        if self.table is None:
            return None
        present = [k for k in keys if k in self.table]
        if len(present) == 1:
            return present[0]
        where = self.prefix or "(top level)"
        if not present:
            self.problems.add(
                Problem(self.file, where, _MISSING, "", f"give exactly one of: {', '.join(keys)}")
            )
        else:
            self.problems.add(
                Problem(self.file, where, _MISSING, "", f"give only one of: {', '.join(present)}")
            )
            self.known(*present)
        return None

    def done(self) -> None:
        """Record every key of this table that no accessor asked for."""
        if self.table is None:
            return
        for key in self.table:
            if key not in self._used:
                known = sorted(self._used)
                hint = _closest(key, known)
                more = f"; did you mean '{hint}'?" if hint else ""
                allowed = f" (known keys here: {', '.join(known)})" if known else ""
                self.error(key, self.table[key], "", f"unknown key{more}{allowed}")


def _closest(word: str, candidates: list[str]) -> str | None:
    import difflib

    hits = difflib.get_close_matches(word, candidates, n=1, cutoff=0.75)
    return hits[0] if hits else None
