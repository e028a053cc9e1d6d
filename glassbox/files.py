"""Writing output files safely: atomically, under safe names."""

from __future__ import annotations

import json
import os
import re
import tempfile
from pathlib import Path
from typing import Any

from glassbox.errors import GlassboxError, OptionError


def write_atomic(path: str | Path, content: str | bytes) -> None:
    """Write to a temporary file beside `path`, then rename it into place.

    An interrupted write leaves the old file (or none), never half a file.
    """
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    if not folder.is_dir():
        raise OptionError(f"cannot write {path}: folder {folder} does not exist")
    handle, temporary = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    try:
        if isinstance(content, bytes):
            with os.fdopen(handle, "wb") as out:
                out.write(content)
        else:
            with os.fdopen(handle, "w", encoding="utf-8", newline="\n") as out:
                out.write(content)
        os.chmod(temporary, 0o666 & ~_umask())  # mkstemp makes 0600; give the usual mode
        os.replace(temporary, path)
    except BaseException:
        if os.path.exists(temporary):
            os.unlink(temporary)
        raise


def read_json(path: str | Path, what: str, error: type[GlassboxError] = OptionError) -> Any:
    """A JSON file's content; `error` with a one-line message if missing or not JSON."""
    path = Path(path)
    if not path.is_file():
        raise error(f"{what} {path} does not exist")
    try:
        return json.loads(path.read_text(encoding="utf-8"))
    except (json.JSONDecodeError, UnicodeDecodeError) as exc:
        raise error(f"{what} {path} is not valid JSON: {exc}") from None


def read_toml(path: str | Path, what: str, error: type[GlassboxError] = OptionError
              ) -> dict[str, Any]:
    """A TOML file's content; `error` with a one-line message if missing or not TOML."""
    import tomllib

    path = Path(path)
    if not path.is_file():
        raise error(f"{what} {path} does not exist")
    try:
        return tomllib.loads(path.read_text(encoding="utf-8"))
    except tomllib.TOMLDecodeError as exc:
        raise error(f"{what} {path} is not valid TOML: {exc}") from None
    except UnicodeDecodeError:
        raise error(f"{what} {path} is not a UTF-8 text file") from None


def _umask() -> int:
    current = os.umask(0o022)
    os.umask(current)
    return current


def safe_file_name(name: str) -> str:
    """A file name made from a feature name: letters, digits, _ . - only."""
    return re.sub(r"[^A-Za-z0-9_.-]+", "_", name).strip("_") or "feature"


def output_folder(folder: str | Path, what: str) -> Path:
    """Create (if needed) and return a folder for output files."""
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise OptionError(f"cannot write {what} into {folder}: it is a file, not a folder")
    folder.mkdir(parents=True, exist_ok=True)
    return folder
