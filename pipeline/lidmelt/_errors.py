"""One error hierarchy for lidmelt.

Every error a user can cause derives from :class:`LidmeltError`. The command line catches that
base class, prints the message (which says what was wrong, what was expected and how to fix it)
without a traceback, and exits with status 1.
"""

from __future__ import annotations


class LidmeltError(Exception):
    """Base class of every error lidmelt raises on bad input or configuration.

    Its message says what was wrong (with the value), what was expected (with the unit) and how
    to fix it; the command line prints it on one line and exits with status 1. Catch it to
    handle any of lidmelt's errors (the subclasses name the kind: ``InputError``, ``GridError``,
    ``ModelError``, ``WorkflowError`` ...).
    """


class InputError(LidmeltError, ValueError):
    """An input value, file or grid is missing, unreadable, or out of its physical range."""


class GridError(InputError):
    """A grid lacks a CRS or coordinates, does not overlap the target, or has bad metadata."""


class ModelError(LidmeltError, ValueError):
    """An unknown melting or cooling model, or an invalid model parameter."""


class WorkflowError(LidmeltError, ValueError):
    """A workflow file is malformed, has an unknown key, or a value of the wrong type."""


class RunDirError(LidmeltError, ValueError):
    """A folder given as a run directory is not one written by ``lidmelt run``."""


class ClusterError(LidmeltError, RuntimeError):
    """The dask scheduler of a run cannot be reached, or its workers fail or cannot run it."""
