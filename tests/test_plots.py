"""Pictures of the shape functions: written, readable as PNG, drawn from the tables, the x
axis chosen by the stated rule, the training percentiles along the top."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest
from matplotlib.backends.backend_agg import FigureCanvasAgg
from matplotlib.image import imread

from glassbox import fit_model
from glassbox.core.additive import AdditiveModel, CurveTerm, StepTerm, profile_features
from glassbox.core.errors import OptionError
from glassbox.core.schema import Schema
from glassbox.publishing import palette, plots

from .conftest import reference_data
from .real_credit import credit_rows_with_gaps


@pytest.fixture(scope="module")
def model(loans, loans_schema):
    return fit_model(loans, loans_schema, "sparse")


def _scale_of(frame: pd.DataFrame, column: str) -> str:
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1},
                               "feature": {column: {"kind": "number"}}})
    (profile,) = profile_features(frame[[column]].astype(float), schema)
    return plots.axis_scale(profile).kind


def _one_term_model(frame: pd.DataFrame, term) -> AdditiveModel:
    """A model of one constructed term over a real column: its profile is the one a fit
    stores (profile_features), so the percentiles are the column's own."""
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1},
                               "feature": {term.feature: {"kind": "number"}}})
    return AdditiveModel("logit", 0.0, (term,), schema,
                         profile_features(frame[[term.feature]].astype(float), schema))


def test_one_png_per_feature_and_an_overview(model, tmp_path):
    paths = plots.write_plots(model, tmp_path / "pictures")
    names = sorted(p.name for p in paths)
    assert names == sorted(["importance.png", *[f"{f}.png" for f in model.features]])
    for path in paths:
        image = imread(path)
        # a real picture, not blank: at least two distinct colours, a sensible size
        assert image.shape[0] > 200 and image.shape[1] > 600
        pixels = np.ascontiguousarray((image * 255).round().astype(np.uint8))
        assert len(np.unique(pixels.view(np.uint32))) > 2  # RGBA packed, one number each


def test_the_curve_drawn_is_the_table(model):
    figure = plots.feature_figure(model, "debt_to_revenue")  # a linear axis: the knots
    line = figure.axes[0].get_lines()[0]
    term = model.term("debt_to_revenue")
    np.testing.assert_array_equal(line.get_xdata(), term.knots)
    np.testing.assert_array_equal(line.get_ydata(), term.values)
    assert figure.axes[0].get_xlabel().startswith("debt_to_revenue")
    assert "log-odds of defaulted = yes" in figure.axes[0].get_ylabel()


def test_on_a_log_axis_the_curve_bends_as_the_model_reads_it(model):
    # the table is straight between knots in the value, so on a log axis the drawn line
    # carries points between the knots, each the model's own contribution there
    figure = plots.feature_figure(model, "annual_revenue")
    main = figure.axes[0]
    assert main.get_xscale() == "log" and main.get_xlabel().endswith("(log scale)")
    line = main.get_lines()[0]
    term = model.term("annual_revenue")
    x = np.asarray(line.get_xdata())
    assert set(term.knots) <= set(x) and len(x) > len(term.knots)
    np.testing.assert_array_equal(line.get_ydata(), term.evaluate(x))


def test_steps_and_their_band_are_the_table():
    # constructed steps over credit_data's Amount: the drawn steps, bounds and hatched
    # band are the table's own values between the training minimum and maximum
    frame = credit_rows_with_gaps()
    term = StepTerm("Amount", (500.0, 1000.0, 2000.0), (-0.4, -0.1, 0.2, 0.6),
                    lower=(-0.5, -0.2, 0.1, 0.3), upper=(-0.3, 0.0, 0.3, 0.9))
    figure = plots.feature_figure(_one_term_model(frame, term), "Amount")
    steps, band, low, high = figure.axes[0].patches[:4]
    edges = [frame["Amount"].min(), 500, 1000, 2000, frame["Amount"].max()]
    for patch, values in ((steps, term.values), (low, term.lower), (high, term.upper)):
        np.testing.assert_array_equal(patch.get_data().values, values)
        np.testing.assert_array_equal(patch.get_data().edges, edges)
    np.testing.assert_array_equal(band.get_data().baseline, term.lower)
    assert band.get_hatch() == plots.HATCH and band.get_facecolor()[3] == 0  # no tint


def test_the_top_scale_is_the_training_percentiles():
    # numpy's percentiles of the column (the profile a fit stores is the same numbers)
    frame = credit_rows_with_gaps()
    income = frame["Income"].dropna().to_numpy(dtype=float)
    knots = tuple(np.linspace(income.min(), income.max(), 9))
    term = CurveTerm("Income", knots, tuple(np.linspace(1, -1, 9)))
    figure = plots.feature_figure(_one_term_model(frame, term), "Income")
    main, top = figure.axes[:2]
    expected = np.percentile(income, plots.TOP_PERCENTILES)
    np.testing.assert_array_equal(top.get_xticks(), expected)
    assert [t.get_text().strip() for t in top.get_xticklabels()] == [
        f"p{n}" for n in plots.TOP_PERCENTILES]
    # each tick stands where the curve's axis puts that value (the top shares its scale)
    FigureCanvasAgg(figure).draw()
    points = np.c_[expected, np.zeros_like(expected)]
    np.testing.assert_allclose(top.transData.transform(points)[:, 0],
                               main.transData.transform(points)[:, 0])
    assert main.get_xscale() == "log"


def test_equal_percentiles_share_one_tick():
    # credit_data Debt: 83% of rows owe nothing, so p1 to p75 are all 0
    frame = credit_rows_with_gaps()
    debt = frame["Debt"].dropna().to_numpy(dtype=float)
    term = CurveTerm("Debt", (0.0, float(debt.max())), (0.0, 1.0))
    top = plots.feature_figure(_one_term_model(frame, term), "Debt").axes[1]
    labels = [t.get_text().strip() for t in top.get_xticklabels()]
    assert labels[0] == "p1–p75" and top.get_xticks()[0] == 0.0
    np.testing.assert_array_equal(top.get_xticks()[1:], np.percentile(debt, [90, 99]))


def test_the_axis_rule_on_real_columns():
    # modeldata credit_data money amounts, skewed: log, or log with a linear stretch to
    # the smallest positive percentile where zeros are common (Assets, Debt)
    credit = credit_rows_with_gaps()
    assert {c: _scale_of(credit, c) for c in ("Income", "Amount", "Price", "Assets",
                                               "Debt")} == {
        "Income": "log", "Amount": "log", "Price": "log", "Assets": "symlog",
        "Debt": "symlog"}
    # symmetric or mildly skewed: loan term in months; ISLR Default's income and balance
    default = reference_data("ISLR", "Default")
    assert _scale_of(credit, "Time") == "linear"
    assert _scale_of(default, "income") == "linear"
    assert _scale_of(default, "balance") == "linear"
    # AER HMDA payments-to-income ratio: a few wild ratios (up to 3) stretch a linear
    # axis, but its values span less than a decade, so spaced by training percentile
    hmda = reference_data("AER", "HMDA")
    assert _scale_of(hmda, "pirat") == "percentile"
    # a constructed symmetric column: linear
    symmetric = pd.DataFrame({"x": np.linspace(-3, 3, 401)})
    assert _scale_of(symmetric, "x") == "linear"


def test_a_percentile_axis_says_so_and_places_the_deciles_evenly():
    hmda = reference_data("AER", "HMDA")
    pirat = hmda["pirat"].to_numpy(dtype=float)
    term = CurveTerm("pirat", (float(pirat.min()), float(pirat.max())), (0.0, 2.0))
    figure = plots.feature_figure(_one_term_model(hmda, term), "pirat")
    main = figure.axes[0]
    assert main.get_xlabel().endswith("(spaced by training percentile)")
    # each decile sits at its percentile, a tie at the middle of its run of numpy's 101
    # percentiles of the column (pirat has many repeated ratios)
    stored = np.percentile(pirat, np.arange(101))
    deciles = stored[10:100:10]
    runs = [np.flatnonzero(stored == value) for value in deciles]
    expected = [(run[0] + run[-1]) / 2 for run in runs]
    np.testing.assert_allclose(main.xaxis.get_transform().transform(deciles), expected)
    assert any(len(run) > 1 for run in runs) and expected[0] == 10


def test_levels_are_bars_with_shares_in_table_order(model):
    figure = plots.feature_figure(model, "sector")
    axis = figure.axes[0]
    bars = axis.patches
    term = model.term("sector")
    assert [b.get_width() for b in sorted(bars, key=lambda b: -b.get_y())] == \
        pytest.approx(list(term.values))
    labels = [t.get_text() for t in axis.get_yticklabels()]
    assert [label.split("  (")[0] for label in labels[:-1]] == list(term.levels)
    assert all("% of rows" in label for label in labels[:-1])
    assert labels[-1].startswith("(missing)")
    colours = {palette.RISE if v > 0 else palette.FALL for v in term.values}
    assert {b.get_facecolor()[:3] for b in bars} == {tuple(palette.rgb(c)) for c in colours}


def test_same_model_same_bytes(model, tmp_path):
    first = plots.write_plots(model, tmp_path / "a", ["sector", "annual_revenue"])
    second = plots.write_plots(model, tmp_path / "b", ["sector", "annual_revenue"])
    for a, b in zip(first, second, strict=True):
        assert a.read_bytes() == b.read_bytes()


def test_a_file_in_the_way(model, tmp_path):
    blocker = tmp_path / "taken"
    blocker.write_text("x")
    with pytest.raises(OptionError, match="it is a file, not a folder"):
        plots.write_plots(model, blocker)


def test_a_model_without_a_profile_keeps_its_own_ticks():
    # constructed: a model file from before profiles were stored (none): a linear axis,
    # its value ticks kept, no percentile scale along the top
    schema = Schema.from_dict({"target": {"column": "y", "positive": 1},
                               "feature": {"x": {"kind": "number"}}})
    model = AdditiveModel("logit", 0.0, (CurveTerm("x", (0.0, 5.0, 10.0), (1.0, 0.0, 2.0)),),
                          schema, ())
    main, top = plots.feature_figure(model, "x").axes[:2]
    assert main.get_xscale() == "linear" and len(main.get_xticks()) > 2
    assert list(top.get_xticks()) == []
