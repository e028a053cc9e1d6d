"""Penalised-spline family against pygam fitted directly and published shapes."""

from __future__ import annotations

import contextlib
import dataclasses
import io
import itertools

import numpy as np
import pandas as pd
import pytest
from pygam import LinearGAM, LogisticGAM, f, l, s
from scipy import stats
from threadpoolctl import threadpool_limits

from glassbox import fit_model
from glassbox.core import artifact
from glassbox.core.errors import DataError, OptionError, SchemaError, UnseenLevelWarning
from glassbox.core.schema import Schema, prepare

from .conftest import reference_data

LOANS_MONOTONE = {"annual_revenue": "decreasing", "years_trading": "decreasing",
                  "debt_to_revenue": "increasing", "late_payments_24m": "increasing",
                  "amount_requested": "increasing"}


def schema_of(target: str, task: str, features: dict[str, dict], positive=None) -> Schema:
    # a bad credit status is the bad outcome for the person (lower is better); a higher
    # wage and being in the labour force (mroz inlf) are taken as the better ones
    entry = {"column": target, "task": task,
             "better": "lower" if positive == "bad" else "higher"}
    if positive is not None:
        entry["positive"] = positive
    return Schema.from_dict({"target": entry, "feature": features})


def pygam_fit(model, matrix: np.ndarray, target: np.ndarray):
    """pygam fitted directly; quiet, one BLAS thread (only so the test runs fast)."""
    with threadpool_limits(limits=1, user_api="blas"), contextlib.redirect_stdout(io.StringIO()):
        return model.fit(matrix, target)


def logit(p: np.ndarray) -> np.ndarray:
    return np.log(p / (1 - p))


def on_scale(column, record: dict) -> np.ndarray:
    """A feature on the scale a model file records for it. The power scale is computed
    with scipy's own Box-Cox transform; pygam rescales every column to its training range
    before placing knots, so any increasing affine image of the scale gives the same fit."""
    values = np.asarray(column, dtype=float)
    if record["scale"] == "raw":
        return values
    return stats.boxcox((values + record["shift"]) / record["centre"], lmbda=record["power"])


def scaled_matrix(frame: pd.DataFrame, names: list[str], details: dict,
                  codes: dict[str, list[str]] | None = None) -> np.ndarray:
    """The matrix pygam is fitted on: splines on their recorded scale, categories coded."""
    columns = []
    for name in names:
        if codes and name in codes:
            columns.append(frame[name].map({v: i for i, v in enumerate(codes[name])}).to_numpy())
        else:
            columns.append(on_scale(frame[name], details["scales"].get(name, {"scale": "raw"})))
    return np.column_stack(columns).astype(float)


@pytest.fixture(scope="module")
def wage() -> pd.DataFrame:
    return reference_data("ISLR", "Wage")


@pytest.fixture(scope="module")
def wage_schema() -> Schema:
    return schema_of("wage", "regression", {"age": {"kind": "integer"},
                                            "year": {"kind": "integer"},
                                            "education": {"kind": "category"}})


@pytest.fixture(scope="module")
def loans_split(loans):
    # demo data (invented): the first 4,000 rows train, the last 1,000 are fresh rows
    return loans.iloc[:4000].reset_index(drop=True), loans.iloc[4000:].reset_index(drop=True)


@pytest.fixture(scope="module")
def loans_model(loans_split, loans_schema):
    # bins above the demo's distinct values (annual_revenue has 2,926): an exact fit
    return fit_model(loans_split[0], loans_schema, "spline", bins=4096)


def test_loans_classification_matches_pygam(loans_split, loans_schema, loans_model):
    # Reference: pygam's LogisticGAM fitted here with the same terms, each at the penalty the
    # model file records for it, on the scales it records (demo data, invented); fresh rows
    # are compared inside the training range, since tables hold their end values beyond it
    # while pygam extrapolates. pygam runs to a tight tolerance, so its own stopping rule is
    # not what differs; the monotone terms' soft constraint leaves both fits moving by about
    # 1e-7 from step to step (the rounding of a system holding a penalty of 1e9), so the
    # tables agree with pygam at their knots to 1e-6, not to the last digit.
    train, fresh = loans_split
    details = loans_model.metadata["details"]
    assert details["bins"] == {"exact": True, "features": {}}
    lam = details["penalties"]
    names = list(prepare(train, loans_schema).features.columns)
    codes = {"sector": sorted(train["sector"].unique())}

    # a blank revenue (demo data has them): pygam sees the model's stand-in value and an
    # explicit 0/1 indicator as an unpenalised linear term, as the family fits it
    stand_in = details["missing_indicators"]["annual_revenue"]["stand_in"]

    def matrix(frame):
        encoded = prepare(frame, loans_schema).features
        blank = encoded["annual_revenue"].isna().to_numpy(dtype=float)
        filled = encoded.fillna({"annual_revenue": stand_in})
        return np.column_stack([scaled_matrix(filled, names, details, codes), blank])

    target = (train["defaulted"] == "yes").to_numpy(dtype=float)
    assert train["late_payments_24m"].nunique() == 12  # too few values for 20 splines
    assert details["scales"]["late_payments_24m"] == {"scale": "raw"}
    assert details["scales"]["annual_revenue"]["scale"] == "power"

    def spline(i, name, n_splines=20):
        kind = {"increasing": "monotonic_inc", "decreasing": "monotonic_dec"}
        return s(i, n_splines=n_splines, lam=lam[name],
                 constraints=kind.get(LOANS_MONOTONE.get(name)))

    terms = (spline(0, "annual_revenue") + spline(1, "years_trading")
             + spline(2, "debt_to_revenue") + spline(3, "credit_utilisation")
             + spline(4, "late_payments_24m", 12) + spline(5, "amount_requested")
             + f(6, lam=lam["sector"]) + l(7, penalties=None) + l(8, penalties=None))
    reference = pygam_fit(LogisticGAM(terms, tol=1e-8, max_iter=40), matrix(train), target)
    low, high = train[names[:6]].min(), train[names[:6]].max()
    inside = ((fresh[names[:6]] >= low) & (fresh[names[:6]] <= high)).all(axis=1).to_numpy()
    for frame, rows in ((train, slice(None)), (fresh, inside)):
        expected = logit(reference.predict_mu(matrix(frame)))
        gap = np.abs(loans_model.score(frame) - expected)[rows]
        assert gap.max() <= 1e-3
    # table values at the knots are pygam's partial dependence there, up to the centring
    for index, term in enumerate(loans_model.terms):
        if term.kind == "levels":
            points = np.arange(len(codes["sector"]), dtype=float)
        else:
            points = on_scale(term.knots, details["scales"].get(term.feature,
                                                                {"scale": "raw"}))
        grid = np.zeros((len(points), len(names) + 1))  # the last: the blank indicator
        grid[:, index] = points
        offset = np.asarray(term.values) - reference.partial_dependence(index, X=grid)
        assert np.ptp(offset) <= 1e-6, term.feature


def wage_gam(matrix: np.ndarray, target: np.ndarray, lams: dict[str, float]):
    """pygam's LinearGAM on ISLR Wage's age, year and education at the given penalties."""
    terms = (s(0, n_splines=20, lam=lams["age"]) + s(1, n_splines=7, lam=lams["year"])
             + f(2, lam=lams["education"]))
    return pygam_fit(LinearGAM(terms), matrix, target)


def test_wage_regression_matches_pygam_and_its_criterion(wage, wage_schema):
    # Reference: pygam's LinearGAM on ISLR Wage, fitted here. With every term at each grid
    # penalty its GCV and AIC are the shared stage's values; at the penalties the model
    # file records per term its GCV is the model's, its predictions are the tables', and
    # moving any one term's penalty a grid step either way scores no better (the search's
    # own claim: a coordinate-wise optimum, checked with pygam's GCV, not the search's).
    model = fit_model(wage, wage_schema, "spline")
    by_aic = fit_model(wage, wage_schema, "spline", criterion="aic")
    details = model.metadata["details"]
    assert details["criterion"] == "GCV"
    assert details["fallbacks"] == {"year": "7 distinct values: 7 basis functions instead of "
                                            "20; fitted on the values themselves (evenly "
                                            "spaced knots)"}
    levels = sorted(wage["education"].unique())
    names = ["age", "year", "education"]
    matrix = scaled_matrix(wage, names, details, {"education": levels})
    target = wage["wage"].to_numpy()
    gcv, aic = [], []
    for lam in details["penalty_grid"]:
        gam = wage_gam(matrix, target, dict.fromkeys(names, lam))
        gcv.append(gam.statistics_["GCV"])
        aic.append(gam.statistics_["AIC"])
    np.testing.assert_allclose(details["criterion_values"], gcv, rtol=1e-6)
    np.testing.assert_allclose(by_aic.metadata["details"]["criterion_values"], aic, rtol=1e-6)
    assert details["shared_penalty"] == details["penalty_grid"][int(np.argmin(gcv))]
    chosen = details["penalties"]
    assert set(chosen) == set(names)
    reference = wage_gam(matrix, target, chosen)
    assert reference.statistics_["GCV"] == pytest.approx(details["criterion_value"], rel=1e-6)
    assert reference.statistics_["GCV"] <= min(gcv)  # never worse than the shared choice
    grid = details["penalty_grid"]
    for name in names:
        for step in (-1, 1):
            position = grid.index(chosen[name]) + step
            if 0 <= position < len(grid):
                moved = wage_gam(matrix, target, {**chosen, name: grid[position]})
                assert moved.statistics_["GCV"] >= reference.statistics_["GCV"] * (1 - 1e-6)
    assert np.abs(model.score(wage) - reference.predict(matrix)).max() <= 1e-6
    assert details["table_error"] == {"age": 0.0, "year": 0.0}  # every whole number is a knot
    # the band is the 95% interval of the term centred on the training rows, under
    # pygam's normal approximation to its coefficients (coef_, statistics_["cov"]).
    # Reference: simulation through pygam's own partial_dependence, drawing 1000
    # coefficient vectors; the band's half-width must match the simulated quantiles.
    draws = np.random.default_rng(0).multivariate_normal(
        reference.coef_, reference.statistics_["cov"], size=1000, method="eigh")
    saved = reference.coef_.copy()
    for index, term in enumerate(model.terms):
        if term.kind == "levels":
            points = np.arange(len(levels), dtype=float)
        else:
            points = on_scale(term.knots, details["scales"][term.feature])
        at = np.zeros((len(points), 3))
        at[:, index] = points
        simulated = []
        for draw in draws:
            reference.coef_ = draw
            at_points = reference.partial_dependence(index, X=at)
            simulated.append(at_points - reference.partial_dependence(index, X=matrix).mean())
        reference.coef_ = saved
        simulated = np.array(simulated)
        half = (np.percentile(simulated, 97.5, axis=0) - np.percentile(simulated, 2.5, axis=0)) / 2
        np.testing.assert_allclose(np.subtract(term.upper, term.lower) / 2, half, rtol=0.1,
                                   atol=0.02 * half.max())


def test_per_term_search_on_a_small_grid_against_every_combination(wage, wage_schema):
    # Exact brute force with pygam: on a grid of three penalties, all 27 combinations for
    # ISLR Wage's three terms. The search is coordinate-wise, so it promises only that no
    # single term's neighbouring value is better; on this data it also reaches the best
    # of all 27, which the search alone could not show.
    grid = [0.1, 10.0, 1000.0]
    model = fit_model(wage, wage_schema, "spline", penalties=grid)
    details = model.metadata["details"]
    names = ["age", "year", "education"]
    matrix = scaled_matrix(wage, names, details,
                           {"education": sorted(wage["education"].unique())})
    scores = {}
    for combination in itertools.product(grid, repeat=3):
        gam = wage_gam(matrix, wage["wage"].to_numpy(), dict(zip(names, combination,
                                                                  strict=True)))
        scores[combination] = gam.statistics_["GCV"]
    best = min(scores, key=scores.get)
    assert tuple(details["penalties"][name] for name in names) == best
    assert details["search_fits"] < len(scores)  # it did not try them all


def test_mroz_classification_criterion_matches_pygam(mroz):
    # Reference: pygam on Wooldridge's mroz data, on the scales the model file records.
    # The penalties are chosen inside the IRLS iterations, on the working model of the final
    # fit: pygam's LogisticGAM at the recorded penalties gives that fit (its UBRE, less
    # pygam's constant +2 -- its source subtracts `~add_scale * scale`, and ~True is -2 in
    # Python -- is the model's criterion); its working response z = logit(mu) + (y - mu) / W
    # and weights W = mu (1 - mu), fitted by pygam's LinearGAM with those weights at each
    # grid penalty, give the recorded working UBRE (sum W (z - fit)^2 / n + 2 * 1.4 * edof / n,
    # Wood 2004's criterion for this performance iteration, without its constant) and edof.
    columns = {"nwifeinc": "number", "educ": "integer", "exper": "integer",
               "age": "integer", "kidslt6": "integer"}
    schema = schema_of("inlf", "classification", {c: {"kind": k} for c, k in columns.items()},
                       positive=1)
    model = fit_model(mroz, schema, "spline")
    details = model.metadata["details"]
    assert details["criterion"] == "UBRE"
    assert details["bins"] == {"exact": True, "features": {}}  # 753 rows
    assert mroz["nwifeinc"].min() < 0  # a negative income: the power scale shifts it first
    assert details["scales"]["nwifeinc"]["shift"] > -mroz["nwifeinc"].min()
    matrix = scaled_matrix(mroz, list(columns), details)
    target = mroz["inlf"].to_numpy(dtype=float)
    sizes = [20, 13, 20, 20, 4]  # educ has 13 values, kidslt6 4
    assert [mroz[c].nunique() for c in ("educ", "kidslt6")] == [13, 4]

    def terms_at(lams):
        terms = s(0, n_splines=sizes[0], lam=lams[0])
        for i in range(1, 5):
            terms = terms + s(i, n_splines=sizes[i], lam=lams[i])
        return terms

    reference = pygam_fit(LogisticGAM(terms_at([details["penalties"][c] for c in columns]),
                                      tol=1e-12, max_iter=300), matrix, target)
    assert reference.statistics_["UBRE"] - 2.0 == pytest.approx(details["criterion_value"],
                                                                 rel=1e-6)
    assert reference.statistics_["edof"] == pytest.approx(
        details["effective_degrees_of_freedom"], rel=1e-5)
    mu = reference.predict_mu(matrix)
    weight = mu * (1 - mu)
    working = logit(mu) + (target - mu) / weight
    ubre, edof = [], []
    for lam in details["penalty_grid"]:
        with threadpool_limits(limits=1, user_api="blas"):
            fitted = LinearGAM(terms_at([lam] * 5), tol=1e-12).fit(matrix, working,
                                                                   weights=weight)
        residual = working - fitted.predict(matrix)
        edof.append(fitted.statistics_["edof"])
        ubre.append(np.sum(weight * residual ** 2) / len(target)
                    + 2 * 1.4 * edof[-1] / len(target))
    np.testing.assert_allclose(details["criterion_values"], ubre, rtol=1e-5)
    np.testing.assert_allclose(details["criterion_edof"], edof, rtol=1e-5)
    assert details["shared_penalty"] == details["penalty_grid"][int(np.argmin(ubre))]
    assert details["penalties_settled"] and details["converged"]
    expected = logit(reference.predict_mu(matrix))
    assert np.abs(model.score(mroz) - expected).max() <= 1e-3


def test_islr_wage_shapes(wage, wage_schema):
    # James, Witten, Hastie & Tibshirani, An Introduction to Statistical Learning, §7.7
    # and Figure 7.11 (from memory): holding the others fixed, wage rises with age to a
    # peak in middle age and falls after; it rises slightly with year and with education.
    model = fit_model(wage, wage_schema, "spline")
    age = model.term("age")
    peak = age.knots[int(np.argmax(age.values))]
    assert 35 <= peak <= 60
    assert age.values[0] < max(age.values) - 10 and age.values[-1] < max(age.values) - 5
    year = model.term("year")
    assert year.values[-1] > year.values[0]
    education = model.term("education")
    assert list(education.levels) == sorted(education.levels)  # "1. < HS Grad" ... "5. Advanced"
    assert np.all(np.diff(education.values) > 0)


def test_monotone_declarations_give_monotone_tables(loans_model, loans_split, loans_schema):
    # Constructed truth (demo data): the declared directions. Without the declarations
    # the same data gives curves that turn back, so the check can fail.
    details = loans_model.metadata["details"]
    for name, direction in LOANS_MONOTONE.items():
        steps = np.diff(loans_model.term(name).values)
        assert np.all(steps >= 0) if direction == "increasing" else np.all(steps <= 0), name
        assert details["monotone_repair"][name] <= 1e-6  # pygam's curve was monotone already
    free = dataclasses.replace(loans_schema, features=tuple(
        dataclasses.replace(spec, monotone=None) for spec in loans_schema.features))
    unconstrained = fit_model(loans_split[0], free, "spline")
    turns = [name for name, direction in LOANS_MONOTONE.items()
             if np.any(np.diff(unconstrained.term(name).values) * (
                 1 if direction == "increasing" else -1) < -1e-3)]
    assert turns


def test_monotone_flag_is_a_constrained_spline(loans_split, loans_schema):
    # Constructed truth (demo data): owning premises lowers the default risk, so a
    # declared increasing direction has to flatten the term; the fallback is recorded.
    schema = dataclasses.replace(loans_schema, features=tuple(
        dataclasses.replace(spec, monotone="increasing") if spec.name == "premises_owned"
        else spec for spec in loans_schema.features))
    frame = loans_split[0][["premises_owned", "credit_utilisation", "defaulted"]]
    model = fit_model(frame, schema.restricted_to(["premises_owned", "credit_utilisation"]),
                      "spline")
    term = model.term("premises_owned")
    assert term.knots == (0.0, 1.0) and term.values[1] >= term.values[0]
    assert term.values[1] - term.values[0] < 1e-6
    assert "premises_owned" in model.metadata["details"]["fallbacks"]
    free = fit_model(frame, loans_schema.restricted_to(["premises_owned",
                                                        "credit_utilisation"]), "spline")
    assert free.metadata["details"]["terms"]["premises_owned"] == "linear"
    assert free.term("premises_owned").values[1] < free.term("premises_owned").values[0] - 0.1


def test_band_holds_values_and_widens_where_data_is_sparse(loans_model, loans_split, wage,
                                                           wage_schema):
    # Common practice, no source: a pointwise band is widest where there are few rows.
    for model in (loans_model, fit_model(wage, wage_schema, "spline")):
        for term in model.terms:
            lower, values, upper = map(np.asarray, (term.lower, term.values, term.upper))
            assert np.all(lower <= values) and np.all(values <= upper), term.feature
    revenue = loans_model.term("annual_revenue")  # right-skewed by construction (demo data)
    width = np.subtract(revenue.upper, revenue.lower)
    median = np.nanmedian(loans_split[0]["annual_revenue"])
    at_median = width[int(np.argmin(np.abs(np.asarray(revenue.knots) - median)))]
    assert width[-1] > 2 * at_median
    age = fit_model(wage, wage_schema, "spline").term("age")  # ISLR Wage: few over 75
    age_width = np.subtract(age.upper, age.lower)
    assert age_width[-1] > 2 * age_width[list(age.knots).index(42.0)]


def test_penalty_recorded_and_fits_are_deterministic(wage, wage_schema):
    # Exact: the same data and settings give byte-identical model files.
    first = fit_model(wage, wage_schema, "spline")
    second = fit_model(wage, wage_schema, "spline")
    assert artifact.dumps(first) == artifact.dumps(second)
    details = first.metadata["details"]
    assert set(details["penalties"].values()) <= set(details["penalty_grid"])
    assert len(details["criterion_values"]) == len(details["penalty_grid"])
    assert details["converged"] is True
    assert first.metadata["parameters"] == {
        "splines": 20, "penalties": [0.01, 0.1, 1.0, 10.0, 100.0, 1000.0, 10000.0],
        "criterion": "risk", "max_iter": 100, "knots": 400, "spline_scale": "power",
        "penalty_scope": "term", "bins": 1024}
    assert artifact.loads(artifact.dumps(first)).metadata["details"] == details
    # one penalty in the grid leaves nothing to search: every term gets it, after one fit
    fixed = fit_model(wage, wage_schema, "spline", penalties=[10.0]).metadata["details"]
    assert fixed["penalties"] == {"age": 10.0, "year": 10.0, "education": 10.0}
    assert fixed["search_fits"] == 1
    shared = fit_model(wage, wage_schema, "spline", penalty_scope="shared")
    assert set(shared.metadata["details"]["penalties"].values()) == {
        shared.metadata["details"]["shared_penalty"]}
    assert shared.metadata["details"]["penalty_search"].startswith("shared")


def test_unseen_level_scores_the_average(wage, wage_schema):
    # Exact: after centring, the training-weighted mean of the level values is 0.
    model = fit_model(wage, wage_schema, "spline")
    term = model.term("education")
    counts = wage["education"].value_counts()
    weighted = sum(counts[level] * value for level, value in zip(term.levels, term.values,
                                                                 strict=True))
    assert weighted / counts.sum() == pytest.approx(0.0, abs=1e-9)
    assert term.unseen == pytest.approx(0.0, abs=1e-9)
    row = wage.iloc[:1].assign(education="6. Doctorate")
    with pytest.warns(UnseenLevelWarning):
        contribution = model.contributions(row)["education"].iloc[0]
    assert contribution == pytest.approx(0.0, abs=1e-9)


def test_single_valued_features_are_refused(wage):
    # Constructed: one feature made constant.
    schema = schema_of("wage", "regression", {"age": {"kind": "integer"},
                                              "year": {"kind": "integer"}})
    with pytest.raises(DataError, match="'year' has a single value"):
        fit_model(wage.assign(year=2006), schema, "spline")
    levels = schema_of("wage", "regression", {"age": {"kind": "integer"},
                                              "region": {"kind": "category"}})
    assert wage["region"].nunique() == 1  # ISLR Wage: every row is the Middle Atlantic
    with pytest.raises(DataError, match="'region' has a single value"):
        fit_model(wage, levels, "spline")


def test_few_values_fall_back_to_a_smaller_basis(wage):
    # Constructed: age cut into three bands (3 values) and year (7 values, ISLR Wage).
    frame = wage.assign(band=pd.cut(wage["age"], [0, 35, 50, 100], labels=False))
    schema = schema_of("wage", "regression", {"band": {"kind": "integer"},
                                              "year": {"kind": "integer"}})
    model = fit_model(frame, schema, "spline", splines=10)
    details = model.metadata["details"]
    assert details["terms"] == {"band": "spline, 4 basis functions, evenly spaced knots",
                                "year": "spline, 7 basis functions, evenly spaced knots"}
    assert details["fallbacks"] == {
        "band": "3 distinct values: 4 basis functions instead of 10; fitted on the values "
                "themselves (evenly spaced knots)",
        "year": "7 distinct values: 7 basis functions instead of 10; fitted on the values "
                "themselves (evenly spaced knots)"}
    assert model.term("band").knots == (0.0, 1.0, 2.0)


@pytest.mark.parametrize(("options", "named"), [
    ({"splines": 3}, "splines"), ({"splines": 12.5}, "splines"),
    ({"penalties": []}, "penalties"), ({"penalties": [1.0, 0.0]}, "penalties"),
    ({"penalties": "lots"}, "penalties"), ({"criterion": "folds"}, "criterion"),
    ({"max_iter": 0}, "max_iter"), ({"knots": 5}, "knots"), ({"smoothness": 1}, "smoothness"),
    ({"spline_scale": "log"}, "spline_scale"), ({"penalty_scope": "each"}, "penalty_scope"),
])
def test_bad_options_are_named(wage, wage_schema, options, named):
    # Constructed: each value breaks a rule the module documents; the error names the option.
    with pytest.raises(OptionError, match=named):
        fit_model(wage, wage_schema, "spline", **options)


def test_monotone_category_is_refused_by_the_schema():
    # Constructed: a category has no order, so the schema refuses a direction for it.
    with pytest.raises(SchemaError, match="cannot be monotone"):
        schema_of("wage", "regression",
                  {"education": {"kind": "category", "monotone": "increasing"}})


@pytest.fixture(scope="module")
def credit() -> tuple[pd.DataFrame, Schema]:
    # modeldata's credit_data (a Spanish credit file): skewed money amounts, a point mass at
    # zero in Assets and Debt, gaps in Income, Assets and Debt; rows with a gap dropped
    frame = reference_data("modeldata", "credit_data").dropna().reset_index(drop=True)
    numbers = ["Seniority", "Time", "Age", "Expenses", "Income", "Assets", "Debt", "Amount",
               "Price"]
    features = {name: {"kind": "number"} for name in numbers}
    features.update({name: {"kind": "category"} for name in ("Home", "Marital", "Records",
                                                             "Job")})
    return frame, schema_of("Status", "classification", features, positive="bad")


@pytest.fixture(scope="module")
def credit_model(credit):
    return fit_model(*credit, "spline")


def tails_outside_binned_logit(model, frame: pd.DataFrame, target: np.ndarray,
                               names: list[str]) -> list[str]:
    """Tails (the lowest and highest 1% of a feature's rows) where the curve's mean over the
    rows lies outside the 95% interval of a plain binned logit of the same rows.

    Reference: statsmodels' binomial GLM with one constant for the tail's rows and the
    model's other terms and intercept as offset, i.e. what those rows alone say of the
    term's level there (Wald interval; 95% is common practice, no source).
    """
    import statsmodels.api as sm

    parts = model.contributions(frame)
    score = model.score(frame)
    outside = []
    for name in names:
        values = frame[name].to_numpy(dtype=float)
        low, high = np.quantile(values, [0.01, 0.99])
        for side, rows in (("bottom", values < low), ("top", values > high)):
            events = target[rows].sum()
            if rows.sum() < 10 or events in (0, rows.sum()):
                continue  # no interval to speak of
            offset = (score - parts[name]).to_numpy()[rows]
            binned = sm.GLM(target[rows], np.ones((rows.sum(), 1)), offset=offset,
                            family=sm.families.Binomial()).fit()
            lower, upper = binned.conf_int(alpha=0.05)[0]
            level = parts[name].to_numpy()[rows].mean()
            if not lower <= level <= upper:
                outside.append(f"{name} {side}: {level:.2f} not in [{lower:.2f}, {upper:.2f}]")
    return outside


def test_real_money_tails_agree_with_a_binned_logit(credit, credit_model):
    # Outside check on real data (modeldata credit_data): in the top and bottom 1% of every
    # numeric feature, the fitted curve agrees with what those rows alone say. The check can
    # fail: on the rank scale the same data give tails that flatten (a straight line in the
    # rank is flat where ranks run out), and it catches them.
    frame, schema = credit
    names = [spec.name for spec in schema.features if spec.kind == "number"]
    target = (frame["Status"] == "bad").to_numpy(dtype=float)
    model = credit_model
    assert all(model.metadata["details"]["scales"][name]["scale"] == "power"
               for name in ("Income", "Amount", "Price"))
    assert tails_outside_binned_logit(model, frame, target, names) == []
    rank = fit_model(frame, schema, "spline", spline_scale="rank")
    assert tails_outside_binned_logit(rank, frame, target, names) != []


def test_power_is_the_box_cox_maximum_likelihood(credit, credit_model):
    # Reference: scipy's Box-Cox log-likelihood (stats.boxcox_llf) on real money amounts
    # (credit_data): the recorded power is its maximum, and a feature with zeros (Assets,
    # Debt) is shifted by the gap between its two smallest values first.
    frame, _ = credit
    model = credit_model
    for name in ("Income", "Assets", "Debt", "Amount", "Price"):
        record = model.metadata["details"]["scales"][name]
        values = frame[name].to_numpy(dtype=float)
        distinct = np.unique(values)
        expected = 0.0 if distinct[0] > 0 else distinct[1] - 2 * distinct[0]
        assert record["shift"] == pytest.approx(expected), name
        shifted = values + record["shift"]
        best = stats.boxcox_llf(record["power"], shifted)
        for nearby in (record["power"] - 0.01, record["power"] + 0.01):
            assert stats.boxcox_llf(nearby, shifted) < best, name


def test_rank_scale_puts_knots_at_training_quantiles(wage, wage_schema):
    # Reference: numpy's quantiles of ISLR Wage's age at k/17 (20 basis functions leave 17
    # knot intervals); the rank scale sends each to k/17, so pygam's even knots fall there.
    model = fit_model(wage, wage_schema, "spline", spline_scale="rank")
    record = model.metadata["details"]["scales"]["age"]
    quantiles = np.quantile(wage["age"], np.linspace(0, 1, 18))
    distinct = np.unique(quantiles)
    np.testing.assert_allclose(record["points"], distinct)
    assert model.metadata["details"]["terms"]["age"] == (
        "spline, 20 basis functions, knots at training quantiles")
    if len(distinct) == len(quantiles):
        np.testing.assert_allclose(record["ranks"], np.linspace(0, 1, 18))
    # the same shape as on the power scale, where both have data (ISLR §7.7, as above)
    age = model.term("age")
    assert 35 <= age.knots[int(np.argmax(age.values))] <= 60
