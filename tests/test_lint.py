"""The whole tree passes the project's ruff configuration (pyproject.toml)."""

import shutil
import subprocess
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


def test_ruff_check_is_clean():
    ruff = shutil.which("ruff") or str(Path(sys.executable).parent / "ruff")
    if not Path(ruff).exists():
        pytest.skip("ruff is not installed (pip install -e '.[test]')")
    r = subprocess.run(
        [ruff, "check", "kkcheck", "tests", "benchmarks", "reference_data"],
        cwd=ROOT,
        capture_output=True,
        text=True,
    )
    assert r.returncode == 0, r.stdout[-3000:]
