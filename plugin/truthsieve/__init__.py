"""truthsieve: screen nightly multi-source label batches before they shape a shared rule.

The core's public names are re-exported lazily, so ``import truthsieve`` (as a DAG file
does, through the operators) costs nothing until a name is used.
"""

from __future__ import annotations

import importlib

__version__ = "0.1.0"

_CORE_NAMES = (
    "ConsensusFit", "ConstantRules", "Draw", "LabelMatrix", "ListedRules", "LotteryEntry", "MECHANISMS",
    "MechanismResult", "RULE_CLASS_KINDS", "RuleClass", "SourceIncentive", "ThresholdRules",
    "build_label_matrix", "build_rule_class", "draw", "fit_consensus", "incentives", "inverse_cdf",
    "key_fingerprint", "own_best_rules", "report_costs", "run_mechanism", "source_incentive", "uniform_from_date",
)
__all__ = [*_CORE_NAMES, "TruthsieveError", "__version__"]


# Functions named like their submodule: taken from the submodule, not the core package.
_SAME_NAME_AS_MODULE = ("draw", "incentives")


def __getattr__(name: str):
    if name in _SAME_NAME_AS_MODULE:
        return getattr(importlib.import_module(f"truthsieve.core.{name}"), name)
    if name in _CORE_NAMES:
        return getattr(importlib.import_module("truthsieve.core"), name)
    if name == "TruthsieveError":
        return importlib.import_module("truthsieve.exceptions").TruthsieveError
    raise AttributeError(f"module 'truthsieve' has no attribute {name!r}")
