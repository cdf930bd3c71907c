"""Draw revisions (pipeline/revisions.py): the first published draw of a night stands.

Unit tests of :func:`draw_revision` on a real small night (Parquet written by pyarrow) against
hand-made published decisions: each expected (revision, earlier draws) follows from the
module's rule by hand, as the comments say. The whole screen's view is in test_routing.py.
"""

from __future__ import annotations

import pytest

from inboxes import write_batch, write_config, write_labels
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.revisions import draw_revision, read_published_decision
from night_support import ingest_batch

DATE = "2026-11-03"
RULE = {"kind": "threshold", "feature": "moisture_pct", "cut": 14.05, "above": 0, "below": 1}


@pytest.fixture(scope="module")
def night(tmp_path_factory):
    root = tmp_path_factory.mktemp("revisions")
    write_batch(root / "inbox", DATE, seed=3, n_items=40)
    config = load_config(write_config(root / "c.yaml"))
    return root, config, ingest_batch(root / "inbox", DATE, config)


def published(intake, **changes) -> dict:
    """What decision.json holds of tonight's intake, drawn at u = 0.25 under config "c" and key "k"."""
    decision = {
        "batch_date": DATE, "route": "aggregate", "config_sha256": "c", "draw_revision": 0, "earlier_draws": [],
        "inputs": [{"path": f.path, "sha256": f.sha256, "rows": f.rows, "valid": f.valid, "source_id": f.source_id} for f in intake.inputs],
        "errors": [], "notes": [], "quarantined": [],
        "draw": {"u": 0.25, "revision": 0, "key_fingerprint": "k", "source_id": "lab", "rule": RULE},
    }
    return {**decision, **changes}


def test_a_first_screen_is_revision_0(night):
    _, _, intake = night
    assert draw_revision(None, intake, "c", "k") == (0, [])


def test_the_same_inputs_config_and_key_keep_the_revision(night):
    _, _, intake = night
    assert draw_revision(published(intake), intake, "c", "k") == (0, [])
    # revision 2 stays 2, and its earlier draws are carried as they are
    earlier = [{"revision": 0, "u": 0.1}, {"revision": 1, "u": 0.7}]
    assert draw_revision(published(intake, draw_revision=2, earlier_draws=earlier), intake, "c", "k") == (2, earlier)


@pytest.mark.parametrize("what", ["input", "config", "key", "note", "quarantine"])
def test_any_change_after_a_published_draw_is_the_next_revision(night, what):
    _, _, intake = night
    previous = published(intake)
    config, key = "c", "k"
    if what == "input":
        previous["inputs"][1] = {**previous["inputs"][1], "sha256": "0" * 64}  # another file was screened at that path
    elif what == "config":
        config = "c2"
    elif what == "key":
        key = "k2"
    elif what == "note":  # a stray file, since removed
        previous["notes"] = [{"code": "stray_file", "path": f"batch_date={DATE}/notes.txt", "message": "not a source folder"}]
    else:  # a source quarantined then, valid tonight
        previous["quarantined"] = [{"source_id": "north", "files": []}]
    revision, earlier = draw_revision(previous, intake, config, key)
    # the published draw (revision 0) becomes the one earlier draw, with the inputs it was drawn on, sorted by path
    assert revision == 1
    assert earlier == [{
        "revision": 0, "u": 0.25, "source_id": "lab", "rule": RULE, "route": "aggregate", "config_sha256": "c",
        "inputs": sorted(({"path": x["path"], "sha256": x["sha256"]} for x in previous["inputs"]), key=lambda x: (x["path"], x["sha256"])),
    }]


def test_a_third_revision_keeps_both_earlier_draws_first(night):
    _, _, intake = night
    old = [{"revision": 0, "u": 0.1}, {"revision": 1, "u": 0.7}]
    previous = published(intake, draw_revision=2, earlier_draws=old, config_sha256="old")
    revision, earlier = draw_revision(previous, intake, "c", "k")
    assert revision == 3 and earlier[:2] == old and earlier[2]["revision"] == 2 and earlier[2]["u"] == 0.25
    assert previous["earlier_draws"] == [{"revision": 0, "u": 0.1}, {"revision": 1, "u": 0.7}]  # the published decision is not changed


def test_nothing_drawn_yet_keeps_the_revision_whatever_changed(night):
    _, _, intake = night
    # no u was published (no valid source that night), so no source could have seen it
    assert draw_revision(published(intake, draw=None, config_sha256="other"), intake, "c", "k") == (0, [])


def test_a_late_file_is_a_new_input(night, tmp_path):
    root, config, intake = night
    import shutil

    inbox = tmp_path / "inbox"
    shutil.copytree(root / "inbox", inbox)
    before = published(intake)
    write_labels(inbox / f"batch_date={DATE}", "east", ["lot-00000"], [1], name="late.parquet")
    later = ingest_batch(inbox, DATE, config)
    assert len(later.inputs) == len(intake.inputs) + 1
    assert draw_revision(before, later, "c", "k")[0] == 1


def test_an_unreadable_published_decision_counts_as_a_seen_draw(night, tmp_path):
    folder = tmp_path / f"batch_date={DATE}"
    assert read_published_decision(tmp_path, DATE) is None  # nothing published
    folder.mkdir()
    (folder / "decision.json").write_text("{not json")
    previous = read_published_decision(tmp_path, DATE)
    assert previous == {"draw": {"u": None}, "draw_revision": 0, "route": None}
    # its config digest is unknown (None, never equal to tonight's), and a draw "was" published: revision 1
    revision, earlier = draw_revision(previous, night[2], "c", "k")
    assert revision == 1 and earlier[0]["u"] is None and earlier[0]["inputs"] == []
