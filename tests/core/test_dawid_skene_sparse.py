"""The Dawid-Skene fit from observed labels only gives the dense one-hot EM's floats.

Oracle: tests/core/reference_dawid_skene.py, the dense EM as it was. Both forms of the
production fit (the dense one-hot for small nights, the observed labels above
``DENSE_CELLS``) are compared with it bit for bit on random nights: partial and full
coverage, sources and items without labels, K from 2 to 9, one source or many.
"""

from __future__ import annotations

import numpy as np
import pytest

from reference_dawid_skene import dawid_skene as dense_reference
from truthsieve.core.dawid_skene import dawid_skene, dawid_skene_sparse

FIELDS = ("prior", "confusion", "posterior")


def random_night(seed: int):
    rng = np.random.default_rng(seed)
    n, m, k = int(rng.integers(1, 14)), int(rng.integers(1, 1500)), int(rng.integers(2, 10))
    truth = rng.integers(0, k, m)
    labels = np.where(rng.random((n, m)) < rng.uniform(0.3, 0.95), truth, rng.integers(0, k, (n, m)))
    labelled = rng.random((n, m)) < rng.uniform(0.05, 1.0)
    shape = rng.integers(0, 4)
    if shape == 1:
        labelled[:] = True  # every source labels every item
    elif shape == 2:
        labelled[rng.random(n) < 0.5] = True  # some sources label everything, some a part
    elif shape == 3 and n > 1:
        labelled[0] = False  # a source with no label at all
    return labels, labelled, k


def sparse_sources(labels, labelled):
    return [(np.flatnonzero(seen), row[seen]) for row, seen in zip(labels, labelled)]


def assert_same_fit(fit, reference):
    for name in FIELDS:
        np.testing.assert_array_equal(getattr(fit, name), getattr(reference, name), err_msg=name)
    assert (fit.iterations, fit.converged) == (reference.iterations, reference.converged)


@pytest.mark.parametrize("seed", range(40))
def test_the_observed_label_fit_is_the_dense_fit_float_for_float(seed):
    labels, labelled, k = random_night(seed)
    reference = dense_reference(labels, labelled, n_classes=k, max_iterations=40)
    sources = sparse_sources(labels, labelled)
    assert_same_fit(dawid_skene_sparse(sources, labels.shape[1], k, max_iterations=40, dense_cells=0), reference)
    assert_same_fit(dawid_skene_sparse(sources, labels.shape[1], k, max_iterations=40, dense_cells=10**12), reference)
    assert_same_fit(dawid_skene(labels, labelled, n_classes=k, max_iterations=40), reference)


def test_the_comparison_can_fail():
    # a different summation order moves the last bits: the oracle would see it
    labels, labelled, k = random_night(3)
    reference = dense_reference(labels, labelled, n_classes=k)
    reordered = dawid_skene_sparse(sparse_sources(labels[::-1], labelled[::-1]), labels.shape[1], k, dense_cells=0)
    assert not np.array_equal(reordered.posterior, reference.posterior)


def test_a_night_large_enough_for_the_observed_label_form_without_forcing_it():
    # 3 classes x 40 sources x 70,000 items is above DENSE_CELLS: the default takes the sparse form
    rng = np.random.default_rng(12)
    n, m, k = 40, 70_000, 3
    truth = rng.integers(0, k, m)
    labels = np.where(rng.random((n, m)) < 0.8, truth, rng.integers(0, k, (n, m)))
    labelled = rng.random((n, m)) < 0.1
    from truthsieve.core.dawid_skene import DENSE_CELLS

    assert k * n * m > DENSE_CELLS
    assert_same_fit(dawid_skene(labels, labelled, n_classes=k), dense_reference(labels, labelled, n_classes=k))


def test_bad_sparse_input_is_refused():
    with pytest.raises(ValueError, match="not a class index"):
        dawid_skene_sparse([(np.array([0, 1]), np.array([0, 2]))], 2, 2)
    with pytest.raises(ValueError, match="increasing"):
        dawid_skene_sparse([(np.array([1, 0]), np.array([0, 1]))], 2, 2)
    with pytest.raises(ValueError, match="increasing"):
        dawid_skene_sparse([(np.array([0, 2]), np.array([0, 1]))], 2, 2)
    with pytest.raises(ValueError, match="one class index per item"):
        dawid_skene_sparse([(np.array([0, 1]), np.array([0]))], 2, 2)
