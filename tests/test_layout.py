"""The house rules of the code's layout, read from the source (DEVELOPERS.md, "The picture").

Flow goes one way (physics -> engine -> host and offline -> survey, soak, UI, bench ->
commands -> cli), with no import cycles, function-level imports included; outside the engine,
code imports it by its front door (``rtvoice.engine``); no module is much over 400 lines. These
are the project's own rules (the contributor guide's), not facts from outside: a test keeps them
from eroding one import at a time.
"""

from __future__ import annotations

import ast
import pathlib
from collections.abc import Iterator

import pytest

ROOT = pathlib.Path(__file__).resolve().parent.parent / "rtvoice"
#: The layer of each top-level part: an import may go to a lower layer or within its own part.
LAYERS = {"errors": 0, "procutil": 0, "physics": 0, "engine": 1, "host": 2, "offline": 2,
          "survey": 3, "fit": 3, "ui": 4, "soak": 4, "bench": 5, "commands": 6, "cli": 7, "__main__": 8}
#: Imports across parts of one layer that the guide names (the recorder writes WAVs as offline does).
SIDEWAYS_ALLOWED = {("rtvoice.host.recorder", "rtvoice.offline.wav")}
MAX_LINES = 420  # "about 400 lines at most"


def _modules() -> dict[str, pathlib.Path]:
    mods = {}
    for path in ROOT.rglob("*.py"):
        parts = ("rtvoice",) + path.relative_to(ROOT).with_suffix("").parts
        name = ".".join(parts[:-1] if parts[-1] == "__init__" else parts)
        mods[name] = path
    return mods


MODULES = _modules()


def _resolve(target: str) -> str:
    """The module an import names (``from rtvoice.engine import Engine`` -> rtvoice.engine)."""
    while target and target not in MODULES:
        target = target.rsplit(".", 1)[0] if "." in target else ""
    return target


def _imports(name: str) -> Iterator[tuple[str, str, int]]:
    """(imported module, module as written, line) of every rtvoice import in module ``name``, at any depth."""
    tree = ast.parse(MODULES[name].read_text())
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom) and node.module and node.module.startswith("rtvoice"):
            for alias in node.names:
                target = _resolve(f"{node.module}.{alias.name}") or _resolve(node.module)
                if target and target != name:
                    yield target, node.module, node.lineno
        elif isinstance(node, ast.Import):
            for alias in node.names:
                if alias.name.startswith("rtvoice"):
                    target = _resolve(alias.name)
                    if target and target != name:
                        yield target, alias.name, node.lineno


EDGES = {name: sorted(set(_imports(name))) for name in MODULES}


def _part(name: str) -> str:
    parts = name.split(".")
    return parts[1] if len(parts) > 1 else ""


def test_the_layout_reads_real_modules():
    # The checks below are only as good as the graph: it must hold the engine's front door and see it used.
    assert "rtvoice.engine" in MODULES and "rtvoice.physics.modes" in MODULES
    assert any(t == "rtvoice.engine" for t, _, _ in EDGES["rtvoice.offline.render"])


def test_no_import_cycles_function_level_imports_included():
    index: dict[str, int] = {}
    low: dict[str, int] = {}
    stack: list[str] = []
    on_stack: set[str] = set()
    cycles: list[list[str]] = []

    def strong(v: str) -> None:  # Tarjan's strongly connected components
        index[v] = low[v] = len(index)
        stack.append(v)
        on_stack.add(v)
        for w, _, _ in EDGES[v]:
            if w not in index:
                strong(w)
                low[v] = min(low[v], low[w])
            elif w in on_stack:
                low[v] = min(low[v], index[w])
        if low[v] == index[v]:
            component = []
            while True:
                w = stack.pop()
                on_stack.discard(w)
                component.append(w)
                if w == v:
                    break
            if len(component) > 1:
                cycles.append(sorted(component))

    for v in EDGES:
        if v not in index:
            strong(v)
    assert cycles == [], f"import cycles: {cycles}"


def test_imports_flow_down_the_layers():
    wrong = []
    for name, targets in EDGES.items():
        for target, _, line in targets:
            a, b = _part(name), _part(target)
            if LAYERS[b] > LAYERS[a] or (LAYERS[b] == LAYERS[a] and a != b
                                         and (name, target) not in SIDEWAYS_ALLOWED):
                wrong.append(f"{MODULES[name].relative_to(ROOT.parent)}:{line} imports {target}")
    assert wrong == [], "imports against the flow:\n" + "\n".join(wrong)


def test_outside_the_engine_code_uses_its_front_door():
    wrong = []
    for name, targets in EDGES.items():
        if _part(name) == "engine":
            continue
        for _, written, line in targets:
            if written.startswith("rtvoice.engine."):
                wrong.append(f"{MODULES[name].relative_to(ROOT.parent)}:{line} imports {written}")
    assert wrong == [], "imports behind the engine's front door:\n" + "\n".join(wrong)


@pytest.mark.parametrize("name", sorted(MODULES))
def test_no_module_is_much_over_400_lines(name: str):
    lines = len(MODULES[name].read_text().splitlines())
    assert lines <= MAX_LINES, f"{MODULES[name].relative_to(ROOT.parent)} has {lines} lines (at most {MAX_LINES})"
