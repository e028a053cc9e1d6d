"""Versioned, checksummed JSON files: model files and points cards share one shape.

    {"format": "...", "version": 1, "checksum": "sha256:...", "<key>": {...}}

The checksum is SHA-256 over the canonical JSON of the content (sorted keys, no
spaces). Files are written atomically; reading says plainly what is wrong with a
damaged, edited or foreign file. Nothing is ever pickled.
"""

from __future__ import annotations

import hashlib
import json
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from glassbox.core import structure
from glassbox.core.errors import ModelFileError
from glassbox.core.files import write_atomic


@dataclass(frozen=True)
class Kind:
    """One kind of file: its format tag and version, the key of its content, and words."""

    format: str
    version: int
    key: str  # "model", "card"
    name: str  # "model file", "points card": how messages speak of one file
    described: str  # "a glassbox model file": what a foreign file is not
    remedy: str  # what to do about an edited file: "restore the original or refit"
    content: structure.Spec | None = None  # the declared structure of its content


def canonical_json(content: Any) -> str:
    """The one text a checksum is computed over."""
    return json.dumps(content, sort_keys=True, separators=(",", ":"), ensure_ascii=True,
                      allow_nan=False)


def checksum(content: Any) -> str:
    return "sha256:" + hashlib.sha256(canonical_json(content).encode("ascii")).hexdigest()


def dumps(kind: Kind, content: dict[str, Any]) -> str:
    """The file's text: indented, keys in a fixed order, ends with a newline. Content
    without its declared structure is refused: what is written always reads back."""
    if kind.content is not None:
        structure.check(kind.content, content, f"{kind.name} to write", ModelFileError)
    document = {"format": kind.format, "version": kind.version, "checksum": checksum(content),
                kind.key: content}
    return json.dumps(document, indent=1, ensure_ascii=False, allow_nan=False) + "\n"


def save(kind: Kind, content: dict[str, Any], path: str | Path) -> Path:
    """Write the file atomically and return its path."""
    try:
        text = dumps(kind, content)
    except ValueError as exc:
        raise ModelFileError(f"{kind.name} cannot be written as JSON: {exc}") from None
    write_atomic(path, text)
    return Path(path)


def loads(kind: Kind, text: str, source: str = "<text>") -> dict[str, Any]:
    """The content of a file's text, after checking format, version and checksum."""
    name = f"{kind.name} {source}"
    if not text.strip():
        raise ModelFileError(f"{name} is empty")
    try:
        document = json.loads(text)
    except json.JSONDecodeError as exc:
        if not text.rstrip().endswith("}") or exc.pos >= len(text.rstrip()) - 1:
            raise ModelFileError(f"{name} ends too early: it looks truncated "
                                 "(written only in part?)") from None
        raise ModelFileError(f"{name} is not valid JSON (line {exc.lineno}, "
                             f"column {exc.colno}: {exc.msg})") from None
    if not isinstance(document, dict) or document.get("format") != kind.format:
        raise ModelFileError(f"{source} is not {kind.described} (expected "
                             f"\"format\": \"{kind.format}\")")
    version = document.get("version")
    if not isinstance(version, int) or isinstance(version, bool):
        raise ModelFileError(f"{name} has no valid format version")
    if version > kind.version:
        raise ModelFileError(f"{name} has format version {version}, newer than this "
                             f"glassbox reads (up to {kind.version}); upgrade glassbox")
    if version < 1:
        raise ModelFileError(f"{name} has an unknown format version {version}")
    content = document.get(kind.key)
    if not isinstance(content, dict):
        raise ModelFileError(f"{name} holds no {kind.key}")
    try:
        actual = checksum(content)
    except ValueError:  # NaN or Infinity: no file this tool writes holds one
        if kind.content is not None:
            structure.check(kind.content, content, name, ModelFileError)  # names the key
        raise ModelFileError(f"{name} contains a value that is not a finite number "
                             f"(NaN or Infinity); {kind.remedy}") from None
    if document.get("checksum") != actual:
        raise ModelFileError(f"{name} was changed after it was written (its checksum does "
                             f"not match its content); {kind.remedy}")
    if kind.content is not None:
        structure.check(kind.content, content, name, ModelFileError)
    return content


def load(kind: Kind, path: str | Path) -> dict[str, Any]:
    """Read a file written by `save` and return its checked content."""
    path = Path(path)
    if not path.is_file():
        raise ModelFileError(f"{kind.name} {path} does not exist")
    try:
        text = path.read_text(encoding="utf-8")
    except UnicodeDecodeError:
        raise ModelFileError(f"{path} is not a text file, so not {kind.described}") from None
    return loads(kind, text, str(path))
