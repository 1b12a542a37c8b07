"""A local dask cluster whose workers run saxsnb's numpy code as fast as in-process.

``dask.distributed`` starts each worker with ``MALLOC_TRIM_THRESHOLD_=65536`` (its
``distributed.nanny.pre-spawn-environ`` default, meant to hand freed memory back to the
system). Setting that variable at all switches off glibc's dynamic mmap threshold
(mallopt(3): M_TRIM_THRESHOLD, M_MMAP_THRESHOLD), so every array above 128 kB is a
fresh ``mmap`` whose pages fault in on first touch, and is unmapped again when freed.
The analyses make many (frame, q) temporaries per chunk; on a worker they then run
about 2x slower than the same call in the client (measured by
``benchmarks/bench_scale.py``, which prints both). :func:`cluster` starts a
``LocalCluster`` whose workers keep glibc's own policy (the variable left unset),
like a plain Python process.

For workers started elsewhere (``dask worker`` on a facility's nodes, dask-jobqueue
for SLURM/PBS), apply :data:`WORKER_CONFIG` with ``dask.config.set`` before the
cluster object is made, or leave ``MALLOC_TRIM_THRESHOLD_`` unset in the job's
environment; see docs/scaling.md.
"""

from __future__ import annotations

import os
from typing import Any

__all__ = ["cluster", "WORKER_CONFIG", "fast_malloc_config"]

#: dask config that leaves the worker's malloc policy to glibc (a value of None
#: removes a variable from distributed's pre-spawn environment).
WORKER_CONFIG: dict[str, Any] = {"distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_": None}

# distributed's own default; a nanny writes its pre-spawn environment into the process
# that starts it, so a cluster started earlier in this process leaves it behind
_DISTRIBUTED_DEFAULT = "65536"


def fast_malloc_config():
    """A ``dask.config.set`` context with :data:`WORKER_CONFIG` (and the variable that an
    earlier default cluster left in this process's environment removed).

    Examples
    --------
    >>> import dask
    >>> with fast_malloc_config():
    ...     print(dask.config.get("distributed.nanny.pre-spawn-environ.MALLOC_TRIM_THRESHOLD_"))
    None
    """
    import dask

    if os.environ.get("MALLOC_TRIM_THRESHOLD_") == _DISTRIBUTED_DEFAULT:
        del os.environ["MALLOC_TRIM_THRESHOLD_"]
    return dask.config.set(WORKER_CONFIG)


def cluster(n_workers: int = 2, *, threads_per_worker: int = 1, memory_limit: str | float = "2GB",
            fast_malloc: bool = True, **options):
    """Start a ``dask.distributed`` LocalCluster and return a Client connected to it.

    Parameters
    ----------
    n_workers, threads_per_worker, memory_limit
        As for ``distributed.LocalCluster`` (one thread per worker process suits the
        analyses: they hold the GIL in numpy for short stretches only, and processes
        scale without contention).
    fast_malloc : bool
        Start the workers with glibc's own malloc policy (see the module notes); False
        keeps distributed's default, for comparison.
    **options
        Passed on to ``distributed.Client`` / ``LocalCluster`` (``dashboard_address``,
        ``processes``, ...).

    Returns
    -------
    distributed.Client; ``client.close()`` also shuts the cluster down. Every dask
    computation in the process then runs on it: ``ds.saxs.guinier().compute()``.

    Examples
    --------
    >>> import saxsnb
    >>> client = saxsnb.cluster(1, dashboard_address=None)  # doctest: +SKIP
    >>> client.close()  # doctest: +SKIP
    """
    from distributed import Client

    options.setdefault("dashboard_address", None)
    kwargs = dict(n_workers=int(n_workers), threads_per_worker=int(threads_per_worker),
                  memory_limit=memory_limit, **options)
    if not fast_malloc:
        return Client(**kwargs)
    with fast_malloc_config():
        return Client(**kwargs)
