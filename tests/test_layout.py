"""The architecture holds: one-way imports, no circles, no private imports, small modules.

Check values: the project's layout rule (DEVELOPERS.md, "Layout"): physics imports numpy and
scipy only; imports go one way, base modules <- physics <- grids <- engine <- ensemble and
motion <- products <- workflow <- cli; no import circle inside one layer; no module imports
another module's private (underscore) names; ``__all__`` only in the public packages'
``__init__`` (every other module is private, underscored); modules stay under 600 lines and
functions under 80 (the limits the layout issue set; common practice).
"""

import ast
from pathlib import Path

import pytest

PACKAGE = Path(__file__).resolve().parents[1] / "pipeline" / "lidmelt"
#: Modules every layer may import: errors, the variable registry, the atomic write, the config.
BASE = ["__init__", "errors", "variables", "files", "config", "config_tables"]
#: The layers from the bottom up; a module may import its own layer and those below it.
LAYERS = [
    {"physics"},
    {"grids"},
    {"engine", "cluster", "statistics", "progress", "run_inputs", "run_store"},
    {"ensemble", "motion"},
    {"products"},
    {"workflow"},
    {"cli"},
]


def layer_of(stage: str) -> int:
    """The index of the layer that holds ``stage`` (every module must have one)."""
    return next(k for k, names in enumerate(LAYERS) if stage in names)


MAX_MODULE_LINES = 600
MAX_FUNCTION_LINES = 80
#: Functions allowed to be longer, with the reason (listed in the layout issue's closing note).
LONG_FUNCTIONS: dict[str, str] = {}


def modules() -> dict[str, Path]:
    """Dotted module name -> file, for every module of the package."""
    out = {}
    for path in PACKAGE.rglob("*.py"):
        parts = ["lidmelt", *path.relative_to(PACKAGE).with_suffix("").parts]
        if parts[-1] == "__init__":
            parts = parts[:-1]
        out[".".join(parts)] = path
    return out


def imports_of(path: Path) -> list[tuple[str, str | None]]:
    """(module, name) pairs imported anywhere in ``path``; name is None for ``import module``."""
    tree = ast.parse(path.read_text(encoding="utf-8"))
    found: list[tuple[str, str | None]] = []
    for node in ast.walk(tree):
        if isinstance(node, ast.Import):
            found.extend((alias.name, None) for alias in node.names)
        elif isinstance(node, ast.ImportFrom) and node.module and node.level == 0:
            found.extend((node.module, alias.name) for alias in node.names)
    return found


def lidmelt_targets(path: Path, known: dict[str, Path]) -> set[str]:
    """The lidmelt modules that ``path`` imports (a ``from M import sub`` of a module counts)."""
    out = set()
    for module, name in imports_of(path):
        if not module.startswith("lidmelt"):
            continue
        out.add(f"{module}.{name}" if name and f"{module}.{name}" in known else module)
    return out


def stage_of(module: str) -> str:
    """The layer name of a module: its first part below lidmelt, without the private underscore."""
    parts = module.split(".")
    if len(parts) == 1:
        return "__init__"
    return parts[1] if parts[1].startswith("__") else parts[1].lstrip("_")


def test_physics_uses_numpy_and_scipy_only():
    # numba compiles the melting kernel (lidmelt.physics._kernel; the numpy path stays without it)
    allowed_top = {"numpy", "scipy", "numba", "lidmelt"}
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
        "threading",
        "time",
        "weakref",
        # the melting tables' cache files, mapped into memory (physics/_tablecache.py)
        "io",
        "mmap",
        "struct",
        "zipfile",
    }
    for path in (PACKAGE / "physics").glob("*.py"):
        for module, _ in imports_of(path):
            top = module.split(".")[0]
            assert top in allowed_top or top in stdlib_ok, (path.name, module)
            if top == "lidmelt":
                # the registry (a base module, numpy only) holds the regime's class values and
                # the least anomaly melt the regime applies: one place for both (DEVELOPERS.md)
                allowed = ("physics", "errors", "files", "variables")
                assert stage_of(module) in allowed, (path.name, module)


def test_imports_go_one_way():
    known = modules()
    for name, path in known.items():
        own = stage_of(name)
        for target in lidmelt_targets(path, known):
            other = stage_of(target)
            if own == "__main__" or name == "lidmelt":
                continue  # the entry point and the package's face sit above every layer
            if own in BASE:
                assert other in BASE, (name, target)
            elif other not in BASE:
                assert layer_of(other) <= layer_of(own), (name, target)


def test_every_module_belongs_to_a_layer():
    stages = {stage_of(name) for name in modules()} - {"__main__"}
    unplaced = [s for s in stages if s not in BASE and not any(s in names for names in LAYERS)]
    assert not unplaced, f"modules outside the layers of this test: {unplaced}"


def test_no_import_circles_inside_a_layer():
    known = modules()
    graph = {
        name: {t for t in lidmelt_targets(path, known) if t in known and t != name}
        for name, path in known.items()
    }

    def package_of(module: str) -> str:
        return module.rsplit(".", 1)[0]

    # a package's __init__ re-exporting its submodules is not a circle
    for name in graph:
        graph[name] = {t for t in graph[name] if not (name == package_of(t) and name in known)}

    def cycle_from(start: str) -> list[str] | None:
        stack = [(start, [start])]
        while stack:
            node, trail = stack.pop()
            for nxt in graph.get(node, ()):
                if nxt == start:
                    return [*trail, start]
                if nxt not in trail and stage_of(nxt) == stage_of(start):
                    stack.append((nxt, [*trail, nxt]))
        return None

    for name in graph:
        assert cycle_from(name) is None, cycle_from(name)


def test_no_imports_of_private_names():
    """Private modules are lidmelt's inside (any lidmelt module may import them); a private
    name (``_helper``) is imported only inside the module or package that owns it."""
    known = modules()
    for name, path in known.items():
        for module, imported in imports_of(path):
            if not module.startswith("lidmelt") or imported is None:
                continue
            if f"{module}.{imported}" in known or not imported.startswith("_"):
                continue
            if imported.startswith("__"):
                continue
            inside = name == module or name.startswith(module + ".")
            assert inside, f"{name} imports {module}.{imported}, private to {module}"


def is_private(module: str) -> bool:
    """A module or package is private when any part of its name below lidmelt is underscored."""
    return any(p.startswith("_") and not p.startswith("__") for p in module.split(".")[1:])


def test_all_only_in_public_package_inits():
    """``__all__`` lives only in the ``__init__`` of a public package (the public face); every
    other module is private and its file name says so with a leading underscore."""
    for name, path in modules().items():
        tree = ast.parse(path.read_text(encoding="utf-8"))
        names = {
            t.id
            for node in tree.body
            if isinstance(node, ast.Assign | ast.AnnAssign)
            for t in (node.targets if isinstance(node, ast.Assign) else [node.target])
            if isinstance(t, ast.Name)
        }
        public_package = path.name == "__init__.py" and not is_private(name)
        assert ("__all__" in names) == public_package, name
        if path.name not in ("__init__.py", "__main__.py"):
            assert is_private(name), f"{name}: a module outside the public face is underscored"


@pytest.mark.parametrize("path", sorted(PACKAGE.rglob("*.py")), ids=lambda p: p.name)
def test_modules_and_functions_are_small(path):
    text = path.read_text(encoding="utf-8")
    assert len(text.splitlines()) <= MAX_MODULE_LINES, path.relative_to(PACKAGE)
    for node in ast.walk(ast.parse(text)):
        if isinstance(node, ast.FunctionDef | ast.AsyncFunctionDef):
            length = node.end_lineno - node.lineno + 1
            key = f"{path.relative_to(PACKAGE)}:{node.name}"
            assert length <= MAX_FUNCTION_LINES or key in LONG_FUNCTIONS, (key, length)
