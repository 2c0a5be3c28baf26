"""The public face: few exported names, each documented in numpydoc form, options by keyword.

Check values: the bounds the API issue set (at most about 80 exported names; every exported
name with a numpydoc docstring); the numpydoc docstring standard (numpydoc's own validator,
``numpydoc.validate``, with the checks listed in ``CHECKS``); keyword-only options, at most
three positional parameters (the project's rule, DEVELOPERS.md "Public face").
"""

import doctest
import importlib.util
import inspect
import sys
from pathlib import Path

import numpydoc.validate
import pytest
from numpydoc.docscrape import NumpyDocString

ROOT = Path(__file__).resolve().parents[1]
spec = importlib.util.spec_from_file_location("make_api_page", ROOT / "docs" / "make_api_page.py")
api_page = importlib.util.module_from_spec(spec)
spec.loader.exec_module(api_page)

EXPORTED = api_page.exported()
MAX_EXPORTED = 80
MAX_POSITIONAL = 3
#: numpydoc validator checks every exported docstring passes: a docstring, a one-line summary
#: in the imperative ending with a period, every parameter documented in order, with a type
#: and a description, and a Returns (or Yields) section with a description.
CHECKS = {
    "GL08",
    "SS01",
    "SS03",
    "SS05",
    "PR01",
    "PR02",
    "PR03",
    "PR06",
    "PR07",
    "PR09",
    "PR10",
    "RT01",
    "RT03",
    "YD01",
}


def ids(item):
    return f"{item[0]}.{item[1]}"


def documented_object(item):
    """Classes and functions carry their own docstring; constants are described in their
    package docstring's Attributes section."""
    return inspect.isclass(item[2]) or inspect.isfunction(item[2])


def test_exported_names_are_few():
    assert 20 <= len(EXPORTED) <= MAX_EXPORTED, [ids(i) for i in EXPORTED]


def test_public_packages_are_the_documented_ones():
    assert api_page.public_packages() == [
        "lidmelt",
        "lidmelt.cli",
        "lidmelt.ensemble",
        "lidmelt.grids",
        "lidmelt.motion",
        "lidmelt.physics",
        "lidmelt.products",
        "lidmelt.workflow",
    ]


@pytest.mark.parametrize("item", [i for i in EXPORTED if documented_object(i)], ids=ids)
def test_exported_names_have_numpydoc_docstrings(item):
    _, _, obj = item
    result = numpydoc.validate.validate(f"{obj.__module__}.{obj.__qualname__}")
    errors = [f"{code} {msg}" for code, msg in result["errors"] if code in CHECKS]
    assert not errors, errors


@pytest.mark.parametrize("item", [i for i in EXPORTED if not documented_object(i)], ids=ids)
def test_exported_constants_are_described_in_their_package(item):
    package, name, _ = item
    module = importlib.import_module(package)
    attributes = NumpyDocString(inspect.getdoc(module))["Attributes"]
    found = [a for a in attributes if a.name == name]
    assert found, f"{package} docstring: no Attributes entry for {name}"
    assert found[0].desc, f"{package} docstring: {name} has no description"


@pytest.mark.parametrize("item", [i for i in EXPORTED if inspect.isfunction(i[2])], ids=ids)
def test_exported_functions_take_options_by_keyword(item):
    params = inspect.signature(item[2]).parameters.values()
    positional = [p for p in params if p.kind in (p.POSITIONAL_ONLY, p.POSITIONAL_OR_KEYWORD)]
    assert len(positional) <= MAX_POSITIONAL, [p.name for p in positional]


@pytest.mark.parametrize("item", [i for i in EXPORTED if documented_object(i)], ids=ids)
def test_docstring_examples_run(item):
    package, name, obj = item
    finder = doctest.DocTestFinder(recurse=False)
    runner = doctest.DocTestRunner(optionflags=doctest.NORMALIZE_WHITESPACE)
    globs = {**vars(sys.modules[obj.__module__]), **vars(importlib.import_module(package))}
    for test in finder.find(obj, name, globs=globs):
        result = runner.run(test)
        assert result.failed == 0, f"{package}.{name}: {result.failed} example(s) failed"


def test_api_page_is_current():
    """docs/api.md is what ``python docs/make_api_page.py`` writes from today's docstrings."""
    assert api_page.PAGE.read_text(encoding="utf-8") == api_page.render(), (
        "docs/api.md is out of date: run 'python docs/make_api_page.py'"
    )


def test_readme_python_example_runs():
    """The README's "From Python" lines run as written, and broadcast as they say."""
    text = (ROOT / "README.md").read_text(encoding="utf-8")
    block = text.split("From Python:\n\n", 1)[1].split("\n\n", 1)[0]
    lines = [line[4:] for line in block.splitlines()]
    assert lines, text
    assert all(line.strip() for line in lines), block
    scope: dict = {}
    exec("\n".join(lines), scope)  # the README's own example
    assert scope["r"].melt_thickness_km.shape == (2,)
    assert scope["variant"].cpx_mass_fraction == 0.15
