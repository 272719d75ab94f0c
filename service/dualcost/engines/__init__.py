"""Where household chunks are evaluated besides this process.

An engine takes a :class:`~dualcost.core.households.HouseholdJob` and its chunks and gives back
each chunk's :class:`~dualcost.core.households.ChunkResult`, in input order, computed by the same
:func:`~dualcost.core.households.evaluate_chunk` the core runs in process; it is passed to
:func:`~dualcost.core.households.run_households` as ``evaluate``, or its results to
:func:`~dualcost.core.households.collect`. The core never imports this package.

- :mod:`.dask`  a Dask distributed cluster (``pip install 'dualcost[cluster]'``).

Importing the package imports no engine's third-party library; each module imports its own on
first use.
"""
