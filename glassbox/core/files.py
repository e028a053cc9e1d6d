"""Writing output files safely: atomically, under safe names, never over an input.

Every command checks its outputs before it starts work (`check_output`,
`check_output_folder`): an output that is an input, a folder where a file is
needed (or the reverse), a missing or unwritable folder, or an existing file of
another kind (`file_kind`) is refused with one line naming it.
"""

from __future__ import annotations

import json
import os
import re
import tempfile
import time
import tomllib
from collections.abc import Iterable
from pathlib import Path
from typing import Any

from glassbox.core.errors import GlassboxError, OptionError


def write_atomic(path: str | Path, content: str | bytes | Iterable[bytes]) -> None:
    """Write to a temporary file beside `path`, then rename it into place. Text is
    written as UTF-8; bytes may come in parts (a large table a block at a time).

    An interrupted write leaves the old file (or none), never half a file.
    """
    path = Path(path)
    folder = _writable_folder(path)
    remove_stale_temporaries(path)
    handle, temporary = _temporary(path, folder)
    try:
        if isinstance(content, str):
            content = content.encode("utf-8")
        with os.fdopen(handle, "wb") as out:
            for part in [content] if isinstance(content, bytes) else content:
                out.write(part)
        os.chmod(temporary, 0o666 & ~_umask())  # mkstemp makes 0600; give the usual mode
        os.replace(temporary, path)
    except BaseException:
        if os.path.exists(temporary):
            os.unlink(temporary)
        raise


STALE_SECONDS = 60  # a temporary this old beside its target was left by a killed write


def _temporary_pattern(path: Path) -> re.Pattern[str]:
    """The names `tempfile.mkstemp` gives our temporaries for `path`: `.NAME.xxxxxxxx.tmp`."""
    return re.compile(re.escape(f".{path.name}.") + r"[a-z0-9_]{8}" + re.escape(".tmp"))


def remove_stale_temporaries(path: str | Path, older_than: float = STALE_SECONDS) -> list[Path]:
    """Remove temporaries a killed write left beside `path` (our own name pattern for
    that target only, regular files older than `older_than` seconds); return them."""
    path = Path(path)
    folder = path.parent if str(path.parent) else Path(".")
    pattern = _temporary_pattern(path)
    removed = []
    try:
        candidates = [entry for entry in os.scandir(folder) if pattern.fullmatch(entry.name)]
    except OSError:
        return removed
    now = time.time()
    for entry in candidates:
        try:
            stale = entry.is_file(follow_symlinks=False) and (
                now - entry.stat(follow_symlinks=False).st_mtime > older_than)
            if stale:
                os.unlink(entry.path)
                removed.append(Path(entry.path))
        except OSError:
            continue  # gone meanwhile, or not ours to remove: leave it
    return removed


def _writable_folder(path: Path) -> Path:
    """The folder `path` is written into; refused when it is missing, or `path` is a folder."""
    folder = path.parent if str(path.parent) else Path(".")
    if path.is_dir():
        raise OptionError(f"cannot write {path}: it is a folder, not a file")
    if path.exists() and not path.is_file():
        raise OptionError(f"cannot write {path}: it is not a regular file (a device, pipe "
                          "or socket); to write to standard output, leave out the option")
    if not folder.is_dir():
        if folder.exists():
            raise OptionError(f"cannot write {path}: {folder} is a file, not a folder")
        raise OptionError(f"cannot write {path}: folder {folder} does not exist")
    return folder


def _temporary(path: Path, folder: Path) -> tuple[int, str]:
    """An open temporary file beside `path` (our own name pattern)."""
    try:
        return tempfile.mkstemp(prefix=f".{path.name}.", suffix=".tmp", dir=folder)
    except OSError as exc:
        raise OptionError(f"cannot write {path}: folder {folder} is not writable "
                          f"({exc.strerror or exc})") from None


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


# ---------------------------------------------------------------- checking outputs first

KIND_WORDS = {
    "glassbox-model": "a glassbox model file",
    "glassbox-points": "a points card",
    "glassbox-comparison": "a comparison (JSON)",
    "recourse-reach": "a recourse reach summary (JSON)",
    "recourse-audit": "a recourse reach summary (JSON, written as `recourse audit`)",
    "recourse-plans": "the plans for one row (JSON)",
    "glassbox-monitoring": "a monitoring result (JSON)",
    "glassbox-changes": "a change review of two models (JSON)",
    "json": "a JSON file",
    "csv": "a CSV file of data (not a table glassbox writes)",
    "csv-scores": "a CSV of scores",
    "csv-reasons": "a CSV of reasons",
    "csv-shapes": "a CSV of shape tables",
    "csv-card": "a CSV of points card rows",
    "csv-plans": "a CSV of plans",
    "csv-monitoring": "a CSV of monitoring results",
    "csv-folds": "a CSV of fold assignments",
    "markdown": "a Markdown file",
    "html": "an HTML page",
    "png": "a PNG picture",
    "sql": "an SQL export of a model",
    "pmml": "a PMML file",
    "parquet": "a Parquet file",
    "parquet-scores": "a Parquet file of scores",
    "json-scores": "a JSON file of scores",
    "parquet-folds": "a Parquet file of fold assignments",
    "json-folds": "a JSON file of fold assignments",
    "schema": "a schema (TOML)",
    "mutability": "a mutability file (TOML)",
    "mutability-template": "a starting mutability file (every feature fixed)",
    "toml": "a TOML file",
    "text": "a text file of a kind glassbox does not write",
    "binary": "a binary file of a kind glassbox does not write",
    "empty": "an empty file",
}
SUFFIX_KINDS = {".csv": "csv", ".tsv": "csv", ".md": "markdown", ".markdown": "markdown",
                ".html": "html", ".htm": "html", ".parquet": "parquet", ".pq": "parquet",
                ".png": "png", ".json": "json", ".toml": "toml"}
SQL_MARK = "-- glassbox "  # the first line of every SQL export starts so (its kind on disk)
# the CSV tables glassbox writes, told by columns in their header (the first match wins);
# any other CSV is data, which a table is never written over without --force
CSV_HEADERS = (
    ("csv-reasons", {"reason_1", "feature_1", "gap_1"}),
    ("csv-plans", {"status", "plan", "changes", "new_outcome"}),
    ("csv-monitoring", {"period", "feature", "psi", "attribution_change"}),
    ("csv-card", {"feature", "row", "points", "contribution"}),
    ("csv-shapes", {"feature", "row", "contribution"}),
    ("csv-shapes", {"feature", "kind", "term", "importance"}),
    ("csv-scores", {"total_points", "base_points"}),
    ("csv-scores", {"score", "probability"}),
    ("csv-scores", {"score", "prediction"}),
    ("csv-folds", {"fold_1"}),
)
# our tables written as Parquet or JSON records, by the CSV kind their columns would be
OTHER_TABLE_KINDS = {"csv-scores": "scores", "csv-folds": "folds"}
HEAD_BYTES = 65536  # how much of an existing file is read to tell its kind
WHOLE_BYTES = 64 << 20  # a JSON or TOML file up to this size is parsed whole to tell its kind
_FORMAT_FIRST = re.compile(r'\s*\{\s*"format"\s*:\s*"([^"\\]{1,100})"')


def file_kind(path: str | Path) -> str | None:
    """What an existing file holds, as a key of KIND_WORDS (None when there is no file).

    Our JSON documents carry their kind ("format"); Parquet and PNG have magic bytes;
    the rest goes by suffix, then by content (TOML tables, Markdown, CSV, HTML)."""
    path = Path(path)
    if not path.is_file():
        return None
    with path.open("rb") as handle:
        head = handle.read(HEAD_BYTES)
    if not head:
        return "empty"
    if head.startswith(b"PAR1"):
        return _parquet_kind(path)
    if head.startswith(b"\x89PNG\r\n\x1a\n"):
        return "png"
    text = _text(head)
    if text is None:
        return "binary"
    suffix = path.suffix.lower()
    start = text.lstrip()
    if start.startswith("{") or (start.startswith("[") and suffix != ".toml"):
        kind = _json_kind(path, text)
        if kind is not None:
            return kind
    if start[:15].lower().startswith(("<!doctype html", "<html")):
        return "html"
    if start.startswith(SQL_MARK):
        return "sql"
    if start.startswith(("<?xml", "<PMML")) and "<PMML" in start[:4096]:
        return "pmml"
    if suffix == ".toml":
        return _toml_kind(path) or "toml"
    kind = SUFFIX_KINDS.get(suffix) or _toml_kind(path) or _text_kind(start)
    return _csv_kind(start) if kind == "csv" else kind


def table_kind(fmt: str, table: str) -> str:
    """The kind of a table written as `fmt` (csv, markdown, json); a CSV table is told
    apart by what it holds (`table`: scores, reasons, shapes, card, plans or monitoring)."""
    return f"csv-{table}" if fmt == "csv" else fmt


def _csv_kind(text: str) -> str:
    """Which of our CSV tables a CSV text is, by its header; "csv" for data."""
    import csv

    header = next(csv.reader([text.split("\n", 1)[0].rstrip("\r")]), [])
    return _columns_kind(name.strip() for name in header)


def _columns_kind(names: Iterable[str]) -> str:
    """Which of our tables columns of these names are (a kind "csv-..."), "csv" for data."""
    columns = set(names)
    return next((kind for kind, needed in CSV_HEADERS if needed <= columns), "csv")


def _parquet_kind(path: Path) -> str:
    """Scores or fold assignments written as Parquet ("parquet-scores", "parquet-folds", by
    their columns), or any Parquet file."""
    try:
        import pyarrow.parquet as pq

        names = pq.read_schema(path).names
    except (OSError, ValueError, ImportError):  # damaged: still Parquet by its first bytes
        return "parquet"
    table = OTHER_TABLE_KINDS.get(_columns_kind(names))
    return f"parquet-{table}" if table else "parquet"


def _records_kind(head: str) -> str | None:
    """Scores or fold assignments written as JSON records ("json-scores", "json-folds", by
    the first record's keys)."""
    start = head.lstrip()
    if not start.startswith("["):
        return None
    try:
        first, _ = json.JSONDecoder().raw_decode(start, len(start) - len(start[1:].lstrip()))
    except ValueError:
        return None
    if isinstance(first, dict):
        table = OTHER_TABLE_KINDS.get(_columns_kind(map(str, first)))
        return f"json-{table}" if table else None
    return None


def _text(head: bytes) -> str | None:
    """The head of a file as text, or None when it is not UTF-8 text."""
    import codecs

    if b"\x00" in head:
        return None
    try:
        return codecs.getincrementaldecoder("utf-8")().decode(head, final=False).lstrip("\ufeff")
    except UnicodeDecodeError:
        return None


def _json_kind(path: Path, head: str) -> str | None:
    """A JSON document's "format", "json" for other JSON, None when it is not JSON."""
    found = _FORMAT_FIRST.match(head)
    if found:
        return found.group(1)
    records = _records_kind(head)
    if records:
        return records
    if path.stat().st_size > WHOLE_BYTES:
        return "json" if head.lstrip().startswith("{") else None
    try:
        document = json.loads(path.read_text(encoding="utf-8"))
    except (ValueError, UnicodeDecodeError):
        return "json" if path.suffix.lower() == ".json" else None
    if isinstance(document, dict) and isinstance(document.get("format"), str):
        return document["format"]
    return "json"


def _toml_kind(path: Path) -> str | None:
    """A schema (it has a [target]), a mutability file ([goal]) or other TOML; None when
    the file is not TOML with at least one table."""
    if path.stat().st_size > WHOLE_BYTES:
        return None
    try:
        content = tomllib.loads(path.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError):
        return None
    if isinstance(content.get("target"), dict):
        return "schema"
    if isinstance(content.get("goal"), dict):
        return "mutability"
    return "toml" if any(isinstance(value, dict) for value in content.values()) else None


def _text_kind(text: str) -> str:
    """Markdown (a heading or table first), CSV (a delimiter in the first line) or text."""
    first = next((line for line in text.splitlines() if line.strip()), "")
    if first.startswith(("# ", "| ")):
        return "markdown"
    if any(mark in first for mark in (",", ";", "\t")):
        return "csv"
    return "text"


def same_file(first: str | Path, second: str | Path) -> bool:
    """Whether two paths name one file: the same resolved path (symlinks, `./x`), or
    the same file on disk (hard links)."""
    first, second = Path(first), Path(second)
    try:
        if first.resolve() == second.resolve():
            return True
    except (OSError, RuntimeError):
        pass
    try:
        return first.exists() and second.exists() and os.path.samefile(first, second)
    except OSError:
        return False


def check_output(path: str | Path | None, kind: str, inputs: Iterable[str | Path | None],
                 *, force: bool = False, option: str = "--out") -> None:
    """Refuse, before any work, an output file that is one of `inputs`, a folder, in a
    missing or unwritable folder, or an existing file of another kind (unless `force`).

    `kind` is what will be written there (a key of KIND_WORDS); writing over a file of
    the same kind (a rerun) is allowed."""
    if path is None:
        return
    path = Path(path)
    _not_an_input(path, inputs, option)
    folder = _writable_folder(path)
    handle, probe = _temporary(path, folder)
    os.close(handle)
    os.unlink(probe)
    existing = file_kind(path)
    if existing is not None and existing not in (kind, "empty") and not force:
        raise OptionError(f"{option} {path} is {KIND_WORDS.get(existing, existing)}; this "
                          f"would write {KIND_WORDS.get(kind, kind)} over it. Give --force "
                          "to overwrite it, or choose another file")


def check_output_folder(folder: str | Path | None, inputs: Iterable[str | Path | None],
                        files: Iterable[tuple[str, str]] = (), *, force: bool = False,
                        option: str = "--out", also: re.Pattern[str] | None = None) -> None:
    """Refuse, before any work, an output folder that is an input or a file, or under a
    file or an unwritable folder; then check each (name, kind) file to be written in it
    as `check_output` does. `also` matches the names of other files the run writes
    there (numbered parts): an input of such a name in the folder is refused too."""
    if folder is None:
        return
    folder = Path(folder)
    inputs = [Path(source) for source in inputs if source is not None]
    _not_an_input(folder, inputs, option)
    for source in inputs:
        if also is not None and also.fullmatch(source.name) and same_file(source.parent,
                                                                           folder):
            raise OptionError(f"{option} {folder} holds the input {source}, a name the run "
                              "writes there; an output never overwrites an input, choose "
                              "another folder")
    if folder.exists() and not folder.is_dir():
        raise OptionError(f"{option} {folder} is a file, not a folder; name a folder for "
                          "these outputs")
    existing = folder
    while not existing.exists() and existing != existing.parent:
        existing = existing.parent if str(existing.parent) else Path(".")
    if not existing.is_dir():
        raise OptionError(f"{option} {folder}: {existing} is a file, not a folder")
    handle, probe = _temporary(existing / "folder", existing)
    os.close(handle)
    os.unlink(probe)
    if folder.is_dir():
        for name, kind in files:
            check_output(folder / name, kind, inputs, force=force,
                         option=f"{option} {folder}: the file")


def check_not_an_input(path: str | Path | None, inputs: Iterable[str | Path | None],
                       option: str = "--out") -> None:
    """Refuse an output that is one of `inputs`: the first check, before even its suffix."""
    if path is not None:
        _not_an_input(Path(path), inputs, option)


def _not_an_input(path: Path, inputs: Iterable[str | Path | None], option: str) -> None:
    for source in inputs:
        if source is not None and same_file(path, source):
            raise OptionError(f"{option} {path} is the input {source}; an output never "
                              "overwrites an input, choose another path")
