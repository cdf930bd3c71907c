"""The pure computational core: labels, rule classes, mechanisms, incentives, reliability."""

from truthsieve.core.draw import Draw, draw, inverse_cdf, key_fingerprint, uniform_from_date
from truthsieve.core.incentives import SourceIncentive, incentives, source_incentive
from truthsieve.core.labels import LabelMatrix, build_label_matrix, report_costs
from truthsieve.core.mechanisms import (
    MECHANISMS,
    ConsensusFit,
    LotteryEntry,
    MechanismResult,
    fit_consensus,
    own_best_rules,
    run_mechanism,
)
from truthsieve.core.rules import RULE_CLASS_KINDS, ConstantRules, ListedRules, RuleClass, ThresholdRules, build_rule_class

__all__ = [
    "ConsensusFit",
    "ConstantRules",
    "Draw",
    "LabelMatrix",
    "ListedRules",
    "LotteryEntry",
    "MECHANISMS",
    "MechanismResult",
    "RULE_CLASS_KINDS",
    "RuleClass",
    "SourceIncentive",
    "ThresholdRules",
    "build_label_matrix",
    "build_rule_class",
    "draw",
    "fit_consensus",
    "incentives",
    "inverse_cdf",
    "key_fingerprint",
    "own_best_rules",
    "report_costs",
    "run_mechanism",
    "source_incentive",
    "uniform_from_date",
]
