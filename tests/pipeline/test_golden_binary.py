"""Binary nights keep their decision.json byte for byte across refactors and the K-class change.

The golden files in tests/golden/binary/ were written by `truthsieve screen` on main at commit
e68f849 (before the orchestration rewrite and before K classes), each night screened alone into a
fresh output folder with the built-in demo key. The inputs are three nights of the demo's invented
grain cooperative, stored as they were generated, so a change to the demo generator cannot move them.
The only change allowed is the `below` key that K classes add to threshold rules (an extension in
the contract); it is removed before the byte comparison. One deliberate edit since: `krippendorff_alpha`
and `fleiss_kappa` are now computed exactly from integer counts and rounded once (the float sums had
given other last digits on a machine with other SIMD kernels), which moved them by a few units in the
last place in two nights; nothing else in the files changed.
"""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import pytest

from truthsieve.pipeline.cli import main

GOLDEN = Path(__file__).resolve().parents[1] / "golden" / "binary"
NIGHTS = ["2026-11-03", "2026-11-09", "2026-11-15"]
ADDED_BELOW = re.compile(rb'^[ ]*"below": [^\n]*,\n', re.MULTILINE)


@pytest.mark.parametrize("night", NIGHTS)
def test_binary_decision_is_byte_identical_to_the_golden_file(night, tmp_path, monkeypatch, capsys):
    monkeypatch.delenv("TRUTHSIEVE_DRAW_KEY", raising=False)
    inbox = tmp_path / "inbox"
    shutil.copytree(GOLDEN / "inbox" / f"batch_date={night}", inbox / f"batch_date={night}")
    config = tmp_path / "config.yaml"
    shutil.copyfile(GOLDEN / "config.yaml", config)
    out = tmp_path / "out"
    code = main(["screen", "--inbox", str(inbox), "--date", night, "--config", str(config), "--out", str(out)])
    assert code == 0, capsys.readouterr().err
    produced = (out / f"batch_date={night}" / "decision.json").read_bytes()
    expected = (GOLDEN / f"decision-{night}.json").read_bytes()
    assert ADDED_BELOW.sub(b"", produced) == expected


def test_the_golden_files_hold_what_the_comparison_needs():
    # The comparison must be able to fail: each golden night has a threshold rule, none has `below` yet.
    for night in NIGHTS:
        text = (GOLDEN / f"decision-{night}.json").read_bytes()
        assert b'"kind": "threshold"' in text
        assert b'"below"' not in text
