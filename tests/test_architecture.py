"""The package's shape, read from its own imports: no cycles, no upward imports, no hidden
function-local imports.

Layers, bottom to top (a module may import its own layer and those below, never above):

0. ground floor: errors, settings, geometry, the motion-log record;
1. ``stabilize.io``: the ffmpeg process, probing, decoding, encoding, log files, publishing;
2. stages: tracking, consensus, motion, camera path, smoothers, framing, warp, figures, scenes;
3. jobs: measure / steady / render, report, batch, demo, segment runs;
4. the command line.
"""

from __future__ import annotations

import ast
import functools
from pathlib import Path

import pytest

import stabilize

PACKAGE = Path(stabilize.__file__).parent

#: Layer of each module, by dotted name below ``stabilize`` (a package entry covers its
#: modules). Every module must be listed: a new module has to choose its floor.
LAYERS: dict[str, int] = {
    # 0: the ground floor
    "errors": 0, "version": 0, "geometry": 0, "config": 0, "motion_log": 0, "raw_path": 0,
    # 1: the edges
    "io": 1,
    # 2: stages (and the generic worker runner and prefetch threads they and the jobs use)
    "anchors": 2, "brightness": 2, "camera_path": 2, "consensus": 2, "cuts": 2,
    "demo_scene": 2, "frame_fit": 2,
    "framing": 2, "motion": 2, "motion_models": 2, "motion_pass": 2, "motion_track": 2,
    "overlays": 2, "pinning": 2, "prefetch": 2, "render": 2, "report_page": 2, "report_plots": 2,
    "residual": 2, "rolling": 2, "row_bands": 2, "row_check": 2, "row_motion": 2,
    "row_warp": 2, "runner": 2, "shake": 2,
    "smoothers": 2, "steadiness": 2, "steady_path": 2, "still_detail": 2, "synthetic": 2,
    "synthetic_rolling": 2, "track": 2,
    "track_groups": 2, "vibration": 2,
    # 3: jobs
    "jobs": 3, "jobs.batch_page": 3, "segments": 3,
    # 4: the command line
    "cli": 4, "__main__": 4,
}

#: A function-local import is allowed only as a deliberate lazy import of something heavy,
#: with its reason in a ``# lazy:`` comment on its line or the line above.
LAZY_MARK = "# lazy:"


def _modules() -> dict[str, Path]:
    out = {}
    for f in sorted(PACKAGE.rglob("*.py")):
        rel = f.relative_to(PACKAGE).with_suffix("")
        parts = list(rel.parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = f
    return out


def _resolve(module: str, is_package: bool, node: ast.ImportFrom) -> list[str]:
    """Dotted names (below ``stabilize``) of what an ``ImportFrom`` node imports, or []."""
    if node.level == 0:
        if not (node.module or "").startswith("stabilize"):
            return []
        base = (node.module or "").split(".")[1:]
    else:
        here = module.split(".") if module else []
        if not is_package:
            here = here[:-1]
        up = node.level - 1
        base = (here[: len(here) - up] if up else here) + (node.module.split(".")
                                                            if node.module else [])
    names = [".".join(base)] if node.module else []
    return names + [".".join([*base, a.name]) for a in node.names]


@functools.cache
def _graph() -> tuple[dict[str, set[str]], list[str]]:
    mods = _modules()
    graph: dict[str, set[str]] = {m: set() for m in mods}
    local: list[str] = []
    for name, path in mods.items():
        text = path.read_text()
        lines = text.splitlines()
        tree = ast.parse(text, str(path))
        is_pkg = path.name == "__init__.py"
        top_level = set(map(id, tree.body))
        for node in ast.walk(tree):
            if isinstance(node, ast.ImportFrom):
                targets = [t for t in _resolve(name, is_pkg, node) if t in mods and t != name]
                graph[name].update(targets)
            elif isinstance(node, ast.Import):
                for a in node.names:
                    if a.name.startswith("stabilize."):
                        graph[name].add(a.name.split(".", 1)[1])
            else:
                continue
            if id(node) not in top_level and not _in_type_checking(tree, node):
                near = lines[max(0, node.lineno - 3):node.lineno]
                if not any(LAZY_MARK in line for line in near):
                    local.append(f"{name}:{node.lineno}")
    return graph, local


def _in_type_checking(tree: ast.Module, node: ast.AST) -> bool:
    for top in tree.body:
        if isinstance(top, ast.If) and "TYPE_CHECKING" in ast.unparse(top.test):
            if any(n is node for n in ast.walk(top)):
                return True
        if isinstance(top, ast.Try) and any(n is node for n in ast.walk(top)):
            return True
    return False


def _layer(module: str) -> int:
    parts = module.split(".")
    for k in range(len(parts), 0, -1):
        key = ".".join(parts[:k])
        if key in LAYERS:
            return LAYERS[key]
    raise KeyError(module)


def test_every_module_has_a_layer() -> None:
    missing = [m for m in _modules() if m and not _has_layer(m)]
    assert not missing, f"modules with no layer in LAYERS: {missing}"


def _has_layer(m: str) -> bool:
    try:
        _layer(m)
    except KeyError:
        return False
    return True


def test_no_import_cycles() -> None:
    graph, _ = _graph()
    # Package __init__ files re-export their own modules; they are faces, not dependencies.
    seen: dict[str, int] = {}
    stack: list[str] = []
    cycles: list[list[str]] = []

    def visit(m: str) -> None:
        seen[m] = 1
        stack.append(m)
        for n in sorted(graph[m]):
            if n not in graph or _is_parent(m, n):
                continue
            if seen.get(n) == 1:
                cycles.append(stack[stack.index(n):] + [n])
            elif n not in seen:
                visit(n)
        stack.pop()
        seen[m] = 2

    for m in sorted(graph):
        if m not in seen:
            visit(m)
    assert not cycles, "import cycles: " + "; ".join(" -> ".join(c) for c in cycles)


def _is_parent(child: str, parent: str) -> bool:
    return child.startswith(parent + ".") or parent == ""


@pytest.mark.parametrize("module", sorted(m for m in _modules() if m))
def test_no_upward_imports(module: str) -> None:
    graph, _ = _graph()
    mine = _layer(module)
    upward = sorted(n for n in graph[module] if n and _layer(n) > mine
                    and not _is_parent(module, n))
    assert not upward, f"{module} (layer {mine}) imports from above: {upward}"


def test_no_function_local_imports() -> None:
    _, local = _graph()
    assert not local, f"function-local imports without a '# lazy:' reason: {local}"
