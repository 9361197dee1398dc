"""The code base passes its own lint settings (pyproject.toml [tool.ruff])."""

from __future__ import annotations

import subprocess
import sys
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]


def test_ruff_check_is_clean():
    # ruff is part of the test extra; a finding fails the suite like any other defect.
    result = subprocess.run(
        [sys.executable, "-m", "ruff", "check", "--no-cache", str(ROOT)],
        capture_output=True,
        text=True,
        check=False,
    )
    assert result.returncode == 0, result.stdout + result.stderr
