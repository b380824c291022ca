"""The package tree reads as the data flow: imports run one way, down the stages, and no module
grows past a size a reader can hold.

Stages, in the order a run goes through them (DEVELOPERS.md, "The data flow"). A module may
import from its own stage and from earlier ones, never from a later one; every import counts,
including those inside functions and under ``TYPE_CHECKING``. The package's ``__init__`` is the
public facade: it names later stages, but only inside functions (imported on first use).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "walkers"

#: (stage, the modules and packages in it), first to last.
STAGES: list[tuple[str, tuple[str, ...]]] = [
    ("base", ("walkers", "walkers.errors", "walkers.files")),
    ("scenario", ("walkers.scenario",)),
    ("fields", ("walkers.fields",)),
    ("engine", ("walkers.engine",)),
    ("run", ("walkers.run",)),
    ("outputs", ("walkers.outputs",)),
    ("attribution", ("walkers.attribution",)),
    ("ensemble", ("walkers.ensemble",)),
    ("verify", ("walkers.verify",)),
    (
        "front",
        (
            "walkers.api",
            "walkers.cli",
            "walkers.cli_outputs",
            "walkers.cli_trace",
            "walkers.bench",
            "walkers.bench_report",
            "walkers.scaling",
            "walkers.inspect",
            "walkers.workloads",
        ),
    ),
]
#: Files exempt from the size limit: the compiled kernels (one file by design, see DEVELOPERS.md).
SIZE_EXEMPT = {"walkers/engine/kernels.py"}
MAX_LINES = 600
FACADE = "walkers/__init__.py"


def module_name(path: Path) -> str:
    parts = list(path.relative_to(PACKAGE.parent).with_suffix("").parts)
    if parts[-1] == "__init__":
        parts.pop()
    return ".".join(parts)


def stage_of(module: str) -> int:
    """Index of the stage ``module`` belongs to (the longest matching prefix decides)."""
    best, best_len = -1, -1
    for k, (_, prefixes) in enumerate(STAGES):
        for prefix in prefixes:
            exact = prefix == "walkers"
            if (module == prefix or (not exact and module.startswith(prefix + "."))) and len(
                prefix
            ) > best_len:
                best, best_len = k, len(prefix)
    if best < 0:
        raise AssertionError(f"{module} is in no stage: add it to STAGES and DEVELOPERS.md")
    return best


def imported_modules(tree: ast.AST, *, top_level_only: bool = False) -> list[tuple[int, str]]:
    """(line, module) of every ``walkers`` import in ``tree``; ``from walkers.x import y`` counts
    as ``walkers.x.y`` when that is a module, else as ``walkers.x``."""
    nodes = ast.iter_child_nodes(tree) if top_level_only else ast.walk(tree)
    found: list[tuple[int, str]] = []
    for node in nodes:
        if isinstance(node, ast.Import):
            names = [a.name for a in node.names]
            found += [(node.lineno, n) for n in names if n.split(".")[0] == "walkers"]
        elif isinstance(node, ast.ImportFrom) and node.level == 0 and node.module:
            if node.module.split(".")[0] != "walkers":
                continue
            for a in node.names:
                sub = f"{node.module}.{a.name}"
                is_module = (PACKAGE.parent / (sub.replace(".", "/") + ".py")).exists() or (
                    PACKAGE.parent / sub.replace(".", "/") / "__init__.py"
                ).exists()
                found.append((node.lineno, sub if is_module else node.module))
    return found


def upward_imports(path: Path, source: str) -> list[str]:
    """Imports in ``source`` (the module at ``path``) of a later stage than its own."""
    tree = ast.parse(source)
    own = stage_of(module_name(path))
    facade = path.relative_to(PACKAGE.parent).as_posix() == FACADE
    checked = imported_modules(tree, top_level_only=facade)
    return [
        f"{path.relative_to(PACKAGE.parent)}:{line} imports {mod} "
        f"({STAGES[stage_of(mod)][0]}, after {STAGES[own][0]})"
        for line, mod in checked
        if stage_of(mod) > own
    ]


def package_files() -> list[Path]:
    return sorted(PACKAGE.rglob("*.py"))


def test_every_module_is_in_a_stage() -> None:
    for path in package_files():
        stage_of(module_name(path))


def test_imports_run_down_the_stages() -> None:
    problems = []
    for path in package_files():
        problems += upward_imports(path, path.read_text(encoding="utf-8"))
    assert problems == [], "imports from a later stage:\n" + "\n".join(problems)


def test_an_import_from_a_later_stage_is_caught() -> None:
    source = "def f():\n    from walkers.outputs.writer import write_results\n"
    found = upward_imports(PACKAGE / "scenario" / "load.py", source)
    assert found == [
        "walkers/scenario/load.py:2 imports walkers.outputs.writer (outputs, after scenario)"
    ]
    assert upward_imports(PACKAGE / "outputs" / "writer.py", source) == []


def test_no_module_is_over_the_size_limit() -> None:
    long = [
        f"{path.relative_to(PACKAGE.parent)}: {n} lines"
        for path in package_files()
        if path.relative_to(PACKAGE.parent).as_posix() not in SIZE_EXEMPT
        and (n := len(path.read_text(encoding="utf-8").splitlines())) > MAX_LINES
    ]
    assert long == [], f"over {MAX_LINES} lines (split by job):\n" + "\n".join(long)


@pytest.mark.parametrize(
    "name",
    [
        "load_scenario",
        "simulate_scenario",
        "simulate",
        "open_flow",
        "open_results",
        "load_trace_scenario",
        "trace_scenario",
    ],
)
def test_the_public_api_is_importable_from_the_top_level(name: str) -> None:
    import walkers

    assert callable(getattr(walkers, name))
    assert name in walkers.__all__
