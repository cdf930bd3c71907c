"""What each flag measured, in plain words, with its value beside its limit and direction.

Flags are evidence, not verdicts: every sentence says what was measured and how it
compares with the configured limit, never what the source meant. The flag codes in
``decision.json`` stay as they are; :data:`FLAG_NAMES` gives each the name of what it
measures, used by the report, the index and the alerts (the code stays visible beside it).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import TYPE_CHECKING

from truthsieve.pipeline.config import RoutingPolicy

if TYPE_CHECKING:
    from truthsieve.pipeline.decision import SourceEntry

# decision.json flag code -> the name of what it measures
FLAG_NAMES = {
    "rule_shaped": "one-cut fit",
    "far_from_consensus": "disagreement high",
    "low_reliability": "accuracy estimate low",
    "low_agreement": "agreement low",
    "gain_from_lying": "ERM temptation",
    "pulls_fit": "pull high",
    "drift_positive_rate": "accept-rate shift",
    "drift_disagreement": "disagreement shift",
}


def _pct(value: float) -> str:
    return f"{100 * value:.1f} %"


def _shift(now: float | None, before: float | None) -> str:
    if now is None or before is None:
        return "compared with its own earlier nights"
    way = "up" if now > before else "down" if now < before else "unchanged"
    return f"{way} from {_pct(before)} over its earlier nights to {_pct(now)} tonight"


def flag_sentence(code: str, source: SourceEntry, policy: RoutingPolicy, past: Mapping | None = None, classes: Sequence[str] | None = None) -> str:
    """One flag of one source: plain words first, the statistic's name second, the value
    beside its limit and the direction that trips it. ``past`` may hold the source's
    pooled earlier ``positive_rate`` and ``disagreement`` (for the direction of a shift).
    ``classes`` are the decision's class names; with more than two, "balanced accuracy"
    is the macro-averaged recall and the "positive rate" the share of labels other than
    class 0 (see :mod:`truthsieve.core.source_checks`)."""
    past = past or {}
    many = classes is not None and len(classes) > 2
    if code == "rule_shaped":
        return (
            f"these grades follow a single cut almost exactly: a rule of the class misses only {_pct(source.own_best_risk)} of them "
            f"(tolerance: at most {_pct(policy.rule_shape_tolerance)}), while they differ from the shared fit on {_pct(source.disagreement)} "
            f"of lots (looked at from {_pct(policy.rule_shape_min_disagreement)}) or pull it {source.pull:.4f} (limit {policy.max_pull:g}). "
            "Careful graders can do this; so can a report tuned to one rule [statistic: own-best-rule risk]"
        )
    if code == "far_from_consensus":
        low, high = source.disagreement_interval
        return (
            f"these grades differ from the shared fit on {_pct(source.disagreement)} of lots, above the limit of "
            f"{_pct(policy.max_disagreement)} ({100 * policy.confidence:g} % range {_pct(low)} to {_pct(high)}) [statistic: disagreement with the consensus rule, Wilson interval]"
        )
    if code == "low_reliability" and many:
        return (
            f"estimated from all members' grades together, these grades are right on {_pct(source.balanced_accuracy)} of lots "
            f"(mean over the {len(classes)} classes of the share of each class's lots graded right), below the minimum of "
            f"{_pct(policy.min_balanced_accuracy)} [statistic: Dawid-Skene macro-averaged recall]"
        )
    if code == "low_reliability":
        return (
            f"estimated from all members' grades together, these grades are right on {_pct(source.balanced_accuracy)} of lots "
            f"(mean of accept and reject lots), below the minimum of {_pct(policy.min_balanced_accuracy)} [statistic: Dawid-Skene balanced accuracy]"
        )
    if code == "low_agreement":
        return (
            f"beyond what chance gives, these grades agree little with the shared fit's grades: {source.kappa:.3f}, "
            f"below the minimum of {policy.min_kappa:g} [statistic: Cohen's kappa]"
        )
    if code == "gain_from_lying":
        return (
            f"if the plain consensus fit were published, grades other than these could lower this source's own error by "
            f"{source.gain_lower:.4f} or more, at or above the limit of {policy.max_gain:g}; the lottery used here removes that "
            "advantage [statistic: gain under ERM]"
        )
    if code == "pulls_fit":
        return (
            f"these grades move the shared fit so that the other members' weighted error rises by {source.pull:.4f}, "
            f"at or above the limit of {policy.max_pull:g} [statistic: pull on the consensus fit]"
        )
    if code == "drift_positive_rate":
        what = f"graded other than {classes[0]} (class 0)" if many else "accepted"
        return (
            f"the share of lots {what} moved: {_shift(source.positive_rate, past.get('positive_rate'))}; adjusted p = "
            f"{source.drift_positive_rate_p:.2g}, below {policy.drift_alpha:g} [statistic: two-proportion z-test, Holm-adjusted]"
        )
    if code == "drift_disagreement":
        return (
            f"the disagreement with the shared fit moved: {_shift(source.disagreement, past.get('disagreement'))}; adjusted p = "
            f"{source.drift_disagreement_p:.2g}, below {policy.drift_alpha:g} [statistic: two-proportion z-test, Holm-adjusted]"
        )
    return code


def past_rates(history: Mapping | None, source_id: str) -> dict:
    """Pooled earlier rates of one source from :class:`~truthsieve.core.source_checks.SourceHistory`."""
    past = (history or {}).get(source_id)
    if past is None or not past.items:
        return {}
    return {"positive_rate": past.positives / past.items, "disagreement": past.disagreements / past.items}


# what a sender does about each kind of error (by truthsieve's code; see records.CODE_OF_FORMER)
FIXES = {
    "table_lacks_column": "add the column (label files hold item_id and label)",
    "file_holds_unlisted_column": "remove the column; label files hold item_id and label only",
    "column_holds_other_type": "write the column with the type named in the message",
    "lot_graded_twice": "keep one grade per lot across the folder's files",
    "file_holds_no_rows": "send the file again with its grades",
    "file_is_not_parquet": "export the file again as Parquet",
    "file_cannot_be_read": "check the file's permissions and send it again",
    "batch_lacks_items_table": "the platform must deliver items.parquet for the night",
    "lot_listed_twice": "list each lot once in items.parquet",
    "lot_id_blank": "give every row an item_id",
    "grade_blank": "give every row a grade, 0 or 1",
    "grade_not_0_or_1": "grade every lot 0 (reject) or 1 (accept)",
    "lot_not_in_items_table": "grade only the night's reference lots (their item_id is in items.parquet)",
    "source_not_in_registry": "ask the platform to register the source, or fix the folder's name",
    "folder_holds_no_labels": "put the grades file (*.parquet) into the folder",
    "misnamed_label_file": "name the grades file *.parquet",
    "link_outside_inbox": "deliver the file itself, not a link",
    "source_name_not_allowed": "name the folder source_id=ID with the registered id: a letter or digit, then up to 63 letters, digits, '_', '.' or '-'",
    "control_character_in_id": "write each item_id as printed text, without NUL or other control characters",
    # the items table is the platform's, not a source's
    "table_lacks_feature": "the platform must deliver items.parquet with every feature the configuration names",
    "feature_not_a_number": "the platform must give every feature a finite number",
    "feature_beyond_limit": "the platform must keep feature values within the numeric limit the message names",
    "features_all_constant": "the platform must deliver features that vary across the night's items",
    "rule_value_blank": "the platform must fill every rule__* cell",
    # K classes (configuration key classes): these codes are the rules' own names
    "unknown_class_name": "write each label as one of the configured class names, spelt exactly, or as its class index",
    "class_index_out_of_range": "write class indices 0..K-1 of the configured classes",
    "rule_class_out_of_range": "the platform must write listed rule columns as class indices 0..K-1",
}


def fix_for(code: str) -> str:
    return FIXES.get(code, "correct the file as the message says and deliver it again")
