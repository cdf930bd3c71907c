"""The shared monotone search against a brute-force scan."""

from __future__ import annotations

import doctest

import pytest

from truthsieve.core import search
from truthsieve.core.search import smallest_satisfying


@pytest.mark.parametrize("answer", [1, 2, 3, 7, 8, 9, 64, 1000])
@pytest.mark.parametrize("low", [0, 1, 5])
def test_finds_the_first_number_that_satisfies_a_monotone_test(answer, low):
    if answer <= low:
        return
    tested = []

    def satisfies(n: int) -> bool:
        tested.append(n)
        return n >= answer

    assert smallest_satisfying(satisfies, low) == answer
    assert low not in tested
    brute = next(n for n in range(low + 1, 2 * answer + 2) if n >= answer)
    assert smallest_satisfying(lambda n: n >= answer, low, 2 * answer + 1) == brute


def test_a_known_true_upper_end_is_returned_without_testing_it():
    tested = []
    assert smallest_satisfying(lambda n: tested.append(n) or False, 3, 4) == 4
    assert tested == []
    assert smallest_satisfying(lambda n: False, 9, 9) == 9  # an empty bracket: the known end


def test_the_docstring_examples_hold():
    assert doctest.testmod(search).failed == 0
