"""Scoring a raw frame into the table `glassbox score` writes: id, score, probability or
prediction, the features a row lacks, and each term's contribution."""

from __future__ import annotations

import numpy as np
import pandas as pd

from glassbox.core.additive import AdditiveModel
from glassbox.core.errors import DataError
from glassbox.core.schema import prepare, rows_text


def score_table(model: AdditiveModel, frame: pd.DataFrame, source: str | None = None,
                contributions: bool = True) -> pd.DataFrame:
    """Per row: the id (when the schema names one), score, probability or prediction,
    `missing` (when the model has a missing-value entry: the features the row has no
    value for, in model order, joined by "; ") and each term's contribution
    (`contribution:FEATURE`)."""
    prepared = prepare(frame, model.schema, require_target=False, source=source,
                       features=model.features)
    model.check_missing(prepared.features, source or frame.attrs.get("source") or "the data")
    parts = model.contributions_encoded(prepared.features)
    with np.errstate(over="ignore", invalid="ignore"):  # refused just below
        score = model.intercept + parts.sum(axis=1).to_numpy()
    beyond = ~np.isfinite(score)
    if beyond.any():  # never inf or NaN in an output: the rows are named instead
        raise DataError(f"{source or frame.attrs.get('source') or 'the data'}: the score of "
                        f"{rows_text(beyond)} is not a finite number (the model's tables "
                        "add up beyond the finite numbers)")
    out = pd.DataFrame(index=frame.index)
    if prepared.ids is not None:
        out[model.schema.id_column] = prepared.ids
    out["score"] = score
    out["probability" if model.link == "logit" else "prediction"] = model.inverse_link(score)
    if any(t.missing is not None for t in model.terms):
        names = list(model.features)
        absent = prepared.features[names].isna().to_numpy()
        # each pattern of gaps written once (rows share a handful of them): a row's
        # pattern as 64-bit words, hashed when one word holds it
        packed = np.packbits(absent, axis=1)
        words = np.zeros((len(packed), -(-packed.shape[1] // 8) * 8), dtype=np.uint8)
        words[:, :packed.shape[1]] = packed
        keys = words.view(np.uint64)
        if keys.shape[1] == 1:
            at, patterns = pd.factorize(keys[:, 0])
            patterns = patterns.reshape(-1, 1)
        else:
            patterns, at = np.unique(keys, axis=0, return_inverse=True)
        texts = ["; ".join(n for n, gone in zip(names, row, strict=False) if gone)
                 for row in np.unpackbits(patterns.view(np.uint8), axis=1).astype(bool)]
        out["missing"] = [texts[i] for i in at.ravel().tolist()]
    if contributions:
        out["intercept"] = model.intercept
        for name in parts.columns:
            out[f"contribution:{name}"] = parts[name]
    return out.reset_index(drop=True)
