"""The package's shape: imports go one way, modules and functions stay readable.

Design requirement (DESIGN.md §1, DEVELOPERS.md "Layout"): the data flows one way,
scenario → landscape → model → solve → store → analysis → report → cli, and no module
imports a higher layer or takes part in an import cycle. The analysis, assembly and
report code keep modules under 600 lines and functions under 80 lines of code (the
docstring not counted) unless a comment says why (``# long: ...`` on the line before the ``def``).
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

SRC = Path(__file__).resolve().parents[1] / "src" / "preyscape"

# rank of each top-level part of the package: a module may import parts of a lower rank,
# and modules of its own sub-package (without cycles)
RANK = {
    "preyscape": 0, "errors": 0, "names": 0, "cautions": 0,
    "scenario": 1, "landscape": 1,
    "model": 2,
    "solve": 3,
    "store": 4, "limits": 4,
    "assemble": 5, "plots": 5, "starter": 5,
    "preview": 6, "plausibility": 6,
    "analysis": 6, "run_maps": 6.5,
    "runfolder": 7, "ensemble": 7,
    "report": 8,
    "demo": 9,
    "cli": 10, "__main__": 11,
}

SIZE_CHECKED = ("analysis", "assemble", "preview", "runfolder", "run_maps", "report",
                "ensemble")
MAX_MODULE_LINES = 600
MAX_FUNCTION_LINES = 80


def module_name(path: Path) -> str:
    rel = path.relative_to(SRC.parent).with_suffix("")
    parts = list(rel.parts)
    if parts[-1] == "__init__":
        parts = parts[:-1]
    return ".".join(parts)


def modules() -> dict[str, Path]:
    return {module_name(p): p for p in sorted(SRC.rglob("*.py"))}


def imports_of(name: str, path: Path) -> set[str]:
    """Every preyscape module ``name`` imports (at the top or inside functions)."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    package = name if path.name == "__init__.py" else name.rpartition(".")[0]
    out = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            out |= {a.name for a in node.names if a.name.startswith("preyscape")}
        elif isinstance(node, ast.ImportFrom):
            base = node.module or ""
            if node.level:
                base = ".".join(package.split(".")[: len(package.split(".")) - node.level + 1]
                                + ([base] if base else []))
            if not base.startswith("preyscape"):
                continue
            for a in node.names:  # "from preyscape.x import y": y may be a module
                out.add(f"{base}.{a.name}" if f"{base}.{a.name}" in modules() else base)
    return out - {name}


def part(name: str) -> str:
    bits = name.split(".")
    return bits[1] if len(bits) > 1 else bits[0]


def graph() -> dict[str, set[str]]:
    return {n: imports_of(n, p) for n, p in modules().items()}


def test_every_module_has_a_rank():
    missing = sorted({part(n) for n in modules()} - set(RANK))
    assert not missing, f"add these parts to RANK (and to DEVELOPERS.md): {missing}"


def test_no_module_imports_a_higher_layer():
    bad = []
    for name, deps in graph().items():
        for dep in deps:
            same_package = part(dep) == part(name)
            higher = RANK[part(dep)] >= RANK[part(name)] and part(dep) != "preyscape"
            if not same_package and higher:
                bad.append(f"{name} imports {dep}")
    assert not bad, "upward or sideways imports:\n" + "\n".join(sorted(bad))


def test_analysis_computations_do_not_draw_or_write():
    # a computation returns values; only the *_output writers use plots and files
    bad = []
    for name, deps in graph().items():
        if part(name) != "analysis" or name.endswith("_output"):
            continue
        for dep in deps:
            if part(dep) == "plots" or dep.endswith("_output"):
                bad.append(f"{name} imports {dep}")
    assert not bad, "\n".join(bad)


def test_no_import_cycles():
    g = graph()
    state: dict[str, int] = {}
    cycle: list[str] = []

    def visit(n: str, stack: list[str]) -> bool:
        state[n] = 1
        for d in sorted(g.get(n, ())):
            if d not in g:
                continue
            if state.get(d) == 1:
                cycle.extend(stack[stack.index(d):] + [n, d] if d in stack else [n, d])
                return True
            if state.get(d) is None and visit(d, stack + [n]):
                return True
        state[n] = 2
        return False

    for n in sorted(g):
        if state.get(n) is None and visit(n, []):
            break
    assert not cycle, "import cycle: " + " -> ".join(cycle)


def size_checked() -> list[tuple[str, Path]]:
    return [(n, p) for n, p in modules().items() if part(n) in SIZE_CHECKED]


@pytest.mark.parametrize("name,path", size_checked(), ids=[n for n, _ in size_checked()])
def test_modules_and_functions_stay_short(name, path):
    text = path.read_text(encoding="utf-8")
    lines = text.splitlines()
    assert len(lines) <= MAX_MODULE_LINES, f"{name} has {len(lines)} lines"
    long = []
    for node in ast.walk(ast.parse(text)):
        if isinstance(node, (ast.FunctionDef, ast.AsyncFunctionDef)):
            first = min([node.lineno] + [d.lineno for d in node.decorator_list])
            body = node.body
            doc = body[0] if body and isinstance(body[0], ast.Expr) and isinstance(
                getattr(body[0], "value", None), ast.Constant) else None
            # the docstring is documentation, not code: count the signature and the body
            n = node.end_lineno - first + 1 - (doc.end_lineno - doc.lineno + 1 if doc else 0)
            said = lines[first - 2].strip().startswith("# long:") if first > 1 else False
            if n > MAX_FUNCTION_LINES and not said:
                long.append(f"{node.name} ({n} lines)")
    assert not long, f"{name}: functions over {MAX_FUNCTION_LINES} lines: {long}"
