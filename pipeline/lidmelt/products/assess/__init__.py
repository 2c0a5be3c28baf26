"""How good is the map? Scoring a run against the features a user already knows.

:func:`assess` (:mod:`.assessment`) ranks the cells of known features against every ocean cell
of the run, weighted by area: the success-rate curve and its AUC with a 90 % interval, weights
of evidence at a few thresholds, the features in each candidate region; :func:`write_assessment`
writes the JSON and the success-rate figure (:mod:`.figure`). ``lidmelt assess`` is the command;
an ensemble run with ``[assess] features`` scores every member too
(:mod:`lidmelt.ensemble.posterior`).
"""

from lidmelt.products.assess.assessment import assess, default_variable
from lidmelt.products.assess.figure import posterior_figure, success_rate_figure
from lidmelt.products.assess.write import ASSESS_NAME, FIGURE_NAME, write_assessment

__all__ = [
    "ASSESS_NAME",
    "FIGURE_NAME",
    "assess",
    "default_variable",
    "posterior_figure",
    "success_rate_figure",
    "write_assessment",
]
