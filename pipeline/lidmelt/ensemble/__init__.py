"""Ensembles: members drawn from distributions of workflow keys, reduced chunk by chunk.

:mod:`~lidmelt.ensemble._sampling` draws the members (Latin hypercube or random),
:mod:`~lidmelt.ensemble._kernel` evaluates and reduces every member of one chunk (probabilities,
percentiles, basin totals, candidate volumes), :mod:`~lidmelt.ensemble._drivers` ranks what
drives the basin melt volume, :mod:`~lidmelt.ensemble._candidates` what drives each candidate's
volume, and :mod:`~lidmelt.ensemble._stage` runs it all as an extra stage of
:func:`lidmelt._engine.run_basin` (``run_basin(cfg, extra_stages=ensemble_stages(cfg))``).
"""

from lidmelt.ensemble._stage import ensemble_stages, estimate_memory_bytes

__all__ = [
    "ensemble_stages",
    "estimate_memory_bytes",
]
