"""One search shared by the core: the smallest whole number that satisfies a monotone test."""

from __future__ import annotations

from collections.abc import Callable


def smallest_satisfying(satisfies: Callable[[int], bool], low: int, high: int | None = None) -> int:
    """The smallest ``n`` in ``(low, high]`` with ``satisfies(n)``.

    ``satisfies`` must be monotone (false, then true for good); ``low`` is known not to
    satisfy it (or is a bound below which nothing does) and ``high``, when given, is known
    to. The search gallops up from ``low`` (``low + 1, low + 3, low + 7, ...``), so an
    answer near ``low`` costs a few tests, then halves the bracket it found. It tests
    neither ``low`` nor ``high``.

    >>> smallest_satisfying(lambda n: n * n >= 50, 0)
    8
    >>> smallest_satisfying(lambda n: n >= 3, 0, 10)
    3
    """
    step = 1
    while high is None or low + step < high:
        if satisfies(low + step):
            high = low + step
            break
        low, step = low + step, step * 2
    while high - low > 1:
        middle = (low + high) // 2
        if satisfies(middle):
            high = middle
        else:
            low = middle
    return high
