"""The class alphabet at the edge: label and rule columns from real Parquet files, and ``classes`` in the config."""

from __future__ import annotations

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from inboxes import cli
from truthsieve.exceptions import ConfigError
from truthsieve.pipeline.classes import BINARY, ClassAlphabet, class_name_array, decode_labels, decode_rule_column
from truthsieve.pipeline.config import load_config
from truthsieve.pipeline.records import MAX_ROWS_PER_RULE

GRADES = ClassAlphabet(("reject", "feed", "milling", "premium"))
DUO = ClassAlphabet(("reject", "accept"))


def through_parquet(tmp_path, column: pa.Array, name: str = "label") -> pa.ChunkedArray:
    """Write the column to a real Parquet file and read it back the way ingest does."""
    path = tmp_path / "grades.parquet"
    pq.write_table(pa.table({"item_id": [f"lot-{k}" for k in range(len(column))], name: column}), path)
    return pq.ParquetFile(path).read().column(name)


@pytest.mark.parametrize(
    ("column", "classes", "expected"),
    [
        (pa.array([3, 0, 2, 1], pa.int64()), GRADES, [3, 0, 2, 1]),
        (pa.array([3, 0, 2, 1], pa.uint8()), GRADES, [3, 0, 2, 1]),
        (pa.array(["premium", "reject", "milling", "feed"]), GRADES, [3, 0, 2, 1]),
        (pa.array(["premium", "reject", "milling", "feed"]).dictionary_encode(), GRADES, [3, 0, 2, 1]),
        (pa.array(["premium", "reject", "milling", "feed"], pa.large_string()), GRADES, [3, 0, 2, 1]),
        (pa.array([True, False, True]), BINARY, [1, 0, 1]),
        (pa.array([1, 0, 1], pa.int32()), BINARY, [1, 0, 1]),
        (pa.array([True, False]), DUO, [1, 0]),
        (pa.array(["accept", "reject"]), DUO, [1, 0]),
    ],
)
def test_accepted_encodings_decode_to_class_indices(tmp_path, column, classes, expected):
    indices, errors = decode_labels("b/s/grades.parquet", through_parquet(tmp_path, column), classes)
    assert errors == []
    assert indices.tolist() == expected and indices.dtype.name == "int8"


def test_more_than_127_classes_decode_to_int16(tmp_path):
    many = ClassAlphabet(tuple(f"class{k}" for k in range(200)))
    indices, errors = decode_labels("f", through_parquet(tmp_path, pa.array([199, 0], pa.int16())), many)
    assert errors == [] and indices.tolist() == [199, 0] and indices.dtype.name == "int16"


@pytest.mark.parametrize(
    ("column", "classes", "rule", "rows"),
    [
        # out of range: 4 and -1 with K = 4 (rows 2 and 4, counting from 1)
        (pa.array([0, 4, 3, -1], pa.int64()), GRADES, "class_index_out_of_range", [2, 4]),
        # a uint64 far beyond int64 must not wrap around into range
        (pa.array([1, 2**64 - 1], pa.uint64()), GRADES, "class_index_out_of_range", [2]),
        (pa.array([1, 2], pa.int8()), BINARY, "label_out_of_range", [2]),
        (pa.array(["feed", "Feed", "gold", "premium"]), GRADES, "unknown_class_name", [2, 3]),
        (pa.array([1, None, 0], pa.int64()), GRADES, "null_label", [2]),
        (pa.array(["feed", None]), GRADES, "null_label", [2]),
        (pa.array([True, None]), BINARY, "null_label", [2]),
    ],
)
def test_bad_values_name_file_rows_and_column(tmp_path, column, classes, rule, rows):
    indices, errors = decode_labels("batch_date=2026-12-01/source_id=mill/grades.parquet", through_parquet(tmp_path, column), classes)
    assert indices is None
    assert [(e.file, e.row, e.column, e.rule) for e in errors] == [
        ("batch_date=2026-12-01/source_id=mill/grades.parquet", r, "label", rule) for r in rows
    ]


@pytest.mark.parametrize(
    ("column", "classes", "words"),
    [
        (pa.array([1.0, 2.0]), GRADES, ["double", "0..3"]),
        (pa.array([1.0, 0.0]), BINARY, ["label must be bool or integer 0/1, not double"]),
        (pa.array([True, False]), GRADES, ["bool", "4 classes"]),
        (pa.array(["0", "1"]), BINARY, ["not string"]),  # names need configured classes
    ],
)
def test_columns_of_another_type_are_one_wrong_type_record(tmp_path, column, classes, words):
    indices, errors = decode_labels("f.parquet", through_parquet(tmp_path, column), classes)
    assert indices is None and len(errors) == 1
    assert (errors[0].row, errors[0].column, errors[0].rule) == (None, "label", "wrong_type")
    for word in words:
        assert word in errors[0].message


def test_the_binary_default_keeps_todays_records_word_for_word(tmp_path):
    # the messages ingest wrote before K classes (ingest.py's _validate_labels at e68f849)
    _, errors = decode_labels("f", through_parquet(tmp_path, pa.array([0, None, 7], pa.int64())))
    assert [(e.rule, e.code, e.message) for e in errors] == [
        ("null_label", "grade_blank", "label is null"),
        ("label_out_of_range", "grade_not_0_or_1", "label must be 0 or 1"),
    ]


def test_many_bad_rows_are_capped_and_counted(tmp_path):
    column = pa.array([9] * (MAX_ROWS_PER_RULE + 5), pa.int64())
    _, errors = decode_labels("f", through_parquet(tmp_path, column), GRADES)
    assert [e.row for e in errors[:-1]] == list(range(1, MAX_ROWS_PER_RULE + 1))
    assert errors[-1].row is None and errors[-1].message.startswith("5 more rows")


@pytest.mark.parametrize(
    ("column", "classes", "expected", "rule", "rows"),
    [
        (pa.array([3, 0, 1], pa.int16()), GRADES, [3, 0, 1], None, []),
        (pa.array([True, False]), BINARY, [1, 0], None, []),
        (pa.array([3, 4], pa.int16()), GRADES, None, "rule_class_out_of_range", [2]),
        (pa.array([1, None], pa.int16()), GRADES, None, "null_rule_value", [2]),
        (pa.array([True, False]), GRADES, None, "wrong_type", [None]),
        (pa.array(["feed", "reject"]), GRADES, None, "wrong_type", [None]),  # listed columns hold indices
    ],
)
def test_listed_rule_columns_hold_class_indices(tmp_path, column, classes, expected, rule, rows):
    name = "rule__dry_and_heavy"
    indices, errors = decode_rule_column("items.parquet", through_parquet(tmp_path, column, name), name, classes)
    assert (indices.tolist() if indices is not None else None) == expected
    assert [(e.row, e.column, e.rule) for e in errors] == [(r, name, rule) for r in rows]


def test_class_names_for_outputs():
    assert class_name_array([3, 0, 3], GRADES).to_pylist() == ["premium", "reject", "premium"]
    assert class_name_array([1, 0], BINARY).to_pylist() == ["1", "0"]
    with pytest.raises(ValueError):
        class_name_array([4], GRADES)


CONFIG = """\
rule_class: {kind: threshold, features: [moisture_pct]}
mechanism: tuned_dictator
sources:
  - {source_id: lab, weight: 2.0}
"""


def test_classes_in_the_config(tmp_path):
    path = tmp_path / "c.yaml"
    path.write_text(CONFIG + "classes: [reject, feed, milling, premium]\n")
    config = load_config(path)
    assert config.class_alphabet == GRADES and config.class_alphabet.count == 4
    path.write_text(CONFIG)
    assert load_config(path).class_alphabet == BINARY


def test_naming_the_classes_changes_the_digest_and_leaving_them_out_does_not(tmp_path):
    path = tmp_path / "c.yaml"
    path.write_text(CONFIG)
    plain = load_config(path).digest()
    path.write_text(CONFIG + "classes: null\n")
    assert load_config(path).digest() == plain
    path.write_text(CONFIG + "classes: [reject, accept]\n")
    assert load_config(path).digest() != plain


@pytest.mark.parametrize(
    ("classes", "words"),
    [
        ("[premium]", "at least 2"),
        ("[]", "at least 2"),
        ("[feed, feed, premium]", "named twice"),
        ("[reject, '']", "empty name"),
        ("[reject, ' feed']", "white space"),
        ("[reject, '2']", "mistaken"),
        ("[reject, '1.5']", "mistaken"),
        ("[reject, 'nan']", "mistaken"),
        ("[reject, 'True']", "mistaken"),
        ("[reject, 3]", "must be a name (a string), not int 3"),
        ("reject", "valid list"),
    ],
)
def test_bad_class_lists_are_one_line_config_errors(tmp_path, classes, words):
    path = tmp_path / "c.yaml"
    path.write_text(CONFIG + f"classes: {classes}\n")
    with pytest.raises(ConfigError) as caught:
        load_config(path)
    message = str(caught.value)
    assert "\n" not in message and "classes" in message and words in message


def test_a_bad_class_list_exits_2_from_the_command_line(tmp_path):
    path = tmp_path / "c.yaml"
    path.write_text(CONFIG + "classes: [reject, '2', reject]\n")
    result = cli("screen", "--inbox", str(tmp_path), "--date", "2026-12-01", "--config", str(path), "--out", str(tmp_path / "out"))
    assert result.returncode == 2 and len(result.stderr.strip().splitlines()) == 1 and "Traceback" not in result.stderr


def test_each_bad_row_says_what_it_holds(tmp_path):
    # README: an error record names file, row, column and what was found
    names = through_parquet(tmp_path, pa.array(["feed", "Premium", "2", "premiun"]).dictionary_encode())
    _, errors = decode_labels("f", names, GRADES)
    assert [(e.row, e.message.split(" names no class")[0]) for e in errors] == [
        (2, "label 'Premium'"), (3, "label '2'"), (4, "label 'premiun'"),
    ]
    assert "integer column" in errors[1].message and "integer column" not in errors[0].message
    _, errors = decode_labels("f", through_parquet(tmp_path, pa.array([0, 4, 3, -1], pa.int16())), GRADES)
    assert [(e.row, e.message) for e in errors] == [
        (2, "label must be a class index 0..3, not 4"), (4, "label must be a class index 0..3, not -1"),
    ]
    _, errors = decode_rule_column("f", through_parquet(tmp_path, pa.array([1, 7], pa.int8()), "rule__x"), "rule__x", GRADES)
    assert [(e.row, e.message) for e in errors] == [(2, "rule value must be a class index 0..3, not 7")]
    # K = 2 keeps the binary words exactly (binary decision.json files stay byte for byte)
    _, errors = decode_labels("f", through_parquet(tmp_path, pa.array([1, 2], pa.int8())), BINARY)
    assert [(e.row, e.message) for e in errors] == [(2, "label must be 0 or 1")]


def test_a_capped_list_of_bad_rows_still_ends_with_the_count_of_the_rest(tmp_path):
    column = through_parquet(tmp_path, pa.array(["gold"] * (MAX_ROWS_PER_RULE + 3)))
    _, errors = decode_labels("f", column, GRADES)
    assert len(errors) == MAX_ROWS_PER_RULE + 1
    assert errors[-1].row is None and errors[-1].message == "3 more rows break this rule"
    assert errors[0].message.startswith("label 'gold' names no class")
