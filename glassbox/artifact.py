"""Model files: the additive model as plain, versioned, checksummed JSON.

    {"format": "glassbox-model", "version": 1, "checksum": "sha256:...", "model": {...}}

The checksum is SHA-256 over the canonical JSON of "model" (sorted keys, no
spaces). Files are written atomically; loading says plainly what is wrong with
a damaged, edited or foreign file. Nothing is ever pickled.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path
from typing import Any

from glassbox.additive import AdditiveModel, FeatureProfile, term_from_dict, term_to_dict
from glassbox.errors import GlassboxError, ModelFileError
from glassbox.files import write_atomic
from glassbox.schema import Schema

FORMAT = "glassbox-model"
VERSION = 1


def canonical_json(content: Any) -> str:
    """The one text a checksum is computed over."""
    return json.dumps(content, sort_keys=True, separators=(",", ":"), ensure_ascii=True,
                      allow_nan=False)


def checksum(content: Any) -> str:
    return "sha256:" + hashlib.sha256(canonical_json(content).encode("ascii")).hexdigest()


def model_to_dict(model: AdditiveModel) -> dict[str, Any]:
    """The model's content as plain data (what the checksum covers)."""
    return {
        "link": model.link,
        "intercept": model.intercept,
        "terms": [term_to_dict(term) for term in model.terms],
        "schema": model.schema.to_dict(),
        "profiles": [profile.to_dict() for profile in model.profiles],
        "metadata": dict(model.metadata),
    }


def model_from_dict(content: dict[str, Any], source: str = "") -> AdditiveModel:
    """Rebuild a model from `model_to_dict` output."""
    try:
        schema = Schema.from_dict(content["schema"], source=source)
        return AdditiveModel(
            link=content["link"],
            intercept=float(content["intercept"]),
            terms=tuple(term_from_dict(t) for t in content["terms"]),
            schema=schema,
            profiles=tuple(FeatureProfile.from_dict(p) for p in content.get("profiles", [])),
            metadata=content.get("metadata", {}),
        )
    except KeyError as exc:
        raise ModelFileError(f"model file {source}: missing entry {exc}") from None
    except ModelFileError as exc:
        raise ModelFileError(f"model file {source}: {exc}") from None
    except GlassboxError as exc:
        raise ModelFileError(f"model file {source}: {exc}") from None


def dumps(model: AdditiveModel) -> str:
    """The model file's text: indented, keys in a fixed order, ends with a newline."""
    content = model_to_dict(model)
    document = {"format": FORMAT, "version": VERSION, "checksum": checksum(content),
                "model": content}
    return json.dumps(document, indent=1, ensure_ascii=False, allow_nan=False) + "\n"


def save(model: AdditiveModel, path: str | Path) -> Path:
    """Write the model file atomically and return its path."""
    try:
        text = dumps(model)
    except ValueError as exc:
        raise ModelFileError(f"model cannot be written as JSON: {exc}") from None
    write_atomic(path, text)
    return Path(path)


def loads(text: str, source: str = "<text>") -> AdditiveModel:
    """Parse a model file's text, checking format, version and checksum."""
    if not text.strip():
        raise ModelFileError(f"model file {source} is empty")
    try:
        document = json.loads(text)
    except json.JSONDecodeError as exc:
        if not text.rstrip().endswith("}") or exc.pos >= len(text.rstrip()) - 1:
            raise ModelFileError(f"model file {source} ends too early: it looks truncated "
                                 "(written only in part?)") from None
        raise ModelFileError(f"model file {source} is not valid JSON (line {exc.lineno}, "
                             f"column {exc.colno}: {exc.msg})") from None
    if not isinstance(document, dict) or document.get("format") != FORMAT:
        raise ModelFileError(f"{source} is not a glassbox model file (expected "
                             f"\"format\": \"{FORMAT}\")")
    version = document.get("version")
    if not isinstance(version, int) or isinstance(version, bool):
        raise ModelFileError(f"model file {source} has no valid format version")
    if version > VERSION:
        raise ModelFileError(f"model file {source} has format version {version}, newer than "
                             f"this glassbox reads (up to {VERSION}); upgrade glassbox")
    if version < 1:
        raise ModelFileError(f"model file {source} has an unknown format version {version}")
    content = document.get("model")
    if not isinstance(content, dict):
        raise ModelFileError(f"model file {source} holds no model")
    expected = document.get("checksum")
    try:
        actual = checksum(content)
    except ValueError:
        actual = None
    if expected != actual:
        raise ModelFileError(f"model file {source} was changed after it was written (its "
                             "checksum does not match its content); restore the original or "
                             "refit")
    return model_from_dict(content, source)


def load(path: str | Path) -> AdditiveModel:
    """Read a model file written by `save`."""
    path = Path(path)
    if not path.is_file():
        raise ModelFileError(f"model file {path} does not exist")
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise ModelFileError(f"{path} is not a text file, so not a glassbox model file") from None
    return loads(text, str(path))
