"""Checks of a run's tables: the quality limits a lab sets, and regression against the results
it accepted; the jobs behind ``spikemeasure check`` and ``spikemeasure accept``.

The stages, each its own module:

- :mod:`~spikemeasure.checks.rules`: the keys of ``[quality]`` (each rule declared once) and of
  ``[regression]``;
- :mod:`~spikemeasure.checks.settings`: those tables read from the project file
  (:class:`~spikemeasure.checks.settings.CheckSettings`, tolerances);
- :mod:`~spikemeasure.checks.run_tables`: a run's tables as typed columns, read from a results
  folder or taken from a run in the same process; refusing unfinished runs;
- :mod:`~spikemeasure.checks.findings`: what a check found, and the text and JSON reports;
- :mod:`~spikemeasure.checks.limits`: the quality limits applied;
- :mod:`~spikemeasure.checks.regression`: the comparison with the accepted results;
- :mod:`~spikemeasure.checks.apply`: every check on a run (:func:`~spikemeasure.checks.apply.
  check_tables` on typed tables, :func:`~spikemeasure.checks.apply.check_run` on a folder);
- :mod:`~spikemeasure.checks.accept`: a run saved as the accepted results;
- :mod:`~spikemeasure.checks.junit`: the report as JUnit XML.

Nothing here prints or exits. This file imports none of them, since
:mod:`spikemeasure.config` reads :mod:`~spikemeasure.checks.rules` to name the keys of every
table of the project file.
"""
