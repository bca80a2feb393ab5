"""The package's layers import one way (docs/architecture.md).

Reads every module of qadapt/ with ``ast`` (nothing is imported) and checks:
- every import of a qadapt module goes to a lower layer, or stays inside its own package;
- there is no import cycle between modules;
- an import inside a function, class or ``if`` block is one of the few listed below, each
  with its reason (an optional dependency or start-up cost).

Layering as a rule is common practice (gymnasium: ``core`` imports only ``spaces`` and
``utils``; wrappers import core, never the reverse); the order itself is ours.
"""

from __future__ import annotations

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "qadapt"

# Bottom to top. A module may import modules of lower layers and of its own package.
LAYERS: list[tuple[str, ...]] = [
    ("qadapt", "errors", "checks"),  # the version; BadInput, TrainingFailed; argument checks
    ("layout", "files", "locking", "stats", "spaces"),  # run names, durable files, locks, ...
    ("wrappers", "rollout"),  # gymnasium-side helpers
    ("data", "checkpoint"),  # what is stored: datasets, checkpoints
    ("nets", "maximize"),  # Q-networks, action maximisers
    ("learner",),  # fitted Q-iteration, trainer, init strategies
    ("config",),  # job schemas, composition, the Hydra entry point
    ("envs",),  # building envs from their configs
    ("jobs",),  # one module per job
    ("study", "preview"),  # grids of jobs and their reports; the picker preview
    ("cli",),  # the console script
]
RANK = {name: rank for rank, group in enumerate(LAYERS) for name in group}

# (module, imported module) -> why the import waits until it is needed.
DEFERRED_IMPORTS: dict[tuple[str, str], str] = {}


def _modules() -> dict[str, Path]:
    out = {}
    for path in sorted(PACKAGE.rglob("*.py")):
        parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


MODULES = _modules()


def _target(node: ast.ImportFrom, module: str, is_package: bool) -> str:
    if node.level == 0:
        return node.module or ""
    base = module.split(".") if is_package else module.split(".")[:-1]
    base = base[: len(base) - (node.level - 1)]
    return ".".join(base + ([node.module] if node.module else []))


def _imports(module: str) -> list[tuple[str, int, bool]]:
    """(imported module, line, at module level) for every import in ``module``; names
    imported from a package resolve to the submodule when one exists."""
    path = MODULES[module]
    tree = ast.parse(path.read_text())
    top = {id(node) for node in tree.body}
    out = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names = [alias.name for alias in node.names]
        elif isinstance(node, ast.ImportFrom):
            base = _target(node, module, path.name == "__init__.py")
            names = [f"{base}.{alias.name}" if f"{base}.{alias.name}" in MODULES else base
                     for alias in node.names]
        else:
            continue
        for name in names:
            out.append((name, node.lineno, id(node) in top))
    return out


def _package(module: str) -> str:
    parts = module.split(".")
    return parts[1] if len(parts) > 1 else "qadapt"


def _owner(name: str) -> str | None:
    """The qadapt module ``name`` refers to (longest prefix), or None outside qadapt."""
    while name and name not in MODULES:
        name = name.rpartition(".")[0]
    return name or None


def test_every_module_belongs_to_a_layer():
    assert {_package(m) for m in MODULES} <= set(RANK), "add the new package to LAYERS"


def _upward(imports: dict[str, list[tuple[str, int, bool]]]) -> list[str]:
    wrong = []
    for module, found in imports.items():
        for name, line, _ in found:
            target = _owner(name)
            if target is None or target == module:
                continue
            mine, theirs = _package(module), _package(target)
            if mine != theirs and RANK[theirs] >= RANK[mine]:
                wrong.append(f"{MODULES[module].name}:{line} {module} -> {target}")
    return wrong


def test_imports_go_down_the_layers():
    wrong = _upward({module: _imports(module) for module in MODULES})
    assert not wrong, "imports against the layer order:\n" + "\n".join(wrong)


def test_the_layer_check_reports_an_upward_and_a_sideways_import():
    fake = {"qadapt.learner.fqi": [("qadapt.jobs.chain", 1, True), ("qadapt.nets", 2, True)],
            "qadapt.data.format.dataset": [("qadapt.checkpoint.store", 3, True)]}
    assert _upward(fake) == ["fqi.py:1 qadapt.learner.fqi -> qadapt.jobs.chain",
                             "dataset.py:3 qadapt.data.format.dataset -> qadapt.checkpoint.store"]


def test_no_import_cycles():
    # Package faces (__init__.py) re-export their submodules; the cycle check is between the
    # modules that hold code.
    faces = {m for m, p in MODULES.items() if p.name == "__init__.py"}
    graph = {m: {t for n, _, _ in _imports(m) if (t := _owner(n)) and t != m and t not in faces}
             for m in MODULES if m not in faces}
    state: dict[str, int] = {}
    cycle: list[str] = []

    def visit(node: str, path: list[str]) -> bool:
        state[node] = 1
        for nxt in sorted(graph.get(node, ())):
            if state.get(nxt) == 1:
                cycle.extend(path[path.index(nxt):] + [node, nxt] if nxt in path else [node, nxt])
                return True
            if nxt not in state and visit(nxt, path + [node]):
                return True
        state[node] = 2
        return False

    for module in sorted(graph):
        if module not in state and visit(module, []):
            break
    assert not cycle, "import cycle: " + " -> ".join(cycle)


def test_imports_inside_functions_are_listed_with_a_reason():
    deferred = set()
    for module in MODULES:
        for name, line, at_top in _imports(module):
            if not at_top:
                deferred.add((module, name))
                assert (module, name) in DEFERRED_IMPORTS, (
                    f"{MODULES[module]}:{line} imports {name} inside a function: move it to "
                    "the top, or list it in DEFERRED_IMPORTS with its reason")
    assert len(deferred) < 15
    assert set(DEFERRED_IMPORTS) <= deferred, "DEFERRED_IMPORTS lists imports that are gone"
