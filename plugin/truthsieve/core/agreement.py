"""Agreement between sources for K categories: Cohen's kappa, Fleiss' kappa, Krippendorff's
nominal alpha.

Labels are class indices ``0..K-1``; a missing label is marked by a mask or by ``-1``.
``K`` is given explicitly (default 2). The statistics themselves only depend on the
categories that occur, so a class nobody used adds nothing; ``K`` is there to check the
labels and to lay out the count table.
"""

from __future__ import annotations

from collections.abc import Sequence
from fractions import Fraction
from typing import Any

import numpy as np
import numpy.typing as npt

from truthsieve.core.dawid_skene import observed_mask


def cohen_kappa(first: npt.ArrayLike, second: npt.ArrayLike, n_classes: int | None = None) -> float | None:
    """Cohen's kappa of two label vectors on the same items (unweighted, K categories).

    ``kappa = (p_o - p_e) / (1 - p_e)`` with observed agreement ``p_o`` and chance
    agreement ``p_e = sum_k p_first(k) p_second(k)`` ("A coefficient of agreement
    for nominal scales", Educational and Psychological Measurement 20, 1960). Items where
    either label is ``-1`` (missing) are left out. None when undefined (no items, or
    ``p_e = 1``: both raters used one and the same label).

    :param n_classes: ``K``; when given, labels outside ``0..K-1`` are an error and the
        categories are ``0..K-1``; when None, the categories are the values that occur.
    """
    a, b = np.asarray(first), np.asarray(second)
    both = (a >= 0) & (b >= 0)
    if not both.all():
        a, b = a[both], b[both]
    if len(a) == 0:
        return None
    if n_classes is None:
        categories: npt.NDArray[Any] = np.union1d(a, b)
    else:
        observed_mask(np.concatenate([a, b]), None, n_classes)
        categories = np.arange(n_classes)
    observed = float(np.mean(a == b))
    chance = float(sum(np.mean(a == k) * np.mean(b == k) for k in categories))
    if chance >= 1.0:
        return None
    return (observed - chance) / (1.0 - chance)


def cohen_kappas(
    pair: npt.ArrayLike, first: npt.ArrayLike, second: npt.ArrayLike, n_pairs: int, n_classes: int
) -> list[float | None]:
    """:func:`cohen_kappa` with ``n_classes`` for many pairs of raters at once, from one
    count table: label ``t`` belongs to pair ``pair[t]``, with ratings ``first[t]`` and
    ``second[t]``.

    The same floats as one :func:`cohen_kappa` call per pair: each proportion is a count
    over the pair's items (what ``np.mean`` of a boolean vector returns, exactly), and
    chance agreement sums ``p_first(k) p_second(k)`` over ``k = 0..K-1`` in that order.
    """
    owner, a, b = (np.asarray(v, dtype=np.int64) for v in (pair, first, second))
    both = (a >= 0) & (b >= 0)
    if not both.all():
        owner, a, b = owner[both], a[both], b[both]
    observed_mask(np.concatenate([a, b]), None, n_classes)
    k = n_classes
    table = np.bincount((owner * k + a) * k + b, minlength=n_pairs * k * k).reshape(n_pairs, k, k)
    items = table.sum(axis=(1, 2)).astype(np.float64)
    counted = np.where(items > 0, items, 1.0)
    observed = np.trace(table, axis1=1, axis2=2) / counted
    first_share, second_share = table.sum(axis=2) / counted[:, None], table.sum(axis=1) / counted[:, None]
    chance = np.zeros(n_pairs)
    for category in range(k):
        chance = chance + first_share[:, category] * second_share[:, category]
    defined = (items > 0) & (chance < 1.0)
    kappa = (observed - chance) / np.where(defined, 1.0 - chance, 1.0)
    return [float(v) if ok else None for v, ok in zip(kappa, defined)]


def category_counts(labels: npt.ArrayLike, labelled: npt.ArrayLike | None = None, n_classes: int = 2) -> npt.NDArray[np.int64]:
    """``(m, K)`` table: how many sources gave item ``j`` class ``k``.

    :param labels: ``(n, m)`` class indices (sources x items); ``-1`` marks a missing label
        when ``labelled`` is None.
    """
    values, mask = observed_mask(labels, labelled, n_classes)
    return np.stack([(mask & (values == k)).sum(axis=0) for k in range(n_classes)], axis=1)


def source_category_counts(
    sources: Sequence[tuple[npt.ArrayLike, npt.ArrayLike]], n_items: int, n_classes: int = 2
) -> npt.NDArray[np.int64]:
    """:func:`category_counts` from each source's ``(items, classes)`` (its item codes,
    unique, and its class index on each): O(|labels|), no sources x items matrix."""
    counts = np.zeros((n_items, n_classes), dtype=np.int64)
    flat = counts.reshape(-1)
    for items, classes in sources:
        values = np.asarray(classes, dtype=np.int64)
        outside = values[(values < 0) | (values >= n_classes)]  # every label is observed: -1 is no "missing" here
        if len(outside):
            raise ValueError(f"label {int(outside[0])} is not a class index in 0..{n_classes - 1}")
        flat[np.asarray(items, dtype=np.int64) * n_classes + values] += 1  # a source labels an item once
    return counts


def fleiss_kappa(counts: npt.ArrayLike) -> float | None:
    """Fleiss' kappa from an items x categories table of label counts (any number of categories).

    Every item must carry the same number of labels ``r``; ``P_j`` is the agreement on
    item ``j``, ``p_k`` the overall share of category ``k``:
    ``kappa = (mean P_j - sum p_k^2) / (1 - sum p_k^2)`` ("Measuring nominal scale
    agreement among many raters", Psychological Bulletin 76(5), 1971). None when rows
    differ in count, fewer than two labels per item, or chance agreement is 1.
    """
    table = np.asarray(counts, dtype=np.int64)
    raters = table.sum(axis=1)
    if len(table) == 0 or not np.all(raters == raters[0]) or raters[0] < 2:
        return None
    # Exact in integers, one rounding at the end: the same float on every machine, whatever
    # order SIMD or BLAS kernels would sum floats in. With m items and N_k labels of class k:
    # mean P_j = (sum n_jk^2 - m r) / (m r (r - 1)) and sum p_k^2 = sum N_k^2 / (m r)^2.
    m, r = len(table), int(raters[0])
    labels = m * r
    agreement = Fraction(int((table * table).sum()) - labels, labels * (r - 1))
    chance = Fraction(sum(int(n) ** 2 for n in table.sum(axis=0)), labels * labels)
    if chance >= 1:
        return None
    return float((agreement - chance) / (1 - chance))


def fleiss_kappa_of_labels(labels: npt.ArrayLike, labelled: npt.ArrayLike | None = None, n_classes: int = 2) -> float | None:
    """:func:`fleiss_kappa` of a sources x items matrix of class indices (see :func:`category_counts`)."""
    return fleiss_kappa(category_counts(labels, labelled, n_classes))


def krippendorff_alpha_nominal(ratings: npt.ArrayLike) -> float | None:
    """Krippendorff's alpha for nominal data; ``ratings`` is raters x units with NaN for missing.

    Built from the coincidence matrix: each unit with ``m_u >= 2`` values adds
    ``1 / (m_u - 1)`` for every ordered pair of values from different raters.
    With ``n`` pairable values, ``n_c`` the coincidence marginals and ``o_cc`` the
    diagonal, ``alpha = 1 - (n - 1) (n - sum o_cc) / (n^2 - sum n_c^2)`` ("Computing Krippendorff's
    Alpha-Reliability", University of Pennsylvania, 2011). Any number of distinct values;
    a value nobody used adds nothing, so only the values that occur are tabled. None when
    no unit has two values or only one value occurs.
    """
    table = np.asarray(ratings, dtype=np.float64)
    values = np.unique(table[~np.isnan(table)])
    if len(values) == 0:
        return None
    # counts[u, c]: how many raters gave unit u the value c
    return _alpha_of_counts(np.stack([(table == v).sum(axis=0) for v in values], axis=1).astype(np.int64))


def krippendorff_alpha_of_counts(counts: npt.ArrayLike) -> float | None:
    """:func:`krippendorff_alpha_nominal` from an items x categories table of label counts
    (:func:`category_counts`); a category nobody used adds nothing, as there."""
    table = np.asarray(counts)
    if table.ndim != 2:
        raise ValueError(f"counts must be an items x categories table, got shape {table.shape}")
    used = np.flatnonzero(table.sum(axis=0) > 0)
    return _alpha_of_counts(table[:, used].astype(np.int64))


def _alpha_of_counts(counts: npt.NDArray[np.int64]) -> float | None:
    """Alpha from ``counts[u, c]`` over the values that occur (columns in value order).

    Exact in rationals, rounded once, so every machine writes the same float. In the
    coincidence matrix the ``n`` pairable values and the marginals ``n_c`` (each value's
    count over units with ``m_u >= 2``) are integers; only the diagonal
    ``sum_c o_cc = sum_u sum_c n_uc (n_uc - 1) / (m_u - 1)`` is a fraction, summed here per
    distinct ``m_u``.
    """
    if counts.shape[1] == 0:
        return None
    pairable = counts.sum(axis=1)
    counts = counts[pairable >= 2]
    pairable = pairable[pairable >= 2]
    if len(counts) == 0:
        return None
    total = int(pairable.sum())
    expected = total * total - sum(int(n) ** 2 for n in counts.sum(axis=0))
    if expected <= 0:
        return None
    same = (counts * (counts - 1)).sum(axis=1)  # per unit: ordered pairs of equal values
    # per unit size m_u (at most the number of sources): float sums of integers below 2**53 are exact in any order
    same_per_size = np.bincount(pairable, weights=same)
    diagonal = sum((Fraction(int(same_per_size[q]), int(q) - 1) for q in np.flatnonzero(same_per_size)), Fraction(0))
    return float(1 - Fraction(total - 1) * (total - diagonal) / expected)


def krippendorff_alpha_of_labels(labels: npt.ArrayLike, labelled: npt.ArrayLike | None = None, n_classes: int = 2) -> float | None:
    """:func:`krippendorff_alpha_nominal` of a sources x items matrix of class indices
    (missing by the mask, or ``-1`` when no mask is given)."""
    values, mask = observed_mask(labels, labelled, n_classes)
    return krippendorff_alpha_nominal(np.where(mask, values.astype(np.float64), np.nan))


def batch_agreement_of_counts(counts: npt.ArrayLike) -> tuple[float | None, float | None]:
    """:func:`batch_agreement` from the items x categories count table (the same floats)."""
    return krippendorff_alpha_of_counts(counts), fleiss_kappa(counts)


def batch_agreement(
    labels: npt.ArrayLike, labelled: npt.ArrayLike | None = None, n_classes: int = 2
) -> tuple[float | None, float | None]:
    """(Krippendorff's nominal alpha over all labels, Fleiss' kappa when every item has
    equally many labels) of one batch's sources x items matrix."""
    return (
        krippendorff_alpha_of_labels(labels, labelled, n_classes),
        fleiss_kappa_of_labels(labels, labelled, n_classes),
    )
