"""Test helpers over the night's steps: a local night's intake in memory, and the decide
step's result in its JSON form (what the tests read by key)."""

from __future__ import annotations

from pathlib import Path

from truthsieve.pipeline.layout import scan_batch
from truthsieve.pipeline.night import item_index, validate_items_at, validate_source_at
from truthsieve.pipeline.records import Intake
from truthsieve.pipeline.screen import decide_night


def ingest_batch(inbox, batch_date: str, config) -> Intake:
    """Validate the items table and every source folder of one local night, in memory
    (the validation steps of :func:`~truthsieve.pipeline.night.screen_night`, no store)."""
    inbox = Path(inbox)
    folders = [p.name for p in scan_batch(inbox, batch_date).sources]  # refuses a missing night
    items = validate_items_at(inbox, batch_date, config)
    index = item_index(items)
    return Intake(batch_date, items, [validate_source_at(inbox, batch_date, f, config, index) for f in folders])


def decide(intake: Intake, config, history, *args, **kwargs):
    """:func:`~truthsieve.pipeline.screen.decide_night` as (decision JSON, files, analysis)."""
    decided = decide_night(intake, config, history, *args, **kwargs)
    return decided.as_json, decided.files, decided.analysis


def demo_nights_inbox(folder: Path):
    """The grain demo's invented inbox in ``folder``: (inbox, dates, config), with the
    public demo draw key (any ``TRUTHSIEVE_DRAW_KEY`` of the caller's shell removed)."""
    import os

    from truthsieve.pipeline import demo

    os.environ.pop("TRUTHSIEVE_DRAW_KEY", None)
    return folder, demo.generate_inbox(folder), demo.demo_config()
