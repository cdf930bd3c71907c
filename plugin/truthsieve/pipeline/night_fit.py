"""What the consensus step leaves for each source's analysis (:class:`Fit`), and reading it back.

The fit step (:func:`truthsieve.pipeline.night.fit_consensus`) writes the night's summed
costs, the rules' global risks and the fit to the work area; :func:`read_fit` rebuilds a
:class:`Fit` from them and the items table, so an ``analyse_source`` task never reads any
other source's labels.
"""

from __future__ import annotations

from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np

from truthsieve.core.mechanisms import ConsensusFit
from truthsieve.core.rules import RuleClass
from truthsieve.core.statistics import SourceLabels
from truthsieve.pipeline import work_files
from truthsieve.pipeline.analysis import NightItems, item_ranks, night_items
from truthsieve.pipeline.config import Config


@dataclass(frozen=True)
class Fit:
    """The consensus fit and all that one source's analysis shares: no label matrix.

    :param night: the night's items in code order and the rule class.
    :param totals: the ``(m, K)`` summed costs ``sum_i w_i c_i``.
    :param global_risks: every rule's unclipped global risk from ``totals``.
    :param weights: normalised weight of each valid source, by source id.
    :param ranks: each items-table row's item code (:func:`~truthsieve.pipeline.analysis.item_ranks`).
    :param sources: the sources' sparse labels, when this process already holds them.
    """

    night: NightItems
    consensus: ConsensusFit
    totals: np.ndarray
    global_risks: np.ndarray
    weights: dict[str, float]
    ranks: np.ndarray
    sources: Mapping[str, SourceLabels] = field(default_factory=dict)

    @property
    def rule_class(self) -> RuleClass:
        return self.night.rule_class

    @property
    def source_ids(self) -> list[str]:
        return sorted(self.weights)

    def summary(self) -> dict:
        rule = self.rule_class.describe(self.consensus.rule)
        return {"rule": rule, "risk": self.consensus.risk, "sources": len(self.weights)}  # XCom: small


def read_fit(store, batch_date: str, config: Config) -> Fit:
    """The fit as :func:`~truthsieve.pipeline.night.fit_consensus` left it in the work area (the items table re-read)."""
    totals, global_risks, record = work_files.read_night_fit(store, batch_date)
    items = work_files.read_items(store, batch_date).table
    consensus = ConsensusFit(rule=record["rule"], risk=record["risk"])
    return Fit(night_items(items, config), consensus, totals, global_risks, record["weights"], item_ranks(items))
