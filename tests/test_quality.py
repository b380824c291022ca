"""Lint, format and types are part of the test suite, so CI enforces them."""

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
PATHS = ["walkers", "tests", "scenarios"]


def run(*args: str) -> subprocess.CompletedProcess:
    return subprocess.run(args, cwd=ROOT, capture_output=True, text=True, timeout=600)


@pytest.mark.skipif(shutil.which("ruff") is None, reason="ruff is not installed (test extras)")
def test_ruff_lint_is_clean():
    result = run("ruff", "check", *PATHS)
    assert result.returncode == 0, result.stdout + result.stderr


@pytest.mark.skipif(shutil.which("ruff") is None, reason="ruff is not installed (test extras)")
def test_ruff_format_is_clean():
    result = run("ruff", "format", "--check", *PATHS)
    assert result.returncode == 0, result.stdout + result.stderr


def test_mypy_passes_on_the_package():
    pytest.importorskip("mypy")
    result = run(sys.executable, "-m", "mypy", "walkers")
    assert result.returncode == 0, result.stdout + result.stderr
