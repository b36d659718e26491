"""The layout keeps its promises, read from the source (common practice: an import-layering
check, as import-linter-style contracts do): lower layers never import higher ones, stages do
not import each other, nothing outside cli/ prints, there is no import circle, and every module
stays readable in size."""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

SRC = Path(__file__).resolve().parents[2] / "src" / "ballast"

# Lowest first. A module may import its own layer or any layer below it.
LAYERS = ["core", "config", "io", "models", "stages", "bundle", "people", "pipeline", "cli"]
STAGE_NAMES = {
    "ingest", "synth", "split", "check", "mine", "teach", "train", "evaluate", "gate", "report",
    "export",
}
MAX_LINES = 600  # ~400 for most modules; the few larger ones are one concept each


def _modules() -> dict[str, Path]:
    out = {}
    for f in SRC.rglob("*.py"):
        parts = list(f.relative_to(SRC.parent).with_suffix("").parts)
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = f
    return out


def _imports(name: str, path: Path) -> list[tuple[str, bool]]:
    """(imported ballast module, under TYPE_CHECKING only) for every import in the file."""
    tree = ast.parse(path.read_text("utf-8"))
    typing_only: set[int] = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.If) and "TYPE_CHECKING" in ast.unparse(node.test):
            typing_only |= {id(n) for b in node.body for n in ast.walk(b)}
    pkg = name if path.name == "__init__.py" else name.rsplit(".", 1)[0]
    found = []
    for node in ast.walk(tree):
        if isinstance(node, ast.ImportFrom):
            if node.level:
                base = pkg.split(".")[: len(pkg.split(".")) - node.level + 1]
                mod = ".".join(base + ([node.module] if node.module else []))
            else:
                mod = node.module or ""
            targets = [mod] + [f"{mod}.{a.name}" for a in node.names]
        elif isinstance(node, ast.Import):
            targets = [a.name for a in node.names]
        else:
            continue
        for t in targets:
            if t == "ballast" or t.startswith("ballast."):
                found.append((t, id(node) in typing_only))
    return found


def _layer(module: str) -> int | None:
    parts = module.split(".")
    if len(parts) < 2:
        return None  # ballast itself: the curated public API re-exports from below
    top = parts[1]
    return LAYERS.index(top) if top in LAYERS else None


def _stage(module: str) -> str | None:
    parts = module.split(".")
    return parts[2] if len(parts) > 2 and parts[1] == "stages" and parts[2] in STAGE_NAMES else None


MODULES = _modules()


def test_every_module_sits_in_a_layer() -> None:
    loose = [
        m for m in MODULES if m.count(".") >= 1 and _layer(m) is None and m != "ballast.__main__"
    ]
    assert loose == []


@pytest.mark.parametrize("module", sorted(MODULES))
def test_no_upward_import(module: str) -> None:
    mine = _layer(module)
    if mine is None:
        return
    bad = []
    for target, typing_only in _imports(module, MODULES[module]):
        theirs = _layer(target)
        if theirs is not None and theirs > mine and not typing_only:
            bad.append(target)
    assert bad == [], f"{module} ({LAYERS[mine]}) imports a higher layer: {bad}"


@pytest.mark.parametrize("module", sorted(m for m in MODULES if _stage(m)))
def test_stages_do_not_import_each_other(module: str) -> None:
    own = _stage(module)
    others = {_stage(t) for t, _ in _imports(module, MODULES[module])} - {None, own}
    assert others == set(), f"{module} imports stage(s) {sorted(others)}"


def test_only_the_cli_prints() -> None:
    printing = []
    for module, path in MODULES.items():
        if module.startswith("ballast.cli"):
            continue
        for node in ast.walk(ast.parse(path.read_text("utf-8"))):
            if isinstance(node, ast.Call):
                f = node.func
                name = ast.unparse(f)
                if name in ("print", "sys.stdout.write", "typer.echo", "pprint"):
                    printing.append(f"{module}:{node.lineno} {name}")
    assert printing == []


def test_no_import_circle() -> None:
    graph = {
        m: {t for t, typing_only in _imports(m, p) if t in MODULES and not typing_only} - {m}
        for m, p in MODULES.items()
    }
    # a package's __init__ importing its own submodules (a registry) is not a circle
    for m in graph:
        graph[m] = {t for t in graph[m] if not (t.startswith(m + ".") or m.startswith(t + "."))}
    state: dict[str, int] = {}
    stack: list[str] = []

    def visit(m: str) -> list[str] | None:
        state[m] = 1
        stack.append(m)
        for t in sorted(graph[m]):
            if state.get(t) == 1:
                return stack[stack.index(t) :] + [t]
            if t not in state and (c := visit(t)):
                return c
        stack.pop()
        state[m] = 2
        return None

    for m in sorted(graph):
        if m not in state:
            cycle = visit(m)
            assert cycle is None, " -> ".join(cycle)


def test_modules_stay_readable() -> None:
    sizes = {m: len(p.read_text("utf-8").splitlines()) for m, p in MODULES.items()}
    big = {m: n for m, n in sizes.items() if n > MAX_LINES}
    assert big == {}


def test_the_layering_check_sees_a_violation(tmp_path: Path) -> None:
    """The checks above can fail: an upward import in a core module is found."""
    f = tmp_path / "metrics.py"
    f.write_text("from ballast.stages.train import full\nfrom ..pipeline import run_all\n")
    found = {t for t, _ in _imports("ballast.core.metrics", f)}
    assert "ballast.stages.train.full" in found and "ballast.pipeline.run_all" in found
    assert max(_layer(t) for t in found) > _layer("ballast.core.metrics")
