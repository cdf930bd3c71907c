"""Configuration errors: each is one line naming the key, and exit 2 from the command line."""

from __future__ import annotations

import pytest

from inboxes import cli, write_batch
from truthsieve.exceptions import ConfigError
from truthsieve.pipeline.config import load_config

GOOD = """\
rule_class: {kind: threshold, features: [moisture_pct]}
mechanism: tuned_dictator
sources:
  - {source_id: lab, weight: 2.0}
  - {source_id: north, weight: 1.0}
"""


def _write(tmp_path, text: str | bytes):
    path = tmp_path / "c.yaml"
    path.write_bytes(text if isinstance(text, bytes) else text.encode())
    return path


def _error(tmp_path, text) -> str:
    with pytest.raises(ConfigError) as caught:
        load_config(_write(tmp_path, text))
    message = str(caught.value)
    assert "\n" not in message
    return message


def test_the_good_configuration_loads(tmp_path):
    assert load_config(_write(tmp_path, GOOD)).rule_class.features == ["moisture_pct"]


@pytest.mark.parametrize(
    ("text", "expected"),
    [
        # line 2 and line 3 both give mechanism
        (GOOD.replace("mechanism: tuned_dictator\n", "mechanism: tuned_dictator\nmechanism: erm\n"), "key 'mechanism' given twice (lines 2 and 3)"),
        # a nested mapping: weight twice in the flow mapping on line 4
        (GOOD.replace("{source_id: lab, weight: 2.0}", "{source_id: lab, weight: 2.0, weight: 9.0}"), "key 'weight' given twice (lines 4 and 4)"),
        ("routing: {max_ratio: 2}\nrouting: {max_ratio: 3}\n" + GOOD, "key 'routing' given twice (lines 1 and 2)"),
    ],
)
def test_a_key_given_twice_is_rejected(tmp_path, text, expected):
    assert expected in _error(tmp_path, text)


def test_a_configuration_that_is_not_utf8_is_rejected(tmp_path):
    text = GOOD.encode().replace(b"lab", b"l\xe9b", 1)  # Latin-1 e-acute
    message = _error(tmp_path, text)
    offset = GOOD.encode().index(b"lab") + 1
    assert message.endswith(f"not UTF-8 text (byte 0xe9 at offset {offset})")


@pytest.mark.parametrize(
    ("features", "expected"),
    [
        ("[item_id]", "rule_class.features"),
        ("[moisture_pct, item_weight]", "rule_class.features"),
        ("[rule__dry]", "rule_class.features"),
        ("[moisture_pct, moisture_pct]", "features listed twice: ['moisture_pct']"),
    ],
)
def test_features_that_are_not_plain_distinct_columns_are_rejected(tmp_path, features, expected):
    assert expected in _error(tmp_path, GOOD.replace("[moisture_pct]", features))


def test_yaml_syntax_errors_and_non_mappings_are_one_line(tmp_path):
    assert "not valid YAML" in _error(tmp_path, "rule_class: {kind: threshold\nmechanism: erm\n")
    assert "must be a mapping" in _error(tmp_path, "- just\n- a list\n")


def test_cli_reports_a_duplicate_key_in_one_line_with_exit_2(tmp_path):
    inbox = tmp_path / "inbox"
    write_batch(inbox, "2026-11-03")
    config = _write(tmp_path, GOOD.replace("mechanism: tuned_dictator\n", "mechanism: tuned_dictator\nmechanism: erm\n"))
    result = cli("screen", "--inbox", str(inbox), "--date", "2026-11-03", "--config", str(config), "--out", str(tmp_path / "out"))
    assert result.returncode == 2 and result.stderr.count("\n") == 1 and "mechanism" in result.stderr
    assert not (tmp_path / "out").exists()


def test_a_tab_in_the_indentation_is_named_with_the_line_it_is_on(tmp_path):
    # the fast parser's message says only "found character that cannot start any token";
    # the refused file is parsed again by the pure-Python one, whose message names the tab
    message = _error(tmp_path, "mechanism: erm\nrule_class:\n\tkind: constant\n")
    assert "not valid YAML" in message and "'\\t'" in message and "line 3" in message
