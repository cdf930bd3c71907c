"""The YAML configuration, validated once at the edge with pydantic."""

from __future__ import annotations

import hashlib
import json
from functools import cached_property
from pathlib import Path
from typing import Literal

import yaml
from pydantic import BaseModel, ConfigDict, Field, ValidationError, create_model, field_validator, model_validator

from truthsieve.core.incentives import DEFAULT_THRESHOLD_BUDGET
from truthsieve.core.mechanisms import MECHANISM_REGISTRY
from truthsieve.core.mechanism_registry import number_word
from truthsieve.core.rules import RULE_CLASSES
from truthsieve.core.flags import FLAG_CODES, THRESHOLDS, FlagThresholds
from truthsieve.pipeline.classes import ClassAlphabet, check_class_names
from truthsieve.exceptions import ConfigError
from truthsieve.pipeline import layout

SOURCE_ID_PATTERN = f"^{layout.SOURCE_ID_PATTERN}$"
RESERVED_COLUMNS = ("item_id", "item_weight")


class _UniqueKeys:
    """A mapping key given twice is an error, not "last wins"."""

    def construct_mapping(self, node, deep=False):
        seen = {}
        for key_node, _ in node.value:
            key = self.construct_object(key_node, deep=deep)  # type: ignore[attr-defined]
            try:
                earlier = seen.get(key)
            except TypeError:
                continue  # an unhashable key: the base class reports it
            if earlier is not None:
                raise yaml.constructor.ConstructorError(
                    None, None, f"key {key!r} given twice (lines {earlier} and {key_node.start_mark.line + 1})", None
                )
            seen[key] = key_node.start_mark.line + 1
        return super().construct_mapping(node, deep=deep)  # type: ignore[misc]


class _UniqueKeyLoader(_UniqueKeys, getattr(yaml, "CSafeLoader", yaml.SafeLoader)):  # type: ignore[misc]
    """YAML's safe loader with libyaml's parser where PyYAML has it (a thousand-source
    configuration parses in milliseconds, not a third of a second)."""


class _UniqueKeyExplainer(_UniqueKeys, yaml.SafeLoader):
    """The pure-Python twin, run only on a file the fast one refused: its messages quote the line."""


def _explained(text: str, error: yaml.YAMLError) -> yaml.YAMLError:
    """The pure-Python parser's account of ``error`` (it shows the offending text), else ``error``."""
    try:
        yaml.load(text, Loader=_UniqueKeyExplainer)  # noqa: S506 - a SafeLoader subclass
    except yaml.YAMLError as explained:
        return explained
    return error


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class RuleClassConfig(_Strict):
    """``rule_class``: which rules the consensus and the dictators choose from."""

    kind: str = Field(description="a rule class of truthsieve.core.rules.RULE_CLASSES")
    features: list[str] = Field(default_factory=list, description="threshold features, in tie-break order")

    @field_validator("kind")
    @classmethod
    def _registered_kind(cls, value):
        if value not in RULE_CLASSES:
            raise ValueError(RULE_CLASSES.unknown(value))
        return value

    @field_validator("features")
    @classmethod
    def _plain_distinct_features(cls, value):
        reserved = [f for f in value if f in RESERVED_COLUMNS or f.startswith("rule__")]
        if reserved:
            raise ValueError(f"{reserved} are not features: item_id, item_weight and rule__* columns have their own meaning")
        twice = sorted({f for f in value if value.count(f) > 1})
        if twice:
            raise ValueError(f"features listed twice: {twice}")
        return value

    @model_validator(mode="after")
    def _features_for_threshold(self):
        if RULE_CLASSES.get(self.kind).needs_features and not self.features:
            raise ValueError(f"rule_class.kind {self.kind!r} needs a non-empty 'features' list")
        return self


class SourceEntry(_Strict):
    """One registered source: its id, registry weight and owner's e-mail address."""

    source_id: str = Field(pattern=SOURCE_ID_PATTERN)
    weight: float = Field(gt=0, allow_inf_nan=False)
    owner: str | None = None


ROUTING_MODES = ("strategy_proof", "guarded")

# One field per flag threshold, with the default, bounds and meaning of the core's flag
# registry (truthsieve.core.flags): the defaults are written there and only there.
_FlagThresholdFields = create_model(
    "_FlagThresholdFields",
    __base__=_Strict,
    **{t.name: (float, Field(t.default, ge=t.ge, le=t.le, gt=t.gt, lt=t.lt, description=t.description)) for t in THRESHOLDS.values()},  # type: ignore[call-overload]
)


class RoutingPolicy(_FlagThresholdFields):  # type: ignore[misc,valid-type]
    """``routing``: when a batch may go to the aggregation step, and which numbers are alerts.

    ``mode: strategy_proof`` (the default): the route depends only on what no source's
    labels can change: the items table's validity, the configuration (``max_ratio``
    gates on the worst-case guarantee of the whole registry, which depends on weights
    alone) and the number of valid sources present. Flags, ratios, drift and kappas
    are published, alerted and shown for review, but never change the route; a
    quarantined source counts as absent (noted, not blocking).

    ``min_valid_sources`` is the one gate a source can still trip, by staying away or
    sending a broken file. With a value ``k >= 2`` and exactly ``k`` valid sources, any
    one of them can send the night to review alone (keeping the rule in force it may
    prefer). With ``k = 1`` no source alone can trip it while another valid source is
    present, and a source that is alone gets its own best rule, so leaving cannot help
    it either. Hence the default 1.

    ``mode: guarded``: the older behaviour. Flags listed in ``review_on_flags``, the
    realised ratio against ``max_ratio``, an undefined ratio and more than
    ``max_invalid_sources`` quarantined sources also send the night to review. Every
    one of those gates can be tripped by a report, so this mode is NOT strategy-proof.

    In review the previously published rule stays in force.
    """

    mode: Literal[ROUTING_MODES] = Field("strategy_proof", description="strategy_proof (default) or guarded")  # type: ignore[valid-type]
    min_valid_sources: int = Field(1, ge=1, description="fewer valid sources than this: review")
    max_invalid_sources: int = Field(0, ge=0, description="guarded: more quarantined sources than this: review")
    max_ratio: float | None = Field(
        None,
        ge=1.0,
        description="strategy_proof: registry guarantee above this: review (default 3); guarded: realised ratio above this: review (default 2)",
    )
    review_on_flags: list[str] = Field(default_factory=lambda: list(FLAG_CODES), description="guarded: flags that send a batch to review")
    drift_window: int = Field(7, ge=1, description="earlier batches pooled as each source's history")

    @property
    def ratio_bound(self) -> float:
        """``max_ratio`` or its mode's default."""
        if self.max_ratio is not None:
            return self.max_ratio
        return 3.0 if self.mode == "strategy_proof" else 2.0

    @field_validator("review_on_flags")
    @classmethod
    def _known_flags(cls, value):
        unknown = sorted(set(value) - set(FLAG_CODES))
        if unknown:
            raise ValueError(f"unknown flag codes {unknown}; known: {list(FLAG_CODES)}")
        return value

    def thresholds(self) -> FlagThresholds:
        return FlagThresholds(**{name: getattr(self, name) for name in THRESHOLDS})


class AnalysisSettings(_Strict):
    """``analysis``: numerical settings of the estimators."""

    dawid_skene_tolerance: float = Field(1e-6, gt=0)
    dawid_skene_max_iterations: int = Field(200, ge=1)
    incentive_budget: int = Field(DEFAULT_THRESHOLD_BUDGET, ge=0, description="reachability checks per source (threshold class)")
    sample_epsilon: float = Field(0.05, gt=0, lt=1, description="items_needed: accuracy of every risk estimate")
    sample_delta: float = Field(0.05, gt=0, lt=1, description="items_needed: failure probability")


class AlertSettings(_Strict):
    """``alerts``: who hears about flagged sources (the SMTP server is an Airflow connection)."""

    platform_address: str | None = None
    smtp_conn_id: str = "smtp_default"
    from_address: str = "truthsieve@localhost"


class Config(_Strict):
    rule_class: RuleClassConfig
    mechanism: str = Field(description="a mechanism of truthsieve.core.mechanisms.MECHANISM_REGISTRY")
    sources: list[SourceEntry] = Field(min_length=1)
    routing: RoutingPolicy = Field(default_factory=RoutingPolicy)
    analysis: AnalysisSettings = Field(default_factory=AnalysisSettings)
    alerts: AlertSettings = Field(default_factory=AlertSettings)
    classes: list[str] | None = Field(None, description="class names, index order; default two classes 0/1 (see pipeline/classes.py)")

    @field_validator("mechanism")
    @classmethod
    def _registered_mechanism(cls, value):
        if value not in MECHANISM_REGISTRY:
            raise ValueError(MECHANISM_REGISTRY.unknown(value))
        return value

    @field_validator("classes", mode="before")
    @classmethod
    def _usable_class_names(cls, value):
        # before the str check: YAML reads unquoted yes, off, 3 or null as a bool, number or
        # None, and the one line should say which class and how to fix it
        return check_class_names(value) if isinstance(value, list) else value

    @property
    def class_alphabet(self) -> ClassAlphabet:
        return ClassAlphabet.from_config(self.classes)

    @model_validator(mode="after")
    def _consistent(self):
        ids = [s.source_id for s in self.sources]
        duplicates = sorted({s for s in ids if ids.count(s) > 1})
        if duplicates:
            raise ValueError(f"sources listed twice: {duplicates}")
        self._mechanism_fits()
        return self

    def _mechanism_fits(self) -> None:
        """The mechanism's registry entry against the rule class's and the routing mode."""
        spec, kind = MECHANISM_REGISTRY.get(self.mechanism), self.rule_class.kind
        accepted = spec.accepted_kinds()
        if kind not in accepted:
            raise ValueError(f"mechanism {self.mechanism!r} needs rule_class.kind {' or '.join(repr(k) for k in accepted)}")
        size_for = RULE_CLASSES.get(kind).size_for_classes
        n_classes = 2 if self.classes is None else len(self.classes)
        if spec.rule_count is not None and size_for is not None and size_for(n_classes) != spec.rule_count:
            others = [m.name for m in MECHANISM_REGISTRY if m.rule_count is None and kind in m.accepted_kinds() and m.strategy_proof]
            raise ValueError(
                f"mechanism {self.mechanism!r} chooses between exactly {number_word(spec.rule_count)} rules, but classes has {n_classes} "
                f"(so the {kind} class has {size_for(n_classes)} rules); choose one of {', '.join(others)}"
            )
        if not spec.strategy_proof and self.routing.mode == "strategy_proof":
            chosen = [m.name for m in MECHANISM_REGISTRY if m.strategy_proof]
            raise ValueError(
                f"mechanism {self.mechanism!r} is not strategy-proof and cannot be used with routing.mode 'strategy_proof'; "
                f"choose one of {', '.join(chosen)}, or set routing.mode: guarded"
            )

    def digest(self) -> str:
        """``sha256:`` of the canonical JSON of the validated configuration (every default filled in)."""
        dump = self.model_dump(mode="json", exclude={"classes"} if self.classes is None else None)  # binary digests unchanged
        canonical = json.dumps(dump, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
        return "sha256:" + hashlib.sha256(canonical.encode()).hexdigest()

    @cached_property
    def registry(self) -> dict[str, SourceEntry]:
        """Each registered source by id (built once: a night asks once per source)."""
        return {s.source_id: s for s in self.sources}


def load_config(path) -> Config:
    """Read and validate a YAML configuration file.

    :param path: a path, or any path-like object with ``read_text`` (e.g. an Airflow
        ``ObjectStoragePath``).
    :raises ConfigError: missing file, text that is not UTF-8, bad YAML, a mapping key
        given twice, or a value that breaks the schema (the one-line message names each
        offending key).
    """
    path = Path(path) if isinstance(path, str) else path
    try:
        text = path.read_bytes().decode("utf-8")
        raw = yaml.load(text, Loader=_UniqueKeyLoader)  # noqa: S506 - a SafeLoader subclass
    except OSError as error:
        raise ConfigError(f"{path}: cannot read configuration: {error.strerror or error}") from error
    except UnicodeDecodeError as error:
        raise ConfigError(f"{path}: not UTF-8 text (byte 0x{error.object[error.start]:02x} at offset {error.start})") from error
    except yaml.YAMLError as error:
        raise ConfigError(f"{path}: not valid YAML: {_one_line(_explained(text, error))}") from error
    if not isinstance(raw, (dict, type(None))):
        raise ConfigError(f"{path}: invalid configuration: (top level): must be a mapping of keys, not {type(raw).__name__}")
    try:
        return Config.model_validate(raw or {})
    except ValidationError as error:
        problems = "; ".join(
            f"{'.'.join(str(p) for p in e['loc']) or '(top level)'}: {_one_line(e['msg'])}" for e in error.errors()
        )
        raise ConfigError(f"{path}: invalid configuration: {problems}") from error
