"""The code base passes the linter settings in pyproject.toml (ruff: E, W, F, I, B, C4, UP)."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_ruff_is_clean():
    ruff = Path(sys.executable).with_name("ruff")
    proc = subprocess.run([str(ruff), "check", "assignplan", "tests", "benchmarks"],
                          cwd=ROOT, capture_output=True, text=True, timeout=120)
    assert proc.returncode == 0, proc.stdout + proc.stderr
