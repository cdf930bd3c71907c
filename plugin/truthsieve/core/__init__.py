"""The pure computational core: labels, rule classes, mechanisms, incentives, reliability.

Functions that share a submodule's name (``draw.draw``, ``incentives.incentives``) are not
re-exported here, so ``truthsieve.core.draw`` and ``truthsieve.core.incentives`` stay the
modules; the package root ``truthsieve`` offers them by name.
"""

from truthsieve.core.draw import Draw, inverse_cdf, key_fingerprint, uniform_from_date
from truthsieve.core.incentives import SourceIncentive, analyse_source, context_from_totals, source_incentive
from truthsieve.core.labels import LabelMatrix, build_label_matrix, normalised_weights, report_costs
from truthsieve.core.mechanisms import (
    MECHANISMS,
    ConsensusFit,
    LotteryEntry,
    MechanismResult,
    fit_consensus,
    fit_from_totals,
    own_best_rule,
    own_best_rules,
    run_from_statistics,
    run_mechanism,
)
from truthsieve.core.rules import RULE_CLASS_KINDS, ConstantRules, ListedRules, RuleClass, ThresholdRules, build_rule_class
from truthsieve.core.statistics import SourceLabels, source_statistics, sum_statistics

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
    "SourceLabels",
    "ThresholdRules",
    "analyse_source",
    "build_label_matrix",
    "build_rule_class",
    "context_from_totals",
    "fit_consensus",
    "fit_from_totals",
    "inverse_cdf",
    "key_fingerprint",
    "normalised_weights",
    "own_best_rule",
    "own_best_rules",
    "report_costs",
    "run_from_statistics",
    "run_mechanism",
    "source_incentive",
    "source_statistics",
    "sum_statistics",
    "uniform_from_date",
]
