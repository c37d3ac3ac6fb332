"""Lint, format and types of the Python package: ``ruff check`` (rule sets E, F, W, B, UP),
``ruff format --check`` and ``mypy``, all configured in pyproject.toml. Each skips only when its
tool is not installed (the test extra brings both): an unformatted change fails.
"""

from __future__ import annotations

import importlib.util
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


def _run(tool: str, *args: str, tmp: Path) -> subprocess.CompletedProcess:
    if importlib.util.find_spec(tool) is None:
        pytest.skip(f"{tool} is not installed (pip install '.[test]' brings it)")
    return subprocess.run([sys.executable, "-m", tool, *args], cwd=ROOT, capture_output=True, text=True,
                          timeout=900)


def test_ruff_check(tmp_path):
    r = _run("ruff", "check", "--no-cache", "codegen", tmp=tmp_path)
    assert r.returncode == 0, r.stdout + r.stderr


def test_ruff_format(tmp_path):
    r = _run("ruff", "format", "--check", "--no-cache", "codegen", tmp=tmp_path)
    assert r.returncode == 0, r.stdout + r.stderr


def test_mypy(tmp_path):
    r = _run("mypy", "--cache-dir", str(tmp_path / "mypy-cache"), tmp=tmp_path)
    assert r.returncode == 0 and "Success" in r.stdout, r.stdout + r.stderr


def test_package_ships_py_typed():
    """PEP 561: the marker file, and the packaging that puts it into the wheel."""
    assert (ROOT / "codegen" / "py.typed").is_file()
    assert '"edgetally" = ["py.typed"]' in (ROOT / "pyproject.toml").read_text()
