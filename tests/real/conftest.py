"""Fixtures for the acceptance tests on real footage (clips fetched by scripts/fetch_clips.py).

The clips live in a cache outside git (``$STABILIZE_CLIP_CACHE`` or
``~/.cache/stabilize/real-clips``). A clip that is missing or does not match its sha256 makes
its tests skip, with a hint to run the fetch script; under ``CI=true`` it makes them fail.
"""

from __future__ import annotations

import importlib.util
import os
import sys
from collections.abc import Callable
from functools import cache
from pathlib import Path

import pytest

SCRIPT = Path(__file__).resolve().parents[2] / "scripts" / "fetch_clips.py"
HINT = f"run `python3 {SCRIPT.relative_to(SCRIPT.parents[1])}` to fetch the real clips"


@cache
def fetch_clips():
    """The fetch script loaded as a module: its manifest and cache location, one copy."""
    spec = importlib.util.spec_from_file_location("fetch_clips", SCRIPT)
    module = importlib.util.module_from_spec(spec)
    sys.modules.setdefault("fetch_clips", module)  # dataclasses look their module up
    spec.loader.exec_module(module)
    return module


@cache
def _checked(name: str) -> tuple[Path, str | None]:
    """The clip's cache path and, when it cannot be used, why (checked once per session)."""
    fc = fetch_clips()
    clip = {c.name: c for c in fc.CLIPS}[name]
    path = fc.clip_path(name)
    if not path.is_file():
        return path, f"real clip {name} is not in {path.parent}"
    if fc.sha256_of(path) != clip.sha256:
        return path, f"real clip {path} does not match its sha256"
    return path, None


@pytest.fixture(scope="session")
def real_clip() -> Callable[[str], Path]:
    """``real_clip("box.mp4")`` is the path of that cached clip (read it; never write it).

    Missing or wrong: ``pytest.skip`` with a hint, or a failure when ``CI=true``.
    """

    def get(name: str) -> Path:
        path, problem = _checked(name)
        if problem is not None:
            if os.environ.get("CI") == "true":
                pytest.fail(f"{problem}; {HINT}", pytrace=False)
            pytest.skip(f"{problem}; {HINT}")
        return path

    return get
