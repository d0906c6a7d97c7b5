"""The README's quick start: two commands that work on a stock machine as written, and the
test command that CI runs."""

from __future__ import annotations

import re
import subprocess
import sys
import tomllib
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
TEST_TOOLS = ("pytest", "hypothesis", "ruff", "scikit-image", "psutil")


def _quick_start() -> list[str]:
    readme = (ROOT / "README.md").read_text(encoding="utf-8")
    section = readme.split("## Quick start", 1)[1].split("\n## ", 1)[0]
    return [b.strip() for b in re.findall(r"```\n(.*?)```", section, re.S)]


def test_two_one_line_commands_in_a_virtual_environment():
    install, tests = _quick_start()
    assert "\n" not in install and "\n" not in tests
    # The environment is made and used inside the command: the system's Python is never
    # installed into (Debian and Ubuntu refuse that: externally-managed-environment).
    assert install.startswith("python3 -m venv ")
    assert "--python .venv/bin/python install -e . " in install
    assert install.endswith(".venv/bin/stabilize demo")
    assert '".[test]"' in tests and tests.endswith(".venv/bin/python -m pytest -q")
    assert not re.search(r"python3 -m pip install", install + tests)


def test_ci_runs_the_readme_test_command():
    _, tests = _quick_start()
    ci = (ROOT / ".ci" / "run").read_text(encoding="utf-8").splitlines()
    assert tests in ci


def test_the_user_install_pulls_in_no_test_tools():
    project = tomllib.loads((ROOT / "pyproject.toml").read_text(encoding="utf-8"))["project"]
    names = [re.split(r"[<>=\[ ]", d, maxsplit=1)[0].lower() for d in project["dependencies"]]
    assert not set(names) & set(TEST_TOOLS)
    extra = " ".join(project["optional-dependencies"]["test"])
    assert all(tool in extra for tool in TEST_TOOLS)


@pytest.mark.slow
def test_the_environment_step_needs_no_ensurepip(tmp_path):
    """``venv --without-pip`` and ``pip --python`` work with this interpreter and its pip,
    which is what the first command relies on (the install itself downloads, and is not
    repeated here): pip, run from outside, sees the new environment and only it."""
    env = tmp_path / "venv"
    subprocess.run([sys.executable, "-m", "venv", "--without-pip", str(env)], check=True,
                   timeout=120)
    assert not (env / "bin" / "pip").exists()
    proc = subprocess.run([sys.executable, "-m", "pip", "--python", str(env / "bin" / "python"),
                           "list", "--format", "freeze"], capture_output=True, text=True,
                          timeout=300)
    assert proc.returncode == 0, proc.stderr
    # Empty: not the packages of the interpreter pip came from.
    assert "numpy" not in proc.stdout.lower()
