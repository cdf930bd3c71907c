"""Per-source evidence for K classes and the flag registry (one place for codes, thresholds,
defaults, directions and tests)."""

from __future__ import annotations

import pickle
from dataclasses import replace
from pathlib import Path

import numpy as np
import pytest
import yaml
from sklearn.metrics import cohen_kappa_score

from truthsieve.core import flags as flag_registry
from truthsieve.core.dawid_skene import dawid_skene
from truthsieve.core.flags import FLAG_CODES, FLAGS, THRESHOLDS, Flag, FlagThresholds, Threshold, raised_flags
from truthsieve.core.incentives import SourceIncentive
from truthsieve.core.labels import LabelMatrix
from truthsieve.core.source_checks import SourceReport, assess_sources
from truthsieve.pipeline.config import RoutingPolicy

EXAMPLE_CONFIG = Path(__file__).resolve().parents[2] / "config" / "example.yaml"


def incentive(source: str, disagreement: float, **overrides) -> SourceIncentive:
    values = dict(
        source_id=source, disagreement=disagreement, own_best_rule=0, own_best_risk=0.3, gain_lower=0.0,
        gain_upper=0.0, gain_exact=True, target_rule=0, target_risk=0.3, lie_weight_lower=0.0,
        lie_weight_upper=0.0, damage=0.0, checks=0, pull=0.0,
    )
    values.update(overrides)
    return SourceIncentive(**values)


def quiet_report(**overrides) -> SourceReport:
    """A report that raises no flag under the default thresholds."""
    values = dict(
        source_id="s", weight=1.0, items=100, positives=50, positive_rate=0.5, disagreements=10, disagreement=0.1,
        disagreement_low=0.05, disagreement_high=0.17, kappa=0.8, sensitivity=0.9, specificity=0.9,
        balanced_accuracy=0.9, incentive=incentive("s", 0.1), drift_positive_rate_p=0.5, drift_disagreement_p=0.5,
        history_batches=1,
    )
    values.update(overrides)
    return SourceReport(**values)


# ---- the registry ----

def test_the_codes_and_defaults_are_the_documented_ones():
    # config/example.yaml documents every routing key with its default ("the values below are
    # the defaults") and lists review_on_flags in decision.json's order; the registry must agree.
    routing = yaml.safe_load(EXAMPLE_CONFIG.read_text())["routing"]
    assert list(FLAG_CODES) == routing["review_on_flags"]
    for name, spec in THRESHOLDS.items():
        assert routing[name] == spec.default, name
    assert FLAG_CODES == (
        "rule_shaped", "far_from_consensus", "low_reliability", "low_agreement",
        "gain_from_lying", "pulls_fit", "drift_positive_rate", "drift_disagreement",
    )


def test_routing_policy_takes_every_threshold_from_the_registry():
    policy = RoutingPolicy()
    assert policy.thresholds() == FlagThresholds()
    assert policy.review_on_flags == list(FLAG_CODES)
    for name, spec in THRESHOLDS.items():
        field = RoutingPolicy.model_fields[name]
        assert field.default == spec.default and field.description == spec.description
    assert RoutingPolicy(max_gain=0.1, min_kappa=-1).thresholds() == FlagThresholds(max_gain=0.1, min_kappa=-1.0)
    # every configured value reaches the core: 0.5 is inside every threshold's bounds and no default
    assert all(spec.default != 0.5 for name, spec in THRESHOLDS.items() if name != "min_kappa")
    every = {name: 0.5 for name in THRESHOLDS} | {"min_kappa": 0.25}
    assert RoutingPolicy(**every).thresholds().as_dict() == every
    # the registry's bounds are the configuration's bounds
    with pytest.raises(ValueError, match="min_kappa"):
        RoutingPolicy(min_kappa=-1.01)
    with pytest.raises(ValueError, match="drift_alpha"):
        RoutingPolicy(drift_alpha=0)
    with pytest.raises(ValueError, match="max_disagreement"):
        RoutingPolicy(max_disagreement=1.5)


def test_every_flag_has_its_words_for_people():
    from decision_support import source_entry
    from truthsieve.pipeline.evidence import FLAG_NAMES, flag_sentence
    from truthsieve.pipeline.routing import FLAG_SENTENCES

    source = source_entry(
        own_best_risk=0.0, disagreement=0.3, disagreement_interval=(0.2, 0.4), pull=0.1, balanced_accuracy=0.5,
        kappa=0.1, gain_lower=0.1, drift_positive_rate_p=0.001, drift_disagreement_p=0.001,
    )
    for code in FLAG_CODES:
        assert code in FLAG_SENTENCES and code in FLAG_NAMES, code
        assert flag_sentence(code, source, RoutingPolicy()) != code


# Direction at the limit, from the flag table of the contract and example.yaml ("above",
# "below", "at or above", "at most"): (overrides at exactly the default limit, raised?).
AT_THE_LIMIT = {
    "rule_shaped": (dict(incentive=incentive("s", 0.05, own_best_risk=0.01), disagreement=0.05), True),
    "far_from_consensus": (dict(disagreement=0.2), False),
    "low_reliability": (dict(balanced_accuracy=0.8), False),
    "low_agreement": (dict(kappa=0.5), False),
    "gain_from_lying": (dict(incentive=incentive("s", 0.1, gain_lower=0.05)), True),
    "pulls_fit": (dict(incentive=incentive("s", 0.1, pull=0.02)), True),
    "drift_positive_rate": (dict(drift_positive_rate_p=0.01), False),
    "drift_disagreement": (dict(drift_disagreement_p=0.01), False),
}
JUST_PAST = {
    "rule_shaped": dict(incentive=incentive("s", 0.05, own_best_risk=0.0099), disagreement=0.05),
    "far_from_consensus": dict(disagreement=0.2001),
    "low_reliability": dict(balanced_accuracy=0.7999),
    "low_agreement": dict(kappa=0.4999),
    "gain_from_lying": dict(incentive=incentive("s", 0.1, gain_lower=0.0501)),
    "pulls_fit": dict(incentive=incentive("s", 0.1, pull=0.0201)),
    "drift_positive_rate": dict(drift_positive_rate_p=0.0099),
    "drift_disagreement": dict(drift_disagreement_p=0.0099),
}


@pytest.mark.parametrize("code", FLAG_CODES)
def test_each_flag_trips_in_its_direction(code):
    t = FlagThresholds()
    assert raised_flags(quiet_report(), t) == ()
    overrides, raised = AT_THE_LIMIT[code]
    assert (code in raised_flags(quiet_report(**overrides), t)) is raised
    assert code in raised_flags(quiet_report(**JUST_PAST[code]), t)


def test_compound_and_undefined_statistics():
    t = FlagThresholds()
    # rule_shaped needs disagreement or pull as well as a near-perfect own rule
    fits_alone = quiet_report(incentive=incentive("s", 0.01, own_best_risk=0.0), disagreement=0.01)
    assert "rule_shaped" not in raised_flags(fits_alone, t)
    pulling = quiet_report(incentive=incentive("s", 0.01, own_best_risk=0.0, pull=0.02), disagreement=0.01)
    assert raised_flags(pulling, t) == ("rule_shaped", "pulls_fit")
    # an undefined kappa or drift test raises nothing
    assert raised_flags(quiet_report(kappa=None, drift_positive_rate_p=None, drift_disagreement_p=None), t) == ()
    # thresholds move the limits
    assert "far_from_consensus" in raised_flags(quiet_report(), FlagThresholds(max_disagreement=0.05))


def test_a_new_flag_is_one_registry_entry(monkeypatch):
    # Evaluation, codes and thresholds all come from FLAGS (THRESHOLDS, DEFAULTS and the
    # configuration's fields are built from it at import, so a new entry in the source
    # appears everywhere; here the collection step is rerun by hand).
    limit = Threshold("max_items", 50, "many_items above this", ge=0)
    extra = Flag("many_items", "labelled more items than the limit", limit, "above", lambda r: float(r.items))
    monkeypatch.setattr(flag_registry, "FLAGS", FLAGS + (extra,))
    collected = flag_registry._collect_thresholds()
    assert collected["max_items"] is limit
    monkeypatch.setattr(flag_registry, "DEFAULTS", {name: spec.default for name, spec in collected.items()})
    monkeypatch.setattr(flag_registry, "THRESHOLDS", collected)
    assert raised_flags(quiet_report(), FlagThresholds()) == ("many_items",)
    assert raised_flags(quiet_report(), FlagThresholds(max_items=100)) == ()


def test_two_thresholds_may_not_share_a_name(monkeypatch):
    clash = Flag("clash", "d", Threshold("max_gain", 0.5, "another max_gain"), "above", lambda r: 0.0)
    monkeypatch.setattr(flag_registry, "FLAGS", FLAGS + (clash,))
    with pytest.raises(ValueError, match="max_gain"):
        flag_registry._collect_thresholds()


def test_flag_thresholds_are_checked_immutable_and_picklable():
    with pytest.raises(TypeError, match="unknown flag thresholds"):
        FlagThresholds(max_gian=0.1)
    t = FlagThresholds(drift_alpha=0.05)
    with pytest.raises(AttributeError):
        t.drift_alpha = 0.1  # type: ignore[misc]
    with pytest.raises(AttributeError):
        t.no_such_threshold  # noqa: B018
    assert pickle.loads(pickle.dumps(t)) == t and hash(pickle.loads(pickle.dumps(t))) == hash(t)
    assert t.drift_alpha == t["drift_alpha"] == 0.05 and t != FlagThresholds()


# ---- per-source evidence with K = 3 ----

def three_class_batch(seed: int):
    rng = np.random.default_rng(seed)
    truth = rng.integers(0, 3, 90)
    labels = np.stack([np.where(rng.random(90) < p, truth, rng.integers(0, 3, 90)) for p in (0.9, 0.7, 0.4)]).astype(np.int8)
    labelled = rng.random(labels.shape) < 0.85
    labels = np.where(labelled, labels, 0).astype(np.int8)
    matrix = LabelMatrix(
        item_ids=np.array([f"i{j:02d}" for j in range(90)], dtype=object),
        source_ids=("a", "b", "c"),
        labels=labels,
        labelled=labelled,
        item_weights=np.ones(90),
        source_weights=np.full(3, 1 / 3),
    )
    consensus = truth.astype(np.int8)  # stands in for the consensus rule's labels
    incentives = [incentive(s, float((labels[i][labelled[i]] != consensus[labelled[i]]).mean())) for i, s in enumerate("abc")]
    return matrix, consensus, incentives


@pytest.mark.parametrize("seed", range(3))
def test_three_class_evidence(seed):
    matrix, consensus, incentives = three_class_batch(seed)
    fit = dawid_skene(matrix.labels, matrix.labelled, n_classes=3)
    reports = assess_sources(matrix, consensus, incentives, fit, {}, FlagThresholds())
    for i, report in enumerate(reports):
        own, fitted = matrix.labels[i][matrix.labelled[i]], consensus[matrix.labelled[i]]
        assert report.items == len(own)
        assert report.kappa == pytest.approx(cohen_kappa_score(own, fitted), abs=1e-12)  # reference library
        # macro-averaged recall: the mean of the diagonal of the 3 x 3 confusion matrix
        assert report.balanced_accuracy == pytest.approx(np.trace(fit.confusion[i]) / 3, abs=1e-15)
        assert report.recall == pytest.approx(tuple(fit.confusion[i][k, k] for k in range(3)), abs=0)
        assert report.positives == int((own != 0).sum())
        assert report.disagreements == int((own != fitted).sum())
    # the least careful source is the least reliable and the least in agreement
    assert reports[2].balanced_accuracy < min(r.balanced_accuracy for r in reports[:2])
    assert reports[2].kappa < min(r.kappa for r in reports[:2])
    assert "low_reliability" in reports[2].flags and "low_reliability" not in reports[0].flags
    # K given explicitly means the same as K taken from the fit
    assert assess_sources(matrix, consensus, incentives, fit, {}, FlagThresholds(), n_classes=3) == reports


def test_report_flags_follow_the_registry():
    matrix, consensus, incentives = three_class_batch(0)
    fit = dawid_skene(matrix.labels, matrix.labelled, n_classes=3)
    for report in assess_sources(matrix, consensus, incentives, fit, {}, FlagThresholds()):
        assert report.flags == raised_flags(replace(report, flags=()), FlagThresholds())
