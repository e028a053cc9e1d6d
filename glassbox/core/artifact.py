"""Model files: the additive model as plain, versioned, checksummed JSON.

    {"format": "glassbox-model", "version": 2, "checksum": "sha256:...", "model": {...}}

The checksum is SHA-256 over the canonical JSON of "model" (sorted keys, no
spaces). Files are written atomically; loading says plainly what is wrong with
a damaged, edited or foreign file. Nothing is ever pickled.
"""

from __future__ import annotations

import math
from dataclasses import replace
from pathlib import Path
from typing import Any

from glassbox.core import documents, structure
from glassbox.core.additive import AdditiveModel, FeatureProfile, term_from_dict, term_to_dict
from glassbox.core.cells import TermCells
from glassbox.core.errors import GlassboxError, ModelFileError
from glassbox.core.pairs import PairTerm
from glassbox.core.schema import Schema
from glassbox.explaining.baseline import Baseline, check_baseline

FORMAT = "glassbox-model"
VERSION = 3  # 2: every term may carry a missing-value entry; profiles count missing rows
# 3: pairwise tables ("pairs"). A model without pairs is still written as version 2, so
# that its file is unchanged and an older glassbox reads it; one with pairs is version 3,
# which an older glassbox refuses rather than scoring without them.
WITHOUT_PAIRS = 2


MODEL_FILE = documents.Kind(FORMAT, VERSION, "model", "model file", "a glassbox model file",
                            "restore the original or refit", structure.MODEL)
_PLAIN_FILE = replace(MODEL_FILE, version=WITHOUT_PAIRS)


def kind_of(model: AdditiveModel) -> documents.Kind:
    """The file kind a model is written as: version 3 with pairs, else version 2."""
    return MODEL_FILE if model.pairs else _PLAIN_FILE
checksum = documents.checksum
canonical_json = documents.canonical_json


def model_to_dict(model: AdditiveModel) -> dict[str, Any]:
    """The model's content as plain data (what the checksum covers). Training cells and the
    development baseline are written only when the model has them, so older models keep
    their exact content."""
    content = {
        "link": model.link,
        "intercept": model.intercept,
        "terms": [term_to_dict(term) for term in model.terms],
        "schema": model.schema.to_dict(),
        "profiles": [profile.to_dict() for profile in model.profiles],
        "metadata": dict(model.metadata),
    }
    if model.cells:
        content["cells"] = [cells.to_dict() for cells in model.cells]
    if model.baseline is not None:
        content["baseline"] = model.baseline.to_dict()
    if model.pairs:
        content["pairs"] = [pair.to_dict() for pair in model.pairs]
    return content


def model_from_dict(content: dict[str, Any], source: str = "") -> AdditiveModel:
    """Rebuild a model from `model_to_dict` output."""
    model = _model_from_dict(content, source)
    check_score_range(model, f"model file {source}")
    if model.baseline is not None:
        check_baseline(model, model.baseline, f"model file {source}")
    return model


def check_score_range(model: AdditiveModel, where: str) -> None:
    """Refuse a model whose score can leave the finite numbers: the intercept plus each
    term's largest value in size (any value, the unseen level, a missing value) must be
    finite, so that no row scores inf or NaN."""
    largest = abs(model.intercept)
    for term in model.terms:
        entries = [*term.values, getattr(term, "unseen", 0.0),
                   0.0 if term.missing is None else term.missing]
        largest += max(abs(value) for value in entries)
    for pair in model.pairs:
        largest += pair.largest()
    if not math.isfinite(largest):
        raise ModelFileError(f"{where}: its intercept and term values add up to scores "
                             "beyond the finite numbers (a row could score inf or NaN); "
                             "the file is not a model glassbox fitted")


def _model_from_dict(content: dict[str, Any], source: str) -> AdditiveModel:
    try:
        schema = Schema.from_dict(content["schema"], source=source,
                                    unstated_better="higher")
        return AdditiveModel(
            link=content["link"],
            intercept=float(content["intercept"]),
            terms=tuple(term_from_dict(t) for t in content["terms"]),
            schema=schema,
            profiles=tuple(FeatureProfile.from_dict(p) for p in content.get("profiles", [])),
            metadata=content.get("metadata", {}),
            cells=tuple(TermCells.from_dict(c) for c in content.get("cells", [])),
            baseline=(Baseline.from_dict(content["baseline"]) if "baseline" in content
                      else None),
            pairs=tuple(PairTerm.from_dict(p) for p in content.get("pairs", [])),
        )
    except KeyError as exc:
        raise ModelFileError(f"model file {source}: missing entry {exc}") from None
    except ModelFileError as exc:
        raise ModelFileError(f"model file {source}: {exc}") from None
    except GlassboxError as exc:
        raise ModelFileError(f"model file {source}: {exc}") from None


def dumps(model: AdditiveModel) -> str:
    """The model file's text: indented, keys in a fixed order, ends with a newline."""
    return documents.dumps(kind_of(model), model_to_dict(model))


def save(model: AdditiveModel, path: str | Path) -> Path:
    """Write the model file atomically and return its path."""
    return documents.save(kind_of(model), model_to_dict(model), path)


def loads(text: str, source: str = "<text>") -> AdditiveModel:
    """Parse a model file's text, checking format, version and checksum."""
    return model_from_dict(documents.loads(MODEL_FILE, text, source), source)


def load(path: str | Path) -> AdditiveModel:
    """Read a model file written by `save`."""
    return model_from_dict(documents.load(MODEL_FILE, path), str(path))
