"""Checks shared by the tests of refused commands (tests/ is on sys.path: tests/conftest.py)."""

from __future__ import annotations


def one_line_error(result) -> str:
    """The one stderr line of a refused command: exit 2, ``error: ...``, no traceback, no usage text."""
    assert result.returncode == 2, (result.returncode, result.stdout, result.stderr)
    lines = result.stderr.strip().splitlines()
    assert len(lines) == 1 and lines[0].startswith("error:"), result.stderr
    assert "Traceback" not in result.stderr and "usage:" not in result.stderr
    return lines[0]
