"""How good is the map? Scoring a run against the features a user already knows.

:func:`assess` (:mod:`._assessment`) ranks the cells of known features against every ocean cell
of the run, weighted by area: the success-rate curve and its AUC with a 90 % interval, weights
of evidence at a few thresholds, the features in each candidate region; :func:`write_assessment`
writes the JSON and the success-rate figure (:mod:`._figure`). ``lidmelt assess`` is the command;
an ensemble run with ``[assess] features`` scores every member too
(:mod:`lidmelt.ensemble._posterior`).
"""
