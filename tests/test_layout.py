"""The architecture holds: physics imports numpy and scipy only, and imports go one way.

Check values: DESIGN.md's layout rule (physics <- grids <- engine <- products <- workflow/cli).
"""

import ast
from pathlib import Path

PACKAGE = Path(__file__).resolve().parents[1] / "pipeline" / "lidmelt"
ORDER = ["physics", "grids", "engine", "products", "workflow", "cli"]


def imported_modules(path: Path) -> set[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"))
    names = set()
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            names.update(alias.name for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            names.add(node.module)
    return names


def stage_of(module: str) -> str | None:
    parts = module.split(".")
    return parts[1] if parts[0] == "lidmelt" and len(parts) > 1 else None


def test_physics_uses_numpy_and_scipy_only():
    allowed = {"numpy", "scipy", "lidmelt"}
    stdlib_ok = {
        "__future__",
        "contextlib",
        "dataclasses",
        "difflib",
        "functools",
        "hashlib",
        "json",
        "math",
        "os",
        "tempfile",
        "pathlib",
        "typing",
        "collections",
        "types",
        "warnings",
        "numbers",
        "collections.abc",
    }
    for path in (PACKAGE / "physics").glob("*.py"):
        for module in imported_modules(path):
            top = module.split(".")[0]
            assert top in allowed or module in stdlib_ok or top in stdlib_ok, (path.name, module)
            if top == "lidmelt":
                assert stage_of(module) in ("physics", "errors", "files"), (path.name, module)


def test_imports_go_one_way():
    for path in PACKAGE.rglob("*.py"):
        rel = path.relative_to(PACKAGE)
        own = rel.parts[0].removesuffix(".py")
        if own not in ORDER:
            continue
        for module in imported_modules(path):
            other = stage_of(module)
            if other in ORDER:
                assert ORDER.index(other) <= ORDER.index(own), (str(rel), module)
