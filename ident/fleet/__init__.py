"""Fleets: the same pipeline on the log of every unit, run on Dask, and a fleet report.

``units`` names the units and turns one log into one result (the job a worker runs),
``engine`` sends the jobs to a ``distributed`` cluster (an embedded one by default),
``aggregate`` matches modes across units and finds the odd ones out, and ``run`` ties
them together into a fleet run folder (:func:`ident.fleet.run.run_fleet`). This package
sits at the pipeline layer: it may import :mod:`ident.pipeline` and everything below.
This ``__init__`` imports nothing, so importing one module loads only what it needs.
"""
