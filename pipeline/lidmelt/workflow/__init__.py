"""Workflow files: the written-down options of a basin run.

A workflow file is TOML (read with the standard library's :mod:`tomllib`). It names the inputs
(plate age or lid thickness, thermal anomaly, water), the target grid, the melting and cooling
models, the compute options and the output variables. :func:`load_workflow` reads one, applies
``--set KEY=VALUE`` overrides, validates the whole tree and returns one frozen
:class:`lidmelt.config.RunConfig` with absolute paths. Every key, its unit and its default are
documented in ``docs/workflow.md``; ``workflows/template.toml`` is a commented template.

Path rules
----------
- Input paths (``inputs.<name>.path``) are relative to the folder of the workflow file.
- The output folder (``run.output_dir``, or ``-o``) is relative to the current working
  directory; its default is ``runs/<run.name>``.

Every problem raises :class:`lidmelt.errors.WorkflowError` with a message that names the file and
the dotted key, says what was expected (with the unit) and how to fix it.

Modules: :mod:`~lidmelt.workflow.checks` (single values), :mod:`~lidmelt.workflow.schema` (the
keys), :mod:`~lidmelt.workflow.inputs` and :mod:`~lidmelt.workflow.tables` (the tables),
:mod:`~lidmelt.workflow.overrides` (``--set``) and :mod:`~lidmelt.workflow.load`. The
configuration classes live in :mod:`lidmelt.config` (only :class:`RunConfig`, the type
:func:`load_workflow` returns, is re-exported here). :func:`run_basin` runs one
(``run_basin(load_workflow("workflows/demo.toml"))``), as ``lidmelt run`` does without the
maps and the report.
"""

from lidmelt.config import RunConfig
from lidmelt.workflow.load import load_workflow, validate_models

__all__ = ["RunConfig", "load_workflow", "validate_models"]
