"""Sampling error: Wilson intervals, two-proportion tests with Holm's correction, sample size."""

from __future__ import annotations

import math
from statistics import NormalDist

import numpy as np

from truthsieve.core.search import smallest_satisfying


def wilson_interval(successes: float, trials: float, confidence: float = 0.95) -> tuple[float, float]:
    """Wilson score interval for a proportion.

    ``(p + z^2/2n +- z sqrt(p(1-p)/n + z^2/4n^2)) / (1 + z^2/n)`` ("Probable
    inference, the law of succession, and statistical inference", JASA 22, 1927;
    "Two-sided confidence intervals for the single proportion", Statistics in
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
    """Holm's step-down adjusted p-values ("A simple sequentially rejective multiple
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


def threshold_growth(n_features: int, m: int) -> int:
    """Growth function bound of one-feature thresholds over ``n_features`` features:
    on ``m`` items each feature gives at most ``m + 1`` cut positions times two
    orientations, so at most ``2 d (m + 1)`` labelings (the constants included)."""
    return 2 * n_features * (m + 1)


def items_needed(
    n_sources: int,
    epsilon: float,
    delta: float,
    *,
    finite_size: int | None = None,
    threshold_features: int | None = None,
) -> int:
    """Shared items sufficient for every source's risk estimate of every rule of the
    class to be within ``epsilon`` of its truth, all at once, with probability
    ``1 - delta`` (``delta / n_sources`` per source; unit item weights assumed).

    The class must be fixed before the labels are seen: a union bound over the cuts
    a batch happens to offer would depend on the data and prove nothing.

    * A finite class fixed by the items (``constant``: 2 rules; ``listed``: the
      listed rules), ``finite_size = k``: Hoeffding's inequality and a union bound,
      ``m >= ln(2 k n / delta) / (2 epsilon^2)`` ("Understanding Machine Learning:
      From Theory to Algorithms", Cambridge University Press, 2014, Corollary 4.6).
    * One-feature thresholds over ``d = threshold_features`` features, through the
      growth function ``tau(m) <= 2 d (m + 1)``: the smallest ``m`` with
      ``(4 + sqrt(ln tau(2m))) / ((delta / n) sqrt(2m)) <= epsilon`` (same book,
      Theorem 6.11, the uniform-convergence theorem for classes of finite VC
      dimension through the growth function). Its Markov step puts ``delta`` in the
      denominator, so the number is sufficient, not necessary, and large.
    """
    per_source = delta / n_sources
    if finite_size is not None:
        return int(math.ceil(math.log(2.0 * finite_size / per_source) / (2.0 * epsilon * epsilon)))
    if threshold_features is None:
        raise ValueError("items_needed needs finite_size or threshold_features")

    def enough(m: int) -> bool:
        tau = threshold_growth(threshold_features, 2 * m)
        return (4.0 + math.sqrt(math.log(tau))) / (per_source * math.sqrt(2.0 * m)) <= epsilon

    return smallest_satisfying(enough, 0)
