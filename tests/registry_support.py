"""Register a test-local entry in one of the core's registries for the duration of a ``with``."""

from __future__ import annotations

from contextlib import contextmanager

import numpy as np


@contextmanager
def registered(registry, entry):
    registry.register(entry)
    try:
        yield entry
    finally:
        registry.unregister(entry.name)


def squared_scores(present, registry_total):
    """A test-only dictator score ``a_j = w_j^2`` (fixed by the registry weights, so strategy-proof)."""
    return np.asarray(present, dtype=np.float64) ** 2
