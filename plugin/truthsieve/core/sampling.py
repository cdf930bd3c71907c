"""Sampling error: Wilson intervals, two-proportion tests with Holm's correction, sample size."""

from __future__ import annotations

import math
from statistics import NormalDist

import numpy as np


def wilson_interval(successes: float, trials: float, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for a proportion.

    ``(p + z^2/2n +- z sqrt(p(1-p)/n + z^2/4n^2)) / (1 + z^2/n)`` (Wilson, "Probable
    inference, the law of succession, and statistical inference", JASA 22, 1927;
    Newcombe, "Two-sided confidence intervals for the single proportion", Statistics in
    Medicine 17, 1998, method 3). ``(0, 1)`` when there are no trials.
    """
    if trials <= 0:
        return 0.0, 1.0
    z = NormalDist().inv_cdf(0.5 + confidence / 2.0)
    p = successes / trials
    denominator = 1.0 + z * z / trials
    centre = p + z * z / (2.0 * trials)
    spread = z * math.sqrt(p * (1.0 - p) / trials + z * z / (4.0 * trials * trials))
    return max(0.0, (centre - spread) / denominator), min(1.0, (centre + spread) / denominator)


def effective_sample_size(weights: np.ndarray) -> float:
    """Kish's effective number of observations, ``(sum u)^2 / sum u^2``; ``n`` for unit weights."""
    weights = np.asarray(weights, dtype=np.float64)
    squares = float((weights**2).sum())
    return float(weights.sum() ** 2 / squares) if squares > 0 else 0.0


def two_proportion_p_value(successes_a: float, trials_a: float, successes_b: float, trials_b: float) -> float:
    """Two-sided p-value of the pooled two-proportion z-test; 1 when undefined."""
    if trials_a <= 0 or trials_b <= 0:
        return 1.0
    pooled = (successes_a + successes_b) / (trials_a + trials_b)
    variance = pooled * (1.0 - pooled) * (1.0 / trials_a + 1.0 / trials_b)
    if variance <= 0:
        return 1.0
    z = (successes_a / trials_a - successes_b / trials_b) / math.sqrt(variance)
    return 2.0 * (1.0 - NormalDist().cdf(abs(z)))


def holm_adjust(p_values: np.ndarray) -> np.ndarray:
    """Holm's step-down adjusted p-values (Holm, "A simple sequentially rejective multiple
    test procedure", Scandinavian Journal of Statistics 6, 1979)."""
    p_values = np.asarray(p_values, dtype=np.float64)
    count = len(p_values)
    order = np.argsort(p_values, kind="stable")
    adjusted = np.empty(count)
    running = 0.0
    for rank, index in enumerate(order):
        running = max(running, (count - rank) * p_values[index])
        adjusted[index] = min(1.0, running)
    return adjusted


def items_needed(n_sources: int, n_rules: int, epsilon: float, delta: float) -> int:
    """Shared items so every source's risk estimate of every rule is within ``epsilon``
    of its truth with probability ``1 - delta``.

    Hoeffding's inequality for one rule and source, ``P(|R_hat - R| > e) <= 2 exp(-2 m e^2)``,
    with a union bound over ``n_sources * n_rules`` pairs:
    ``m >= ln(2 n_sources n_rules / delta) / (2 e^2)`` (Hoeffding, "Probability inequalities
    for sums of bounded random variables", JASA 58, 1963). Unit item weights assumed.
    """
    return int(math.ceil(math.log(2.0 * n_sources * n_rules / delta) / (2.0 * epsilon * epsilon)))
