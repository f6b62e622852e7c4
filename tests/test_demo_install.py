"""The installed package (not the checkout) runs the demo: the demo tables are package data.

Issue 16: after ``pip install .`` the demo said "demo data not found". This builds a wheel-style
install of a copy of the sources into a fresh virtual environment that borrows the current
environment's third-party packages (a ``.pth`` line, so it works offline and quickly), then runs
``kkcheck demo`` from an unrelated folder. Common practice, no source.
"""

import shutil
import subprocess
import sys
import sysconfig
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent


def _venv_python(venv: Path) -> Path:
    return venv / ("Scripts" if sys.platform == "win32" else "bin") / "python"


@pytest.mark.slow
def test_installed_package_runs_the_demo(tmp_path):
    # setuptools < 70.1 builds wheels only with the wheel package (in the [test] extra)
    pytest.importorskip("wheel", reason="the wheel package is needed to build kkcheck offline")
    src = tmp_path / "src"
    ignore = shutil.ignore_patterns("__pycache__", "*.pyc", "*.egg-info")
    shutil.copytree(ROOT / "kkcheck", src / "kkcheck", ignore=ignore)
    for name in ("pyproject.toml", "README.md"):
        shutil.copy2(ROOT / name, src / name)
    venv = tmp_path / "venv"
    subprocess.run([sys.executable, "-m", "venv", "--without-pip", str(venv)], check=True)
    py = _venv_python(venv)
    site = subprocess.run(
        [str(py), "-c", "import sysconfig; print(sysconfig.get_paths()['purelib'])"],
        capture_output=True,
        text=True,
        check=True,
    ).stdout.strip()
    # third-party packages of this environment (numpy, scipy, pip, setuptools, ...), appended
    # after the new site folder; its .pth files (our editable install) are not run
    Path(site, "borrowed.pth").write_text(sysconfig.get_paths()["purelib"] + "\n")
    pip = [str(py), "-m", "pip", "install", "-q", "--no-deps", "--no-build-isolation", "--no-index"]
    subprocess.run([*pip, str(src)], check=True, cwd=tmp_path, timeout=300)
    work = tmp_path / "elsewhere"
    work.mkdir()
    where = subprocess.run(
        [str(py), "-c", "import kkcheck; print(kkcheck.__file__)"],
        capture_output=True,
        text=True,
        check=True,
        cwd=work,
    ).stdout.strip()
    assert Path(where).is_relative_to(venv), where  # the installed copy, not the checkout
    run = subprocess.run(
        [str(py), "-m", "kkcheck.cli", "demo", "--quiet"],
        capture_output=True,
        text=True,
        cwd=work,
        timeout=600,
    )
    assert run.returncode == 0, run.stderr
    out = work / "kkcheck-demo"
    assert (out / "summary.json").is_file() and (out / "report.html").is_file()
