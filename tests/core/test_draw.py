"""The reproducible draw: HMAC-SHA256 of the batch date, inverse CDF over the lottery."""

from __future__ import annotations

import pytest
from hypothesis import given
from hypothesis import strategies as st

from truthsieve.core import draw, inverse_cdf, key_fingerprint, uniform_from_date


def test_uniform_uses_hmac_sha256_with_key_and_date_in_that_order():
    # RFC 4231 ("Identifiers and Test Vectors for HMAC-SHA-224, -256, -384, and -512", IETF, 2005),
    # test case 2: key "Jefe", data "what do ya want for nothing?" gives
    # 5bdcc146bf60754e6a042426089575c75a003f089d2739839dec58b964ec3843.
    expected = (0x5BDCC146BF60754E >> 11) / 2**53
    assert uniform_from_date("Jefe", "what do ya want for nothing?") == expected


def test_draw_is_reproducible_and_depends_on_date_and_key():
    assert uniform_from_date("k", "2026-11-03") == uniform_from_date("k", "2026-11-03")
    assert uniform_from_date("k", "2026-11-03") != uniform_from_date("k", "2026-11-04")
    assert uniform_from_date("k", "2026-11-03") != uniform_from_date("other", "2026-11-03")


def test_fingerprint_does_not_reveal_the_key():
    fingerprint = key_fingerprint("s3cret-key")
    assert "s3cret" not in fingerprint and fingerprint.startswith("draw-key:")
    assert fingerprint == key_fingerprint("s3cret-key") != key_fingerprint("s3cret-kez")


@pytest.mark.parametrize(
    ("u", "expected"),
    [(0.0, 0), (0.19999, 0), (0.2, 1), (0.49, 1), (0.5, 3), (0.999999, 3)],
)
def test_inverse_cdf_in_listed_order_skips_zero_probability_entries(u, expected):
    assert inverse_cdf([0.2, 0.3, 0.0, 0.5], u) == expected


def test_inverse_cdf_past_a_sum_slightly_below_one_takes_last_positive_entry():
    assert inverse_cdf([0.1] * 9 + [0.1 - 1e-15, 0.0], 1 - 1e-17) == 9


@given(st.lists(st.floats(0.0, 1.0), min_size=1, max_size=8), st.text(min_size=1, max_size=12))
def test_drawn_entry_always_has_positive_probability(weights, date):
    total = sum(weights)
    if total == 0:
        return
    probabilities = [w / total for w in weights]
    result = draw(probabilities, "key", date)
    assert probabilities[result.index] > 0
    assert 0.0 <= result.u < 1.0
