"""Agreement between sources: Cohen's kappa, Fleiss' kappa, Krippendorff's alpha (nominal)."""

from __future__ import annotations

import numpy as np


def cohen_kappa(first: np.ndarray, second: np.ndarray) -> float | None:
    """Cohen's kappa of two label vectors on the same items (unweighted).

    ``kappa = (p_o - p_e) / (1 - p_e)`` with observed agreement ``p_o`` and chance
    agreement ``p_e = sum_k p_first(k) p_second(k)`` ("A coefficient of agreement
    for nominal scales", Educational and Psychological Measurement 20, 1960). None when
    undefined (no items, or ``p_e = 1``: both raters used one and the same label).
    """
    first, second = np.asarray(first), np.asarray(second)
    if len(first) == 0:
        return None
    categories = np.union1d(first, second)
    observed = float(np.mean(first == second))
    chance = float(sum(np.mean(first == k) * np.mean(second == k) for k in categories))
    if chance >= 1.0:
        return None
    return (observed - chance) / (1.0 - chance)


def fleiss_kappa(counts: np.ndarray) -> float | None:
    """Fleiss' kappa from an items x categories table of label counts.

    Every item must carry the same number of labels ``r``; ``P_j`` is the agreement on
    item ``j``, ``p_k`` the overall share of category ``k``:
    ``kappa = (mean P_j - sum p_k^2) / (1 - sum p_k^2)`` ("Measuring nominal scale
    agreement among many raters", Psychological Bulletin 76(5), 1971). None when rows
    differ in count, fewer than two labels per item, or chance agreement is 1.
    """
    counts = np.asarray(counts, dtype=np.float64)
    raters = counts.sum(axis=1)
    if len(counts) == 0 or not np.all(raters == raters[0]) or raters[0] < 2:
        return None
    r = raters[0]
    per_item = ((counts * counts).sum(axis=1) - r) / (r * (r - 1))
    shares = counts.sum(axis=0) / counts.sum()
    chance = float((shares**2).sum())
    if chance >= 1.0:
        return None
    return (float(per_item.mean()) - chance) / (1.0 - chance)


def krippendorff_alpha_nominal(ratings: np.ndarray) -> float | None:
    """Krippendorff's alpha for nominal data; ``ratings`` is raters x units with NaN for missing.

    Built from the coincidence matrix: each unit with ``m_u >= 2`` values adds
    ``1 / (m_u - 1)`` for every ordered pair of values from different raters.
    With ``n`` pairable values, ``n_c`` the coincidence marginals and ``o_cc`` the
    diagonal, ``alpha = 1 - (n - 1) (n - sum o_cc) / (n^2 - sum n_c^2)`` ("Computing Krippendorff's
    Alpha-Reliability", University of Pennsylvania, 2011). None when no unit has two
    values or only one value occurs.
    """
    ratings = np.asarray(ratings, dtype=np.float64)
    values = np.unique(ratings[~np.isnan(ratings)])
    if len(values) == 0:
        return None
    # counts[u, c]: how many raters gave unit u the value c
    counts = np.stack([(ratings == v).sum(axis=0) for v in values], axis=1).astype(np.float64)
    pairable = counts.sum(axis=1)
    counts = counts[pairable >= 2]
    pairable = pairable[pairable >= 2]
    if len(counts) == 0:
        return None
    scale = 1.0 / (pairable - 1.0)
    coincidence = (counts.T * scale) @ counts - np.diag((counts * scale[:, None]).sum(axis=0))
    marginals = coincidence.sum(axis=1)
    total = marginals.sum()
    expected = total**2 - (marginals**2).sum()
    if expected <= 0:
        return None
    observed = total - np.trace(coincidence)
    return float(1.0 - (total - 1.0) * observed / expected)
