"""The night's inputs checked against the configuration (a local inbox): the items
table, its index (ids and weights), one source folder, or every folder of the night.

The steps of :mod:`truthsieve.pipeline.night` call these inside the store's local inbox.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa

from truthsieve.core.ids import id_array
from truthsieve.pipeline import ingest
from truthsieve.pipeline.config import Config
from truthsieve.pipeline.layout import batch_dir
from truthsieve.pipeline.records import FileCheck


@dataclass(frozen=True)
class ItemIndex:
    """The items every source's labels are checked against: ids and weights, in table order."""

    ids: pa.Array
    weights: np.ndarray


def item_index(items: FileCheck) -> ItemIndex | None:
    """The valid items table's index; None when the items table is invalid."""
    if not items.valid:
        return None
    ids = id_array(items.table["item_id"])
    if "item_weight" in items.table:
        return ItemIndex(ids, items.table["item_weight"].to_numpy(dtype=np.float64))
    return ItemIndex(ids, np.ones(len(ids)))


def validate_items_at(inbox: Path, batch_date: str, config: Config) -> FileCheck:
    """Validate the night's items table (local inbox) against the configured rule class."""
    kind = config.rule_class.kind
    return ingest.validate_items(inbox, batch_date, config.rule_class.features, kind == "listed", kind, classes=config.class_alphabet)


def validate_source_at(inbox: Path, batch_date: str, folder: str, config: Config, index: ItemIndex | None) -> FileCheck:
    """Validate one source folder (local inbox) against the items index."""
    ids, weights = (None, None) if index is None else (index.ids, index.weights)
    return ingest.validate_source(inbox, batch_dir(inbox, batch_date) / folder, config.registry, ids, weights, classes=config.class_alphabet)


def validate_sources_at(inbox: Path, batch_date: str, folders: list[str], config: Config, index: ItemIndex | None) -> Iterator[FileCheck]:
    """:func:`validate_source_at` of each folder, in order, their item-id joins batched
    (:func:`~truthsieve.pipeline.ingest.validate_sources`)."""
    ids, weights = (None, None) if index is None else (index.ids, index.weights)
    batch = batch_dir(inbox, batch_date)
    return ingest.validate_sources(inbox, [batch / f for f in folders], config.registry, ids, weights, classes=config.class_alphabet)
