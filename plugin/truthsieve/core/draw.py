"""The reproducible, auditable draw from a lottery.

``u = HMAC-SHA256(key, batch_date)`` read as a 53-bit fraction in [0, 1); the drawn
entry is the first whose cumulative probability, in the lottery's listed order,
exceeds ``u`` (inverse CDF). Anyone holding the key can recompute ``u`` from the
batch date; the decision records only the key's fingerprint.

**Revisions.** Once a night's decision is published, ``u`` is public. If a re-screen
of the same night could reuse it while the lottery's membership changed, a source that
saw ``u`` could withdraw or resubmit to move the entry ``u`` selects. So the first
published draw stands: a re-screen whose inputs or configuration differ becomes
revision ``r >= 1`` with a fresh ``u = HMAC-SHA256(key, "<batch_date>#<r>")``, unknown
to anyone without the key until it is published, and its route is review (the
pipeline's ``draw_revised`` reason), so it applies only after a person's verdict.
Revision 0 keeps ``HMAC-SHA256(key, batch_date)`` exactly.
"""

from __future__ import annotations

import hashlib
import hmac
from collections.abc import Sequence
from dataclasses import dataclass

DEMO_DRAW_KEY = "truthsieve-demo-key-not-secret"
DRAW_KEY_VARIABLE = "TRUTHSIEVE_DRAW_KEY"


@dataclass(frozen=True)
class Draw:
    u: float
    index: int
    key_fingerprint: str


def draw_message(batch_date: str, revision: int = 0) -> str:
    """The HMAC message of a draw: the date, then ``#<revision>`` from revision 1 on."""
    return batch_date if revision == 0 else f"{batch_date}#{revision}"


def uniform_from_date(key: str, batch_date: str, revision: int = 0) -> float:
    """The draw's uniform number for ``batch_date`` (ISO ``YYYY-MM-DD``) and ``revision`` under ``key``."""
    digest = hmac.new(key.encode(), draw_message(batch_date, revision).encode(), hashlib.sha256).digest()
    return (int.from_bytes(digest[:8], "big") >> 11) / float(1 << 53)


def key_fingerprint(key: str) -> str:
    """A short public fingerprint of the key: ``draw-key:`` + 16 hex digits (the first 64
    bits of SHA-256 over a domain-separated key; it names the key, it is no file digest)."""
    return "draw-key:" + hashlib.sha256(b"truthsieve-draw-key:" + key.encode()).hexdigest()[:16]


def inverse_cdf(probabilities: Sequence[float], u: float) -> int:
    """Index of the first entry whose cumulative probability exceeds ``u``.

    Float sums may end a hair below 1; a ``u`` past the end takes the last entry of
    positive probability.
    """
    total = 0.0
    last_positive = 0
    for index, probability in enumerate(probabilities):
        if probability > 0:
            last_positive = index
        total += probability
        if u < total and probability > 0:
            return index
    return last_positive


def draw(probabilities: Sequence[float], key: str, batch_date: str, revision: int = 0) -> Draw:
    u = uniform_from_date(key, batch_date, revision)
    return Draw(u=u, index=inverse_cdf(probabilities, u), key_fingerprint=key_fingerprint(key))
