"""Build the core's objects from an oracle :class:`Instance`."""

from __future__ import annotations

from truthsieve.core import build_label_matrix, build_rule_class

from oracle import Instance

FEATURES = ["moisture_pct", "falling_number_s"]


def core_objects(instance: Instance, kind: str):
    labels, items = instance.frames()
    matrix = build_label_matrix(labels, items, instance.source_weights, n_classes=instance.n_classes)
    features = FEATURES if kind == "threshold" else ()
    rule_class = build_rule_class(kind, items, matrix.item_ids, features, instance.n_classes)
    return matrix, rule_class
