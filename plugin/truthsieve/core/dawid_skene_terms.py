"""The two forms of one Dawid-Skene night's labels that the EM (:mod:`truthsieve.core.dawid_skene`) sums over.

Each gives the votes ``(K, m)``, the E-step's per-item log-likelihood ``(K, m)`` and the
M-step's confusion counts ``(n, K, K)``. :class:`OneHot` holds the dense ``(K, n, m)``
float64 one-hot and runs two ``einsum``; :class:`Terms` holds only the observed labels
and adds every sum in the order of those ``einsum``, so the two give the same floats
(tests/core/test_dawid_skene_sparse.py compares them with the dense EM as it was).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
import numpy.typing as npt

FloatArray = npt.NDArray[np.float64]
IntArray = npt.NDArray[np.int64]


class OneHot:
    """The dense ``(K, n, m)`` float64 one-hot and its two ``einsum`` (small nights)."""

    def __init__(self, sources: Sequence[tuple[IntArray, IntArray]], n_items: int, n_classes: int) -> None:
        n = len(sources)
        self.one_hot = np.zeros((n_classes, n, n_items))
        flat = self.one_hot.reshape(-1)
        for i, (items, classes) in enumerate(sources):
            flat[(classes.astype(np.int64) * n + i) * n_items + items] = 1.0
        self.votes = self.one_hot.sum(axis=1)  # (K, m)

    def log_likelihood(self, log_confusion: FloatArray) -> FloatArray:
        """``(K, m)``: ``sum_i log theta_i[k, y_ij]`` over item ``j``'s labels, for every ``k``."""
        result: FloatArray = np.einsum("lnm,nkl->mk", self.one_hot, log_confusion).T
        return result

    def counts(self, posterior: FloatArray) -> FloatArray:
        """``(n, K, K)``: ``sum_j T_jk [y_ij = l]`` over source ``i``'s items."""
        result: FloatArray = np.einsum("mk,lnm->nkl", posterior, self.one_hot)
        return result


class Terms:
    """The observed labels only: each item's labels as codes ``l * n + i`` (class ``l``,
    source ``i``), laid out in rounds, and each source's own items and classes.

    Round ``r`` holds every item's ``r``-th label in (class, source) order, the order in
    which the dense ``einsum`` over ``(l, n)`` adds an item's terms. Items are permuted by
    decreasing label count, so round ``r`` is a prefix of the items: the E-step adds each
    round with one gather and one slice addition, O(K |labels|) in all.
    """

    def __init__(self, sources: Sequence[tuple[IntArray, IntArray]], n_items: int, n_classes: int) -> None:
        n = len(sources)
        self.sources, self.n_items, self.n_classes = sources, n_items, n_classes
        count = np.zeros(n_items, dtype=np.int64)
        self.votes = np.zeros((n_classes, n_items))  # sums of 0/1: exact in any order
        flat_votes = self.votes.reshape(-1)
        for items, classes in sources:
            count[items] += 1
            flat_votes[classes.astype(np.int64) * n_items + items] += 1.0  # a source labels an item once
        self.perm: IntArray | None = None
        position: IntArray | None = None
        if n_items and count.min() != count.max():
            self.perm = np.argsort(-count, kind="stable")
            position = np.empty(n_items, dtype=np.int64)
            position[self.perm] = np.arange(n_items)
            count = count[self.perm]
        rounds = int(count.max()) if n_items else 0
        sizes = np.searchsorted(-count, -np.arange(rounds), side="left")  # items whose count exceeds r
        base = np.concatenate([[0], np.cumsum(sizes)]).astype(np.int64)
        flat: npt.NDArray[np.signedinteger] = np.empty(int(base[-1]), dtype=np.int32 if n * n_classes < 2**31 else np.int64)
        filled = np.zeros(n_items, dtype=np.int64)
        for label in range(n_classes):
            for i, (items, classes) in enumerate(sources):
                rows = items[classes == label]
                r = filled[rows]
                flat[base[r] + (rows if position is None else position[rows])] = label * n + i
                filled[rows] = r + 1
        self.rounds: list[npt.NDArray[np.signedinteger]] = [flat[base[r] : base[r + 1]] for r in range(rounds)]

    def log_likelihood(self, log_confusion: FloatArray) -> FloatArray:
        """``(K, m)``: ``sum_i log theta_i[k, y_ij]`` over item ``j``'s labels, for every ``k``."""
        out = np.empty((self.n_classes, self.n_items))
        for k in range(self.n_classes):
            table = np.ascontiguousarray(log_confusion[:, k, :].T).reshape(-1)  # [l * n + i]
            total = np.zeros(self.n_items)
            for codes in self.rounds:
                total[: len(codes)] += table.take(codes)
            if self.perm is None:
                out[k] = total
            else:
                out[k, self.perm] = total
        return out

    def counts(self, posterior: FloatArray) -> FloatArray:
        """``(n, K, K)``: the dense ``einsum``'s kernel and output layout (column order but
        for one source) on each source's own ``(K, 1, m)`` indicator in turn."""
        n, k = len(self.sources), self.n_classes
        counts = np.empty((n, k, k), order="C" if n == 1 else "F")
        indicator = np.zeros((k, 1, self.n_items))
        flat, dirty = indicator.reshape(-1), False
        for i, (items, classes) in enumerate(self.sources):
            if len(items) == self.n_items:  # every item: the rows are written whole
                for label in range(k):
                    np.equal(classes, label, out=indicator[label, 0])
                dirty = True
                counts[i] = np.einsum("mk,lnm->nkl", posterior, indicator)[0]
                continue
            if dirty:
                indicator.fill(0.0)
                dirty = False
            cells = classes.astype(np.int64) * self.n_items + items
            flat[cells] = 1.0
            counts[i] = np.einsum("mk,lnm->nkl", posterior, indicator)[0]
            flat[cells] = 0.0
        return counts
