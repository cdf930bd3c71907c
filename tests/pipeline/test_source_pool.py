"""``pipeline/source_pool.py`` on its own: the cores a process may use, the pool's size, and a
real pool of two processes giving the one-process results (the whole-night byte identity and
``pool_size``'s main rules are in ``test_night_split.py``)."""

from __future__ import annotations

import os
import subprocess
import sys

import pytest

from hand_night import DATE, hand_night, validate_night
from truthsieve.pipeline import night
from truthsieve.pipeline.night_fit import read_fit
from truthsieve.pipeline.source_pool import AUTOMATIC_POOL_LABELS, analyse_sources, machine_cores, pool_size
from truthsieve.pipeline.store import LocalStore

pytestmark = pytest.mark.skipif(not hasattr(os, "sched_setaffinity"), reason="needs CPU affinity (Linux)")

_PINNED = """
import os, sys
from truthsieve.pipeline.source_pool import AUTOMATIC_POOL_LABELS, machine_cores, pool_size
os.sched_setaffinity(0, {min(os.sched_getaffinity(0))})  # allowed one core only
print(machine_cores(), pool_size(None, 10, AUTOMATIC_POOL_LABELS), os.cpu_count())
"""


def test_machine_cores_counts_the_cores_this_process_may_use_not_the_machines():
    done = subprocess.run([sys.executable, "-c", _PINNED], capture_output=True, text=True, timeout=120, check=True)
    cores, automatic, machine = map(int, done.stdout.split())
    if machine == 1:
        pytest.skip("a one-core machine cannot tell allowed cores from the machine's")
    assert cores == 1  # pinned to one core: one, even on a machine of `machine` cores
    assert automatic == 1  # an automatic pool on a big night gets the cores it may use


def test_machine_cores_is_the_affinity_set_here():
    assert machine_cores() == len(os.sched_getaffinity(0)) >= 1


@pytest.mark.parametrize(
    ("workers", "n_sources", "n_labels", "size"),
    [
        (0, 5, 0, 1),  # never fewer than one process
        (-3, 5, 0, 1),
        (4, 0, 0, 1),  # a night without sources still gets one (it runs nothing)
        (2, 2, 0, 2),  # one per source at most: exactly as many as sources
        (None, 1, AUTOMATIC_POOL_LABELS * 10, 1),  # a big night with one source: no pool
    ],
)
def test_pool_size_edges(workers, n_sources, n_labels, size):
    assert pool_size(workers, n_sources, n_labels) == size


def test_an_automatic_pool_on_a_big_night_gets_every_allowed_core_up_to_the_sources():
    cores = machine_cores()
    assert pool_size(None, 10**6, AUTOMATIC_POOL_LABELS) == cores
    assert pool_size(None, 10**6, AUTOMATIC_POOL_LABELS - 1) == 1


def test_two_worker_processes_give_the_one_process_results_in_source_order(tmp_path):
    store, config = hand_night(tmp_path, validate=False)
    with store.work_in_memory():  # the pool must write the held work out first: its workers read the store
        validate_night(store, config)
        fit = night.fit_consensus(store, DATE, config)
        alone = analyse_sources(store, DATE, config, fit, workers=1)
        pooled = analyse_sources(store, DATE, config, fit, workers=2)
    assert [r.source_id for r in alone] == ["s1", "s2", "s3"]
    assert pooled == alone
    # the held work area went to disk before the pool started (its documented order), not only pickled along
    assert read_fit(LocalStore(store.inbox, store.out), DATE, config).consensus == fit.consensus
