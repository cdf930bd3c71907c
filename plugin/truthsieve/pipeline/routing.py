"""The routing policy: aggregate the batch, or send it to a human with reasons.

Routing is itself part of the mechanism. Review keeps the previously published rule in
force, so a source that prefers the status quo could try to trigger review on purpose
(for instance by sending labels that get flagged). Every reason names its source, so a
pattern of such triggers is visible to the reviewers.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from truthsieve.pipeline.analysis import BatchAnalysis
from truthsieve.pipeline.config import RoutingPolicy

AGGREGATE, REVIEW = "aggregate", "review"

REASON_CODES = {
    "items_invalid": "the items table broke the input rules and was quarantined",
    "source_quarantined": "a source's files broke the input rules and were quarantined",
    "too_few_sources": "fewer valid sources than routing.min_valid_sources",
    "ratio_above_bound": "the mechanism's expected risk exceeds routing.max_ratio times the consensus risk",
    "ratio_undefined": "the consensus fits perfectly but the mechanism's lottery does not",
    "source_flagged": "a source carries a flag listed in routing.review_on_flags",
    "source_noted": "a source carries a flag not listed in routing.review_on_flags",
    "guarantee_not_applicable": "sources labelled different items, so the dictator guarantee does not apply",
    "demo_draw_key": "the draw used the public demo key; set TRUTHSIEVE_DRAW_KEY in production",
}


@dataclass(frozen=True)
class Reason:
    code: str
    message: str
    blocking: bool
    source_id: str | None = None

    def as_dict(self) -> dict:
        out = {"code": self.code, "message": self.message, "blocking": self.blocking}
        if self.source_id is not None:
            out["source_id"] = self.source_id
        return out


def route_batch(
    analysis: BatchAnalysis | None,
    quarantined_sources: Sequence[str],
    valid_sources: int,
    policy: RoutingPolicy,
    demo_key: bool,
    items_valid: bool = True,
) -> tuple[str, list[Reason]]:
    """The route and every reason behind it; blocking reasons force review."""
    reasons = []
    if not items_valid:
        reasons.append(Reason("items_invalid", "the items table broke the input rules; no rule can be fitted tonight", True))
    too_many = len(quarantined_sources) > policy.max_invalid_sources
    for source in quarantined_sources:
        reasons.append(Reason("source_quarantined", f"{source}: label files broke the input rules and were left out of the batch", too_many, source))
    if valid_sources < policy.min_valid_sources:
        reasons.append(Reason("too_few_sources", f"only {valid_sources} valid sources; the policy needs {policy.min_valid_sources}", True))
    if analysis is not None:
        mechanism = analysis.mechanism
        if mechanism.ratio is None:
            reasons.append(Reason("ratio_undefined", f"the consensus rule fits every label but {mechanism.name} has expected risk {mechanism.expected_risk:.4f}", True))
        elif mechanism.ratio > policy.max_ratio:
            reasons.append(Reason("ratio_above_bound", f"{mechanism.name} costs {mechanism.ratio:.3f} times the consensus risk; the policy allows {policy.max_ratio:g}", True))
        if not mechanism.guarantee_applies:
            reasons.append(Reason("guarantee_not_applicable", "sources labelled different items, so the worst-case ratio of the lottery is not guaranteed", False))
        for source in analysis.sources:
            for flag in source.flags:
                blocking = flag in policy.review_on_flags
                code = "source_flagged" if blocking else "source_noted"
                reasons.append(Reason(code, f"{source.source_id}: {FLAG_SENTENCES[flag]}", blocking, source.source_id))
    if demo_key:
        reasons.append(Reason("demo_draw_key", REASON_CODES["demo_draw_key"], False))
    route = REVIEW if any(r.blocking for r in reasons) else AGGREGATE
    return route, reasons


FLAG_SENTENCES = {
    "rule_shaped": "its labels follow one rule of the class almost exactly while disagreeing with the consensus (the shape of a best-response report)",
    "far_from_consensus": "disagrees with the consensus rule more than the policy allows",
    "low_reliability": "Dawid-Skene balanced accuracy is below the policy's minimum",
    "low_agreement": "Cohen's kappa with the consensus labels is below the policy's minimum",
    "gain_from_lying": "could lower its own risk under plain ERM by more than the policy allows",
    "drift_positive_rate": "its accept rate moved away from its own recent history",
    "drift_disagreement": "its disagreement with the consensus moved away from its own recent history",
}
