"""The mutation probe stays runnable: each deliberate bug's text occurs once in its file.

Check values: benchmarks/probe_mutations.py applies each mutation by replacing ``old`` with
``new`` in ``file``; a refactoring that changes the text would leave the probe unable to apply
that bug (it stops with a message), so this test fails first, naming it.
"""

import importlib.util
import sys
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parents[1]
spec = importlib.util.spec_from_file_location(
    "probe_mutations", ROOT / "benchmarks" / "probe_mutations.py"
)
probe = importlib.util.module_from_spec(spec)
sys.modules["probe_mutations"] = probe  # dataclasses look their module up by name
spec.loader.exec_module(probe)


@pytest.mark.parametrize("mutation", probe.MUTATIONS, ids=lambda m: m.name)
def test_each_mutation_applies_once(mutation):
    text = (ROOT / mutation.file).read_text(encoding="utf-8")
    assert text.count(mutation.old) == 1, (mutation.file, mutation.old)
    assert mutation.new != mutation.old
    for node in mutation.tests:
        assert (ROOT / node.split("::")[0]).is_file(), node
