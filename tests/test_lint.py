"""The code base stays ruff-clean (the project's own lint configuration in pyproject.toml)."""

from __future__ import annotations

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]


def test_ruff_clean():
    ruff = shutil.which("ruff") or str(Path(sys.executable).with_name("ruff"))
    if not Path(ruff).exists():
        pytest.skip("ruff is not installed (it comes with the test extra)")
    done = subprocess.run([ruff, "check", "src", "tests"], cwd=ROOT, capture_output=True,
                          text=True)
    assert done.returncode == 0, done.stdout + done.stderr
