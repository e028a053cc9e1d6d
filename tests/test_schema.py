"""Schema files, inference and validation; every bad input names the file, column or row."""

from __future__ import annotations

import pandas as pd
import pytest

from glassbox.errors import DataError, SchemaError
from glassbox.schema import Schema, infer_schema, load_schema, prepare, read_table


def write(path, text: str):
    path.write_text(text, encoding="utf-8")
    return path


LOANS_LIKE = """id,revenue,late,sector,owned,age_band,outcome
a1,120.5,0,retail,yes,30-44,no
a2,80.0,2,farming,no,18-29,yes
a3,300.2,1,retail,yes,60+,no
a4,55.1,0,transport,no,45-59,no
"""


def test_infer_schema_guesses_kinds_id_and_protected(tmp_path):
    frame = read_table(write(tmp_path / "d.csv", LOANS_LIKE))
    schema = infer_schema(frame, "outcome")
    kinds = {f.name: f.kind for f in schema.features}
    assert kinds == {"revenue": "number", "late": "integer", "sector": "category",
                     "owned": "flag", "age_band": "category"}
    assert schema.id_column == "id"
    assert schema.target.positive == "yes"
    assert [f.name for f in schema.protected_features] == ["age_band"]
    # the TOML it writes loads back to the same schema
    again = load_schema(write(tmp_path / "s.toml", schema.to_toml()))
    assert again == schema
    assert "guessed from the column name" in schema.to_toml()


def test_numeric_positive_label_round_trips(tmp_path):
    frame = pd.DataFrame({"x": [1.0, 2.0, 3.0, 4.0], "y": [0, 1, 0, 1]})
    schema = infer_schema(frame, "y")
    assert schema.target.positive == 1
    loaded = load_schema(write(tmp_path / "s.toml", schema.to_toml()))
    assert prepare(frame, loaded).target.tolist() == [0.0, 1.0, 0.0, 1.0]


def test_regression_target_is_inferred():
    frame = pd.DataFrame({"x": [1, 2, 3, 4], "y": [0.5, 1.5, 2.5, 9.0]})
    assert infer_schema(frame, "y").target.task == "regression"


def test_empty_file(tmp_path):
    with pytest.raises(DataError, match=r"empty\.csv is empty"):
        read_table(write(tmp_path / "empty.csv", ""))


def test_header_only_file(tmp_path):
    with pytest.raises(DataError, match="no data rows"):
        read_table(write(tmp_path / "h.csv", "a,b,c\n"))


def test_missing_file(tmp_path):
    with pytest.raises(DataError, match="does not exist"):
        read_table(tmp_path / "nope.csv")


def test_missing_target_column(tmp_path):
    frame = read_table(write(tmp_path / "d.csv", LOANS_LIKE))
    with pytest.raises(DataError, match=r"d\.csv.*no target column 'status'"):
        infer_schema(frame, "status")
    schema = infer_schema(frame, "outcome")
    with pytest.raises(DataError, match=r"missing column\(s\) 'outcome'"):
        prepare(frame.drop(columns="outcome"), schema)


def test_three_labels_for_classification(tmp_path):
    text = LOANS_LIKE.replace("a3,300.2,1,retail,yes,60+,no", "a3,300.2,1,retail,yes,60+,maybe")
    frame = read_table(write(tmp_path / "d.csv", text))
    with pytest.raises(DataError, match=r"target column 'outcome' has 3 labels .*exactly two"):
        infer_schema(frame, "outcome", task="classification")
    schema = Schema.from_dict({"target": {"column": "outcome", "positive": "yes"},
                               "feature": {"revenue": {"kind": "number"}}})
    with pytest.raises(DataError, match="has 3 labels"):
        prepare(frame, schema)


def test_text_in_numeric_column_names_column_and_rows(tmp_path):
    text = LOANS_LIKE.replace("80.0", "eighty").replace("55.1", "n/a?")
    frame = read_table(write(tmp_path / "d.csv", text))
    schema = Schema.from_dict({"target": {"column": "outcome", "positive": "yes"},
                               "feature": {"revenue": {"kind": "number"}}})
    with pytest.raises(DataError) as caught:
        prepare(frame, schema)
    message = str(caught.value)
    assert "d.csv" in message and "'revenue'" in message
    assert "data rows 2, 4" in message and "'eighty'" in message


def test_missing_values_under_refuse_rule_name_column_and_first_rows(tmp_path):
    rows = "\n".join(f"{i},{'' if i in (3, 7) else i * 1.5},no" for i in range(1, 10))
    frame = read_table(write(tmp_path / "gaps.csv", "id,revenue,outcome\n" + rows + "\n"))
    schema = Schema.from_dict({"target": {"column": "outcome", "positive": "no"},
                               "feature": {"revenue": {"kind": "number",
                                                       "missing": "refuse"}}})
    with pytest.raises(DataError) as caught:
        prepare(frame, schema)
    message = str(caught.value)
    assert "gaps.csv" in message and "'revenue'" in message
    assert "2 missing value(s) in data rows 3, 7" in message and "fill" in message


def test_learn_rule_keeps_blanks_and_declared_codes_missing(tmp_path):
    # constructed: the CSV blanks are empty, NA, NaN and null; "N/A" is data, and -1 and
    # "unknown" are declared codes
    text = ("revenue,sector,outcome\n1.5,retail,no\n,NA,yes\nNaN,null,no\n-1,unknown,no\n"
            "null,retail,yes\n4,N/A,no\n")
    frame = read_table(write(tmp_path / "blanks.csv", text))
    schema = Schema.from_dict({"target": {"column": "outcome", "positive": "yes"},
                               "feature": {"revenue": {"kind": "number", "missing_codes": [-1]},
                                           "sector": {"kind": "category",
                                                      "missing_codes": ["unknown"]}}})
    features = prepare(frame, schema).features
    assert features["revenue"].isna().tolist() == [False, True, True, True, True, False]
    assert features["sector"].isna().tolist() == [False, True, True, True, False, False]
    assert features["sector"].iloc[5] == "N/A"


def test_missing_rules_are_checked():
    base = {"target": {"column": "y"}}
    for entry, words in (({"kind": "number", "missing": "guess"}, "missing must be one of"),
                         ({"kind": "number", "missing": "fill"}, "needs a fill value"),
                         ({"kind": "number", "fill": 1, "missing": "refuse"}, "drop one"),
                         ({"kind": "number", "missing_codes": ["none"]}, "must be numbers"),
                         ({"kind": "integer", "missing_codes": 999}, "must be a list")):
        with pytest.raises(SchemaError, match=words):
            Schema.from_dict({**base, "feature": {"x": entry}})


def test_fill_policy_fills(tmp_path):
    frame = pd.DataFrame({"x": [1.0, None, 3.0], "y": ["a", "b", "a"]})
    schema = Schema.from_dict({"target": {"column": "y", "positive": "a"},
                               "feature": {"x": {"kind": "number", "fill": 24}}})
    assert prepare(frame, schema).features["x"].tolist() == [1.0, 24.0, 3.0]


def test_integer_column_with_fractions_is_rejected():
    frame = pd.DataFrame({"n": [1, 2.5, 3], "y": [0, 1, 0]})
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1},
                               "feature": {"n": {"kind": "integer"}}})
    with pytest.raises(DataError, match="declared integer but has fractions in data row 2"):
        prepare(frame, schema)


def test_flag_with_other_values():
    frame = pd.DataFrame({"f": ["yes", "no", "perhaps"], "y": [0, 1, 0]})
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1},
                               "feature": {"f": {"kind": "flag"}}})
    with pytest.raises(DataError, match="flag .* data row 3 .*'perhaps'"):
        prepare(frame, schema)


@pytest.mark.parametrize("text, message", [
    ("[target]\ncolumn = 'y'\n", "no features declared"),
    ("[feature.x]\nkind = 'number'\n", r"a \[target\] table"),
    ("[target]\ncolumn = 'y'\n[feature.x]\nkind = 'decimal'\n", "kind must be one of"),
    ("[target]\ncolumn = 'y'\n[feature.x]\nkind = 'category'\nmonotone = 'increasing'\n",
     "cannot be monotone"),
    ("[target]\ncolumn = 'y'\n[feature.x]\nkind = 'number'\ncolour = 'red'\n",
     r"unknown key\(s\) in \[feature.x\]: colour"),
    ("[target]\ncolumn = 'y'\n[feature.x]\nkind = 'number'\nprotected = true\n",
     "nothing to fit"),
    ("[target\ncolumn = 'y'\n", "not valid TOML"),
    ("[target]\ncolumn = 'y'\ntask = 'ranking'\n[feature.x]\nkind = 'number'\n",
     "task must be one of"),
])
def test_bad_schema_files_say_what_is_wrong(tmp_path, text, message):
    path = write(tmp_path / "bad.toml", text)
    with pytest.raises(SchemaError, match=message) as caught:
        load_schema(path)
    assert "bad.toml" in str(caught.value)


def test_protected_columns_are_never_model_inputs(loans, loans_schema):
    prepared = prepare(loans, loans_schema)
    assert "owner_age_band" not in prepared.features.columns
    assert list(prepared.protected.columns) == ["owner_age_band"]


def test_parquet_reads_like_csv(tmp_path, loans):
    path = tmp_path / "loans.parquet"
    loans.to_parquet(path, index=False)
    again = read_table(path)
    pd.testing.assert_frame_equal(again, loans, check_dtype=False)
    broken = tmp_path / "broken.parquet"
    broken.write_bytes(b"PAR1 not really")
    with pytest.raises(DataError, match="broken.parquet could not be read"):
        read_table(broken)
