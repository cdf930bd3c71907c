"""The per-source analysis of one night on a pool of processes (the command line's cores).

Each source's analysis is independent of the others' given the night's totals and the
fit, so the command line hands sources to a ``concurrent.futures.ProcessPoolExecutor``
whose workers run the very step an Airflow mapped task runs,
:func:`truthsieve.pipeline.night.analyse_source`, over the same work area. Each worker
reads the fit once (:func:`~truthsieve.pipeline.night.read_fit`) and then one source's
labels per task. Every result is a deterministic function of those inputs, and the
results come back in source order, so the night's files are byte-identical to a
one-process run.

Workers start with ``forkserver`` (``spawn`` where it is missing), never ``fork``: the
parent may hold threads (pyarrow's pools). A pool of 1 starts no process at all.
"""

from __future__ import annotations

import multiprocessing
import os

from truthsieve.core.incentives import SourceIncentive
from truthsieve.pipeline.config import Config

#: Labels below which an automatic pool (``workers=None``) stays in process. Measured
#: on the 2-core machine with the command line: a pool of 2 was slower at every size
#: tried (10M labels: 10.5 s against 9.5 s in process; 100M: 130 s against 113 s),
#: since the per-source analysis is about a tenth of a night and the workers must read
#: the fit and the labels back from the store. The limit sits above anything measured.
AUTOMATIC_POOL_LABELS = 500_000_000

_worker: dict = {}


def machine_cores() -> int:
    """The cores this process may run on."""
    if hasattr(os, "sched_getaffinity"):
        return len(os.sched_getaffinity(0))
    return os.cpu_count() or 1


def pool_size(workers: int | None, n_sources: int, n_labels: int) -> int:
    """How many processes analyse the sources: ``workers`` as asked (None: the machine's
    cores once the night has :data:`AUTOMATIC_POOL_LABELS` labels), at most one per source."""
    if workers is None:
        workers = machine_cores() if n_labels >= AUTOMATIC_POOL_LABELS else 1
    return max(1, min(workers, n_sources))


def start_context() -> multiprocessing.context.BaseContext:
    """``forkserver`` with the analysis modules imported once in the server (each worker is
    then a fork of that single-threaded server, not a fresh interpreter); ``spawn`` where
    there is no forkserver. Calling it early starts the server while the night is validated."""
    if "forkserver" not in multiprocessing.get_all_start_methods():
        return multiprocessing.get_context("spawn")
    context = multiprocessing.get_context("forkserver")
    context.set_forkserver_preload(["truthsieve.pipeline.night", "truthsieve.pipeline.source_pool"])
    from multiprocessing import forkserver

    forkserver.ensure_running()
    return context


def _start_worker(store, batch_date: str, config: Config) -> None:
    from truthsieve.pipeline.night import read_fit

    _worker.update(store=store, batch_date=batch_date, config=config, fit=read_fit(store, batch_date, config))


def _analyse(source_id: str) -> SourceIncentive:
    from truthsieve.pipeline.night import analyse_source

    return analyse_source(_worker["store"], _worker["batch_date"], _worker["config"], source_id, _worker["fit"])


def analyse_sources(store, batch_date: str, config: Config, fit, workers: int | None = 1) -> list[SourceIncentive]:
    """:func:`~truthsieve.pipeline.night.analyse_source` for every valid source, in source order.

    :param fit: the night's :class:`~truthsieve.pipeline.night.Fit`, already in the work area
        (written out first if the store holds it in memory).
    :param workers: processes (1: this one; None: see :func:`pool_size`).
    """
    from truthsieve.pipeline.night import analyse_source

    source_ids = fit.source_ids
    size = pool_size(workers, len(source_ids), sum(len(s.items) for s in fit.sources.values()))
    if size == 1:
        return [analyse_source(store, batch_date, config, s, fit) for s in source_ids]
    from concurrent.futures import ProcessPoolExecutor

    store.spill_work(batch_date)  # the workers read the fit and the labels from the store
    chunk = max(1, len(source_ids) // (4 * size))
    with ProcessPoolExecutor(size, start_context(), _start_worker, (store, batch_date, config)) as pool:
        return list(pool.map(_analyse, source_ids, chunksize=chunk))
