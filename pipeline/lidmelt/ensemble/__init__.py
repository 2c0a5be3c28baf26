"""Ensembles: members drawn from distributions of workflow keys, reduced chunk by chunk.

:mod:`~lidmelt.ensemble.sampling` draws the members (Latin hypercube or random),
:mod:`~lidmelt.ensemble.kernel` evaluates and reduces every member of one chunk (probabilities,
percentiles, basin totals, candidate volumes), :mod:`~lidmelt.ensemble.drivers` ranks what
drives the basin melt volume, :mod:`~lidmelt.ensemble.candidates` what drives each candidate's
volume, and :mod:`~lidmelt.ensemble.stage` runs it all as an extra stage of
:func:`lidmelt.engine.run_basin` (``run_basin(cfg, extra_stages=ensemble_stages(cfg))``).
"""

from lidmelt.ensemble.stage import MEMBERS_FILE, ensemble_stages, estimate_memory_bytes

__all__ = ["MEMBERS_FILE", "ensemble_stages", "estimate_memory_bytes"]
