"""Workflow files: the written-down options of a basin run.

A workflow file is TOML (read with the standard library's :mod:`tomllib`). It names the inputs
(plate age or lid thickness, thermal anomaly, water), the target grid, the melting and cooling
models, the compute options and the output variables. :func:`load_workflow` reads one, applies
``--set KEY=VALUE`` overrides, validates the whole tree and returns one frozen
:class:`lidmelt._config.RunConfig` with absolute paths. Every key, its unit and its default are
documented in ``docs/workflow.md``; ``workflows/template.toml`` is a commented template.

Path rules
----------
- Input paths (``inputs.<name>.path``) are relative to the folder of the workflow file.
- The output folder (``run.output_dir``, or ``-o``) is relative to the current working
  directory; its default is ``runs/<run.name>``.

Every problem raises :class:`lidmelt._errors.WorkflowError` with a message that names the file and
the dotted key, says what was expected (with the unit) and how to fix it.

Modules: :mod:`~lidmelt.workflow._checks` (single values), :mod:`~lidmelt.workflow._schema` (the
keys), :mod:`~lidmelt.workflow._inputs` and :mod:`~lidmelt.workflow._tables` (the tables),
:mod:`~lidmelt.workflow._overrides` (``--set``) and :mod:`~lidmelt.workflow._load`. The
configuration classes live in :mod:`lidmelt._config` (only :class:`RunConfig`, the type
:func:`load_workflow` returns, is re-exported here). :func:`run_basin` runs one
(``run_basin(load_workflow("workflows/demo.toml"))``), as ``lidmelt run`` does without the
maps and the report.
"""

from lidmelt._config import RunConfig
from lidmelt._engine import run_basin
from lidmelt.workflow._load import load_workflow

__all__ = [
    "RunConfig",
    "load_workflow",
    "run_basin",
]
