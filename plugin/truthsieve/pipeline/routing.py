"""The routing policy: aggregate the batch, or send it to a human with reasons.

Routing is part of the mechanism: review keeps the previously published rule in force,
so any gate a report can trip lets a source that prefers the status quo veto a night,
and pushes an honest source whose labels look unusual to conform.

``strategy_proof`` mode (the default) therefore routes on nothing a source's labels can
change: the items table's validity, the configuration (the registry's worst-case
guarantee against ``max_ratio``), the number of valid sources against
``min_valid_sources`` (default 1: see :class:`~truthsieve.pipeline.config.RoutingPolicy`),
and a changed re-screen of a night whose draw was already published (``draw_revised``,
see :mod:`truthsieve.pipeline.screen`). Every flag, ratio and drift test is still
published as a non-blocking reason, alerted and shown in the report. A quarantined
source is treated as absent: noted, never blocking.

``guarded`` mode adds the gates a report can trip (not strategy-proof): flags in
``review_on_flags``, the realised ratio above ``max_ratio`` or undefined, and more
than ``max_invalid_sources`` quarantined sources.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

from truthsieve.core.mechanisms import registry_guarantee
from truthsieve.pipeline.analysis import BatchAnalysis
from truthsieve.pipeline.config import Config, RoutingPolicy

AGGREGATE, REVIEW = "aggregate", "review"

REASON_CODES = {
    "items_invalid": "the items table broke the input rules and was quarantined",
    "source_quarantined": "a source's files broke the input rules and were quarantined",
    "too_few_sources": "fewer valid sources than routing.min_valid_sources",
    "guarantee_above_bound": "the configured mechanism's worst-case ratio over the whole registry exceeds routing.max_ratio",
    "guarantee_tonight_above_bound": "with tonight's sources the worst-case ratio exceeds routing.max_ratio (advisory)",
    "ratio_above_bound": "the mechanism's expected risk exceeds routing.max_ratio times the consensus risk",
    "ratio_undefined": "the consensus fits perfectly but the mechanism's lottery does not",
    "source_flagged": "a source carries a flag listed in routing.review_on_flags (guarded mode)",
    "source_noted": "a source carries a flag; published and alerted, the route does not depend on it",
    "guarantee_not_applicable": "sources labelled different items, so the dictator guarantee does not apply",
    "too_few_items": "the batch has fewer items than items_needed for uniformly accurate risk estimates",
    "draw_revised": "a re-screen with changed inputs after a published draw: a new draw revision that needs a verdict",
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
    policy: RoutingPolicy | Config,
    demo_key: bool,
    items_valid: bool = True,
    revision: int = 0,
) -> tuple[str, list[Reason]]:
    """The route and every reason behind it; blocking reasons force review.

    :param policy: the whole configuration (the registry guarantee needs it); a bare
        :class:`RoutingPolicy` skips the guarantee gate.
    :param revision: the draw revision; any revision above 0 needs a verdict.
    """
    config = policy if isinstance(policy, Config) else None
    policy = config.routing if config is not None else policy
    guarded = policy.mode == "guarded"
    bound = policy.ratio_bound
    reasons = []
    if not items_valid:
        reasons.append(Reason("items_invalid", "the items table broke the input rules; no rule can be fitted tonight", True))
    too_many = guarded and len(quarantined_sources) > policy.max_invalid_sources
    for source in quarantined_sources:
        treated = "left out of the batch" if guarded else "left out of the batch; treated as absent"
        reasons.append(Reason("source_quarantined", f"{source}: label files broke the input rules and were {treated}", too_many, source))
    if valid_sources < policy.min_valid_sources:
        reasons.append(Reason("too_few_sources", f"only {valid_sources} valid sources; the policy needs {policy.min_valid_sources}", True))
    if config is not None and not guarded:
        worst = registry_guarantee(config.mechanism, [s.weight for s in config.sources])
        if worst > bound:
            reasons.append(Reason("guarantee_above_bound", f"{config.mechanism} can cost {worst:.3f} times the consensus risk with every registered source present; the policy allows {bound:g}", True))
    if revision > 0:
        reasons.append(Reason("draw_revised", f"draw revision {revision}: this night was re-screened with changed inputs after its draw was published; the new draw applies only after a verdict", True))
    if analysis is not None:
        mechanism = analysis.mechanism
        if mechanism.ratio is None:
            reasons.append(Reason("ratio_undefined", f"the consensus rule fits every label but {mechanism.name} has expected risk {mechanism.expected_risk:.4f}", guarded))
        elif guarded and mechanism.ratio > bound:
            reasons.append(Reason("ratio_above_bound", f"{mechanism.name} costs {mechanism.ratio:.3f} times the consensus risk; the policy allows {bound:g}", True))
        if not guarded and mechanism.guarantee > bound:
            reasons.append(Reason("guarantee_tonight_above_bound", f"with tonight's sources {mechanism.name} can cost {mechanism.guarantee:.3f} times the consensus risk; the policy allows {bound:g} (advisory)", False))
        if not mechanism.guarantee_applies:
            reasons.append(Reason("guarantee_not_applicable", "sources labelled different items, so the worst-case ratio of the lottery is not guaranteed", False))
        if analysis.matrix.n_items < analysis.items_needed:
            reasons.append(Reason("too_few_items", f"{analysis.matrix.n_items} items; uniformly accurate risk estimates of every rule need {analysis.items_needed} (analysis.sample_epsilon, sample_delta)", False))
        for source in analysis.sources:
            for flag in source.flags:
                blocking = guarded and flag in policy.review_on_flags
                code = "source_flagged" if blocking else "source_noted"
                reasons.append(Reason(code, f"{source.source_id}: {flag_sentence(flag, config)}", blocking, source.source_id))
    if demo_key:
        reasons.append(Reason("demo_draw_key", REASON_CODES["demo_draw_key"], False))
    route = REVIEW if any(r.blocking for r in reasons) else AGGREGATE
    return route, reasons


FLAG_SENTENCES = {
    "rule_shaped": "its labels follow one rule of the class almost exactly while differing from the consensus fit (careful graders can do this; so can a report tuned to one rule)",
    "far_from_consensus": "disagrees with the consensus rule more than the policy allows",
    "low_reliability": "Dawid-Skene balanced accuracy is below the policy's minimum",
    "low_agreement": "Cohen's kappa with the consensus labels is below the policy's minimum",
    "gain_from_lying": "could lower its own risk under plain ERM by more than the policy allows",
    "pulls_fit": "its report moves the consensus fit enough to raise the other sources' weighted risk by more than the policy allows",
    "drift_positive_rate": "its accept rate moved away from its own recent history",
    "drift_disagreement": "its disagreement with the consensus moved away from its own recent history",
}
# with more than two classes these two read differently (core/source_checks.py: macro-averaged recall; labels other than class 0)
FLAG_SENTENCES_K_CLASSES = {
    "low_reliability": "Dawid-Skene macro-averaged recall (the mean over classes of the share of each class's items labelled right) is below the policy's minimum",
    "drift_positive_rate": "its share of labels other than class 0 moved away from its own recent history",
}


def flag_sentence(flag: str, config: Config | None) -> str:
    """The reason's words for a flag; K-class wording when the configuration names more than two classes."""
    if config is not None and config.classes is not None and len(config.classes) > 2:
        return FLAG_SENTENCES_K_CLASSES.get(flag, FLAG_SENTENCES[flag])
    return FLAG_SENTENCES[flag]
