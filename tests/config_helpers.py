"""Shared helpers for config-loader tests: edited copies of a demo file, and the error lines."""

from __future__ import annotations

import re

import pytest

from hil.configio import ConfigError


def edited_copy(tmp_path, text: str, edits, name: str):
    """``text`` with regex edits (pattern, replacement) applied, each matching exactly once, written
    to ``tmp_path / name``; returns the path."""
    for pattern, repl in edits:
        text, n = re.subn(pattern, repl, text, count=1, flags=re.M)
        assert n == 1, pattern
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def error_lines(load, path) -> list[str]:
    """The ConfigError lines ``load(path)`` raises; each must name the file first."""
    with pytest.raises(ConfigError) as info:
        load(path)
    lines = str(info.value).splitlines()
    assert all(line.startswith(str(path) + ": ") for line in lines), lines
    return lines
