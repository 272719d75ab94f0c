"""A household job on a Dask distributed cluster, partitioned over households.

The job is sent to every worker once; each chunk of households (see
:func:`dualcost.core.households.chunks_of`) becomes one task running
:func:`~dualcost.core.households.evaluate_chunk`, the very function the in-process path runs on
the very same chunk, so the results are identical bit for bit as long as the workers run the same
numpy build on the same kind of processor as the service (numpy's vectorised ``exp`` and ``log``
may round differently on another instruction set; the results then agree to rounding).

Chunks are submitted as they are read, at most ``max_in_flight`` at a time, and their results are
yielded in input order: a stream of rows in gives a stream of rows out without the whole input
in memory on either side.

Dask is imported here, on first use only: the service runs without it. Install it with
``pip install 'dualcost[cluster]'`` on the service and on every worker (the workers import
``dualcost`` to run the tasks).
"""

from __future__ import annotations

from collections import deque
from collections.abc import Iterable, Iterator
from functools import partial
from itertools import islice
from typing import Any

from ..core.errors import EngineUnavailable
from ..core.households import ChunkResult, Evaluator, HouseholdChunk, HouseholdJob, evaluate_chunk

#: Seconds to wait for the scheduler before giving up.
CONNECT_TIMEOUT = 10.0


#: The error's name before the engines had a package of their own: Dask is not installed here,
#: or the scheduler cannot be reached.
ClusterUnavailable = EngineUnavailable


def connect(scheduler: Any) -> tuple[Any, bool]:
    """A ``distributed.Client`` for ``scheduler`` (an address or a client), and whether we own it."""
    try:
        from distributed import Client
    except ImportError as exc:  # pragma: no cover - the test extra installs it
        raise EngineUnavailable("dask.distributed is not installed; install it with pip "
                                 "install 'dualcost[cluster]'") from exc
    if isinstance(scheduler, Client):
        return scheduler, False
    try:
        client = Client(scheduler, set_as_default=False,  # type: ignore[no-untyped-call]
                        timeout=CONNECT_TIMEOUT)
    except (OSError, TimeoutError) as exc:
        raise EngineUnavailable(f"the Dask scheduler at {scheduler!r} cannot be reached: "
                                 f"{exc}") from exc
    return client, True


def evaluate_partition(job: HouseholdJob, chunks: list[HouseholdChunk]) -> list[ChunkResult]:
    """One task: a few consecutive chunks, each evaluated on its own exactly as in process."""
    return [evaluate_chunk(job, chunk) for chunk in chunks]


def evaluate_on_cluster(
    job: HouseholdJob,
    chunks: Iterable[HouseholdChunk],
    scheduler: Any,
    *,
    chunks_per_task: int = 1,
    max_in_flight: int = 8,
) -> Iterator[ChunkResult]:
    """Evaluate the chunks on the cluster at ``scheduler``; results come back in input order.

    ``chunks_per_task`` consecutive chunks make one task (a partition of the households), which
    spreads the scheduler's cost per task over more rows without changing any chunk; at most
    ``max_in_flight`` tasks are submitted and not yet collected.
    """
    client, own = connect(scheduler)
    pending: deque[Any] = deque()
    source = iter(chunks)
    try:
        job_ref = client.scatter(job, broadcast=True, hash=False)
        while batch := list(islice(source, max(1, chunks_per_task))):
            pending.append(client.submit(evaluate_partition, job_ref, batch, pure=False))
            while len(pending) >= max(1, max_in_flight):
                yield from pending.popleft().result()
        while pending:
            yield from pending.popleft().result()
    finally:
        for future in pending:
            future.cancel()
        if own:
            client.close()


def cluster_evaluator(scheduler: Any, *, chunks_per_task: int = 1,
                      max_in_flight: int = 8) -> Evaluator:
    """An evaluator for :func:`dualcost.core.households.run_households` (with
    ``engine="cluster"``) that runs the chunks on the cluster at ``scheduler``, an address like
    ``"tcp://10.0.0.5:8786"`` or a ``distributed.Client``."""
    return partial(evaluate_on_cluster, scheduler=scheduler, chunks_per_task=chunks_per_task,
                   max_in_flight=max_in_flight)
