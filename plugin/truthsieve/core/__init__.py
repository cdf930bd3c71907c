"""The pure computational core: labels, rule classes, mechanisms, incentives, reliability.

Functions that share a submodule's name (``draw.draw``, ``incentives.incentives``) are not
re-exported here, so ``truthsieve.core.draw`` and ``truthsieve.core.incentives`` stay the
modules; the package root ``truthsieve`` offers them by name.
"""

from truthsieve.core.draw import Draw, inverse_cdf, key_fingerprint, uniform_from_date
from truthsieve.core.incentives import SourceIncentive, source_incentive
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
    "fit_consensus",
    "inverse_cdf",
    "key_fingerprint",
    "own_best_rules",
    "report_costs",
    "run_mechanism",
    "source_incentive",
    "uniform_from_date",
]
