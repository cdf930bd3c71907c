"""The flag registry: every per-source flag, its threshold, default, direction and test, in one place.

A flag is evidence for a human, not a verdict. Each entry of :data:`FLAGS` says which
statistic of a :class:`~truthsieve.core.source_checks.SourceReport` it reads, which
threshold it compares it with and in which direction, and (for compound flags) the extra
condition. The thresholds' defaults, bounds and meanings live in the :class:`Threshold`
objects the entries name; :data:`THRESHOLDS` collects them. Everything else is derived:

- :data:`FLAG_CODES` (the order flags are listed in ``decision.json``),
- :class:`FlagThresholds` (the values the core compares with; defaults from here),
- the ``routing`` section of the configuration (``pipeline/config.py`` makes one validated
  field per threshold, with this default and these bounds) and ``routing.review_on_flags``.

**Adding a flag is one entry in** :data:`FLAGS` (with a new :class:`Threshold` object if it
needs its own limit). Only its words for people live elsewhere: the sentence in
``pipeline/routing.py``'s ``FLAG_SENTENCES``, the name and the long sentence in
``pipeline/evidence.py``; a test names any flag that lacks them.

Order matters: flags are listed in ``decision.json`` in the order of :data:`FLAGS`, and
``review_on_flags`` defaults to that list, so a new flag goes at the end.
"""

from __future__ import annotations

import operator
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from typing import TYPE_CHECKING, Literal

if TYPE_CHECKING:
    from truthsieve.core.source_checks import SourceReport

Direction = Literal["above", "at_or_above", "below", "at_or_below"]
_COMPARE: Mapping[Direction, Callable[[float, float], bool]] = {
    "above": operator.gt,
    "at_or_above": operator.ge,
    "below": operator.lt,
    "at_or_below": operator.le,
}


@dataclass(frozen=True)
class Threshold:
    """One configurable limit: ``routing.<name>``, its default, bounds and meaning."""

    name: str
    default: float
    description: str
    ge: float | None = None
    le: float | None = None
    gt: float | None = None
    lt: float | None = None


@dataclass(frozen=True)
class Flag:
    """One flag: raised when ``statistic(report)`` is not None, lies ``direction`` the
    ``threshold``, and ``also(report, thresholds)`` holds (when given)."""

    code: str
    description: str
    threshold: Threshold
    direction: Direction
    statistic: Callable[[SourceReport], float | None]
    also: Callable[[SourceReport, FlagThresholds], bool] | None = None
    uses: tuple[Threshold, ...] = ()  # further thresholds ``also`` reads

    @property
    def default(self) -> float:
        return self.threshold.default

    def raised(self, report: SourceReport, thresholds: FlagThresholds) -> bool:
        value = self.statistic(report)
        if value is None or not _COMPARE[self.direction](value, thresholds[self.threshold.name]):
            return False
        return self.also is None or self.also(report, thresholds)


RULE_SHAPE_TOLERANCE = Threshold("rule_shape_tolerance", 0.01, "rule_shaped: own best risk at most this", ge=0, le=1)
RULE_SHAPE_MIN_DISAGREEMENT = Threshold(
    "rule_shape_min_disagreement", 0.05, "rule_shaped: ... while disagreement is at least this (or pull at least max_pull)", ge=0, le=1
)
MAX_DISAGREEMENT = Threshold("max_disagreement", 0.2, "far_from_consensus above this", ge=0, le=1)
MIN_BALANCED_ACCURACY = Threshold(
    "min_balanced_accuracy", 0.8, "low_reliability below this (Dawid-Skene macro-averaged recall; balanced accuracy for two classes)", ge=0, le=1
)
MIN_KAPPA = Threshold("min_kappa", 0.5, "low_agreement below this (Cohen's kappa against the consensus labels)", ge=-1, le=1)
MAX_GAIN = Threshold("max_gain", 0.05, "gain_from_lying at or above this (lower end of the bracket)", ge=0, le=1)
MAX_PULL = Threshold("max_pull", 0.02, "pulls_fit at or above this", ge=0, le=1)
DRIFT_ALPHA = Threshold("drift_alpha", 0.01, "drift_*: Holm-adjusted p-value below this", gt=0, lt=1)
CONFIDENCE = Threshold("confidence", 0.95, "level of the Wilson intervals", gt=0, lt=1)


def _rule_shaped_also(report: SourceReport, t: FlagThresholds) -> bool:
    return report.disagreement >= t.rule_shape_min_disagreement or report.incentive.pull >= t.max_pull


FLAGS: tuple[Flag, ...] = (
    Flag(
        "rule_shaped",
        "one rule of the class fits the source's labels (almost) exactly while it disagrees with the consensus, "
        "or while it pulls the fit (a lie that won no longer disagrees): the shape of a best-response report under ERM",
        RULE_SHAPE_TOLERANCE,
        "at_or_below",
        lambda r: r.incentive.own_best_risk,
        also=_rule_shaped_also,
        uses=(RULE_SHAPE_MIN_DISAGREEMENT, MAX_PULL),
    ),
    Flag("far_from_consensus", "disagreement with the consensus rule above the limit", MAX_DISAGREEMENT, "above", lambda r: r.disagreement),
    Flag(
        "low_reliability",
        "Dawid-Skene macro-averaged recall (balanced accuracy for two classes) below the minimum",
        MIN_BALANCED_ACCURACY,
        "below",
        lambda r: r.balanced_accuracy,
    ),
    Flag("low_agreement", "Cohen's kappa with the consensus labels below the minimum", MIN_KAPPA, "below", lambda r: r.kappa),
    Flag(
        "gain_from_lying",
        "the source could lower its risk under plain ERM by at least the limit (lower end of the bracket)",
        MAX_GAIN,
        "at_or_above",
        lambda r: r.incentive.gain_lower,
    ),
    Flag(
        "pulls_fit",
        "the source's report moves the consensus fit so that the other sources' weighted risk rises by at least the limit",
        MAX_PULL,
        "at_or_above",
        lambda r: r.incentive.pull,
    ),
    Flag(
        "drift_positive_rate",
        "positive rate differs from the source's trailing history (two-proportion z-test, Holm-corrected over all tests)",
        DRIFT_ALPHA,
        "below",
        lambda r: r.drift_positive_rate_p,
    ),
    Flag(
        "drift_disagreement",
        "disagreement rate differs from its trailing history (same test)",
        DRIFT_ALPHA,
        "below",
        lambda r: r.drift_disagreement_p,
    ),
)

FLAG_CODES: tuple[str, ...] = tuple(flag.code for flag in FLAGS)


def _collect_thresholds() -> dict[str, Threshold]:
    found: dict[str, Threshold] = {}
    for spec in [t for flag in FLAGS for t in (flag.threshold, *flag.uses)] + [CONFIDENCE]:
        if found.setdefault(spec.name, spec) != spec:
            raise ValueError(f"two different thresholds are named {spec.name!r}")
    return found


# name -> Threshold, in first-use order; CONFIDENCE sets the level of the Wilson interval
# that far_from_consensus's evidence shows.
THRESHOLDS: Mapping[str, Threshold] = _collect_thresholds()
DEFAULTS: Mapping[str, float] = {name: spec.default for name, spec in THRESHOLDS.items()}


class FlagThresholds:
    """The value of every threshold in :data:`THRESHOLDS`; a name not given takes its default.

    Immutable; read a value as an attribute (``t.max_gain``) or by name (``t["max_gain"]``).

    >>> FlagThresholds(max_gain=0.1).max_gain, FlagThresholds().max_gain
    (0.1, 0.05)
    """

    __slots__ = ("_values",)
    _values: dict[str, float]

    def __init__(self, **values: float) -> None:
        unknown = sorted(set(values) - set(THRESHOLDS))
        if unknown:
            raise TypeError(f"unknown flag thresholds {unknown}; known: {list(THRESHOLDS)}")
        object.__setattr__(self, "_values", {name: values.get(name, default) for name, default in DEFAULTS.items()})

    def __getattr__(self, name: str) -> float:
        if name.startswith("_"):  # copy and pickle probe before _values exists
            raise AttributeError(name)
        try:
            return self._values[name]
        except KeyError:
            raise AttributeError(f"no flag threshold named {name!r}") from None

    def __getitem__(self, name: str) -> float:
        return self._values[name]

    def __setattr__(self, name: str, value: object) -> None:
        raise AttributeError("FlagThresholds is immutable")

    def __eq__(self, other: object) -> bool:
        return isinstance(other, FlagThresholds) and self._values == other._values

    def __hash__(self) -> int:
        return hash(tuple(self._values.items()))

    def __repr__(self) -> str:
        return "FlagThresholds(" + ", ".join(f"{k}={v!r}" for k, v in self._values.items()) + ")"

    def __reduce__(self) -> tuple[Callable[..., FlagThresholds], tuple[dict[str, float]]]:
        return (_from_values, (dict(self._values),))

    def as_dict(self) -> dict[str, float]:
        return dict(self._values)


def _from_values(values: dict[str, float]) -> FlagThresholds:
    return FlagThresholds(**values)


def raised_flags(report: SourceReport, thresholds: FlagThresholds) -> tuple[str, ...]:
    """The codes of every flag ``report`` raises, in registry order."""
    return tuple(flag.code for flag in FLAGS if flag.raised(report, thresholds))
