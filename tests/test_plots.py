"""Pictures of the shape functions: written, readable as PNG, drawn from the tables."""

from __future__ import annotations

import numpy as np
import pytest
from matplotlib.image import imread

from glassbox import fit_model
from glassbox.core.errors import OptionError
from glassbox.publishing import plots


@pytest.fixture(scope="module")
def model(loans, loans_schema):
    return fit_model(loans, loans_schema, "sparse")


def test_one_png_per_feature_and_an_overview(model, tmp_path):
    paths = plots.write_plots(model, tmp_path / "pictures")
    names = sorted(p.name for p in paths)
    assert names == sorted(["importance.png", *[f"{f}.png" for f in model.features]])
    for path in paths:
        image = imread(path)
        # a real picture, not blank: at least two distinct colours, a sensible size
        assert image.shape[0] > 200 and image.shape[1] > 600
        assert len(np.unique(image.reshape(-1, image.shape[-1]), axis=0)) > 2


def test_the_curve_drawn_is_the_table(model):
    figure = plots.feature_figure(model, "debt_to_revenue")
    line = figure.axes[0].get_lines()[0]
    term = model.term("debt_to_revenue")
    np.testing.assert_array_equal(line.get_xdata(), term.knots)
    np.testing.assert_array_equal(line.get_ydata(), term.values)
    assert "debt_to_revenue" in figure.axes[1].get_xlabel()
    assert "log-odds of defaulted = yes" in figure.axes[0].get_ylabel()


def test_levels_are_bars_with_shares(model):
    figure = plots.feature_figure(model, "sector")
    bars = figure.axes[0].patches
    term = model.term("sector")
    assert sorted(b.get_width() for b in bars) == pytest.approx(sorted(term.values))
    labels = [t.get_text() for t in figure.axes[0].get_yticklabels()]
    assert any("retail" in label and "% of rows" in label for label in labels)


def test_same_model_same_bytes(model, tmp_path):
    first = plots.write_plots(model, tmp_path / "a", ["sector"])[1].read_bytes()
    second = plots.write_plots(model, tmp_path / "b", ["sector"])[1].read_bytes()
    assert first == second


def test_a_file_in_the_way(model, tmp_path):
    blocker = tmp_path / "taken"
    blocker.write_text("x")
    with pytest.raises(OptionError, match="it is a file, not a folder"):
        plots.write_plots(model, blocker)
