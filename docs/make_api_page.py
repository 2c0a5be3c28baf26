"""Write docs/api.md, the reference of lidmelt's public names, from their docstrings.

The public names are those in ``__all__`` of the public packages (``lidmelt`` and its
subpackages whose names have no leading underscore); every other module is private and may
change without notice. Run from the repository root after changing a public docstring or
signature (a test fails while the page is out of date):

    python docs/make_api_page.py
"""

from __future__ import annotations

import importlib
import inspect
import pkgutil
import sys
from pathlib import Path

PAGE = Path(__file__).resolve().parent / "api.md"

HEADER = """# Python API

lidmelt's public names: those listed in `__all__` of the packages below. Everything else lives
in private modules (their names start with an underscore) and may change without notice.
Generated from the docstrings by `python docs/make_api_page.py`; do not edit by hand.
"""


def public_packages() -> list[str]:
    """The public packages: ``lidmelt`` and its subpackages without an underscored part."""
    import lidmelt

    names = ["lidmelt"]
    for info in pkgutil.walk_packages(lidmelt.__path__, "lidmelt."):
        parts = info.name.split(".")[1:]
        if info.ispkg and not any(p.startswith("_") for p in parts):
            names.append(info.name)
    return sorted(names)


def exported() -> list[tuple[str, str, object]]:
    """(package, name, object) for every public name, in page order."""
    out = []
    for package in public_packages():
        module = importlib.import_module(package)
        for name in module.__all__:
            out.append((package, name, getattr(module, name)))
    return out


def signature(name: str, obj: object) -> str:
    """The call signature of a function or class (its constructor), else the value's type."""
    if inspect.isclass(obj) or inspect.isfunction(obj):
        try:
            return f"{name}{inspect.signature(obj)}"
        except (TypeError, ValueError):
            return name
    return f"{name}: {type(obj).__name__}"


def entry(package: str, name: str, obj: object, first: dict[int, str]) -> str:
    """The page's section of one public name (a pointer when another package documents it)."""
    title = f"### `{package}.{name}`\n\n"
    home = first.setdefault(id(obj), f"{package}.{name}")
    if home != f"{package}.{name}" and (inspect.isclass(obj) or callable(obj)):
        anchor = home.replace(".", "").replace("_", "").lower()
        return title + f"The same object as [`{home}`](#{anchor}).\n"
    doc = inspect.getdoc(obj) if (inspect.isclass(obj) or callable(obj)) else None
    if doc is None:
        doc = attribute_doc(package, name)
    return title + f"```python\n{signature(name, obj)}\n```\n\n```text\n{doc}\n```\n"


def attribute_doc(package: str, name: str) -> str:
    """A constant's description from its package docstring's Attributes section."""
    from numpydoc.docscrape import NumpyDocString

    module = importlib.import_module(package)
    for param in NumpyDocString(inspect.getdoc(module) or "")["Attributes"]:
        if param.name == name:
            return "\n".join([param.type, *param.desc]).strip()
    return ""


def render() -> str:
    """The whole page."""
    parts = [HEADER]
    first: dict[int, str] = {}
    current = None
    for package, name, obj in exported():
        if package != current:
            current = package
            summary = (inspect.getdoc(importlib.import_module(package)) or "").split("\n\n")[0]
            parts.append(f"\n## `{package}`\n\n{summary}\n")
        parts.append("\n" + entry(package, name, obj, first))
    return "".join(parts)


def main() -> int:
    PAGE.write_text(render(), encoding="utf-8")
    print(f"wrote {PAGE}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
