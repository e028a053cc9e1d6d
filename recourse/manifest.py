"""The folder of planned partitions: one Parquet part per partition and a manifest that
vouches for each part.

The manifest records the run's fingerprint (input file, model, mutability rules, options)
and, for every part it lists, the block of input rows the part covers (`first_row`, the
block's first data row counted from 1, header not counted, and `rows`, the block's length),
how many outcome rows the part holds and the SHA-256 of its bytes. Each part also carries
the run's fingerprint and its own number in its Parquet metadata.

Every row number in the folder counts from 1, as in every file recourse writes: the parts'
`row` column is the data row (1 is the first row after the header). In memory the outcomes'
`row` is the 0-based position (`recourse.scale`); `PartsFolder.write` and `read` convert.
Folders written before (manifest version 2, rows counted from 0) are refused, naming why.

Resume keeps a part only if it passes every check (a file, same bytes, readable, written by
this run, its outcome rows inside its block, unique and increasing, as many as recorded);
any other part is planned again and named in a note. Files the manifest does not list are
left alone and named in a note.
"""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
import os
import re
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

import numpy as np
import pandas as pd

from glassbox.core.errors import DataError, OptionError
from glassbox.core.files import output_folder, write_atomic
from glassbox.core.wording import plural
from glassbox.core.workers import sigint_held
from recourse.mutability import Mutability

MANIFEST = "manifest.json"
# what an output folder of parts holds: the parts and the manifest (which the planner checks)
PARTS_FOLDER_FILES = re.compile(rf"part-.*\.parquet|{re.escape(MANIFEST)}")
MANIFEST_KIND = "recourse plans by partition"
MANIFEST_VERSION = 3  # 3: row numbers count from 1 (2 counted from 0)
FIRST_ROW = 1  # the number of the first data row in the parts and the manifest
REJECTED = "rejected"  # parts that are not files are moved here, never deleted
PART_KEY = b"recourse.part"  # the Parquet metadata key of a part's own record
SETTING_LABELS = {  # what differs, in words, when a folder holds another run
    "input_sha256": "another input file", "model_checksum": "another model",
    "mutability_checksum": "other mutability rules",
    "partition_rows": "another partition size", "engine": "another engine",
    "plans": "another number of plans", "solver": "another solver",
    "keep": "other kept columns"}


def mutability_checksum(mutability: Mutability) -> str:
    """SHA-256 of the rules as plain data (their source file's name left out)."""
    def plain(value: Any) -> Any:
        if isinstance(value, Mapping):
            return {str(k): plain(v) for k, v in value.items()}
        if isinstance(value, list | tuple):
            return [plain(v) for v in value]
        return value

    rules = dataclasses.asdict(dataclasses.replace(mutability, source=""))
    text = json.dumps(plain(rules), sort_keys=True, default=repr)
    return "sha256:" + hashlib.sha256(text.encode("utf-8")).hexdigest()


def fingerprint(settings: Mapping[str, Any]) -> str:
    """SHA-256 of the settings that make a run what it is (the input's name left out)."""
    text = json.dumps({k: settings[k] for k in sorted(SETTING_LABELS)}, sort_keys=True)
    return "sha256:" + hashlib.sha256(text.encode("utf-8")).hexdigest()


def part_name(index: int) -> str:
    return f"part-{index:05d}.parquet"


@dataclass(frozen=True)
class PartRecord:
    """What the manifest says of one part."""

    index: int
    first_row: int  # 0-based position of the block's first input row (the file: from 1)
    rows: int  # input rows in the block
    outcomes: int  # outcome rows in the part (the block's declined rows)
    sha256: str

    def as_dict(self) -> dict[str, Any]:
        return {"file": part_name(self.index), "first_row": self.first_row + FIRST_ROW,
                "rows": self.rows,
                "outcomes": self.outcomes, "sha256": self.sha256}

    def block_words(self) -> str:
        if not self.rows:
            return "an empty block"
        return f"data rows {self.first_row + 1}-{self.first_row + self.rows}"


class PartRejected(Exception):
    """A part that fails a check; the message says which."""


def _record_from(key: str, entry: Any) -> PartRecord:
    """A manifest entry as a record; PartRejected if it is not one."""
    try:
        index = int(key)
        fields = {name: entry[name] for name in ("first_row", "rows", "outcomes", "sha256")}
    except (ValueError, TypeError, KeyError):
        raise PartRejected("its entry in the manifest is incomplete") from None
    numbers = [fields[name] for name in ("first_row", "rows", "outcomes")]
    if (entry.get("file") != part_name(index) or not isinstance(fields["sha256"], str)
            or any(isinstance(n, bool) or not isinstance(n, int) or n < 0 for n in numbers)
            or fields["first_row"] < FIRST_ROW or fields["outcomes"] > fields["rows"]):
        raise PartRejected("its entry in the manifest is damaged")
    first, rows, outcomes = numbers
    return PartRecord(index, first - FIRST_ROW, rows, outcomes, fields["sha256"])


def _part_bytes(table: pd.DataFrame, index: int, run: str) -> bytes:
    import pyarrow as pa
    import pyarrow.parquet as pq

    arrow = pa.Table.from_pandas(table, preserve_index=False)
    own = json.dumps({"run": run, "index": index}, sort_keys=True).encode("utf-8")
    arrow = arrow.replace_schema_metadata({**(arrow.schema.metadata or {}), PART_KEY: own})
    buffer = io.BytesIO()
    pq.write_table(arrow, buffer)
    return buffer.getvalue()


def _checked_part(path: Path, record: PartRecord, run: str,
                  columns: list[str]) -> pd.DataFrame:
    """The part's rows as stored (row numbers from 1) if it passes every check, else
    PartRejected saying which failed."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    if not path.exists():
        raise PartRejected("it is missing")
    if not path.is_file():
        raise PartRejected("it is not a file")
    try:
        content = path.read_bytes()
    except OSError as exc:
        raise PartRejected(f"it cannot be read ({exc.strerror or exc})") from None
    if "sha256:" + hashlib.sha256(content).hexdigest() != record.sha256:
        raise PartRejected("its bytes differ from those written (checksum)")
    try:
        arrow = pq.read_table(io.BytesIO(content))
        own = json.loads((arrow.schema.metadata or {}).get(PART_KEY, b"{}"))
        table = arrow.to_pandas()
    except (pa.ArrowException, ValueError, OSError, UnicodeDecodeError):
        raise PartRejected("it is not a readable Parquet part") from None
    if not isinstance(own, dict) or own.get("run") != run or own.get("index") != record.index:
        raise PartRejected("it was written by another run or for another partition")
    if list(table.columns) != columns:
        raise PartRejected("its columns are not the outcome columns of this run")
    rows = table["row"].to_numpy()
    if not np.issubdtype(rows.dtype, np.integer):
        raise PartRejected("its row numbers are not whole numbers")
    if len(rows) != record.outcomes:
        raise PartRejected(f"it holds {plural(len(rows), 'row')}, not the {record.outcomes:,} "
                           f"recorded")
    first = record.first_row + FIRST_ROW  # the block's first data row, as the part counts
    if len(rows) and (np.any(np.diff(rows) <= 0) or rows[0] < first
                      or rows[-1] >= first + record.rows):
        raise PartRejected(f"its row numbers are not distinct rows of its block "
                           f"({record.block_words()})")
    return table


@dataclass
class PartsFolder:
    """An output folder of parts and its manifest, opened for one run."""

    folder: Path
    settings: dict[str, Any]
    columns: list[str]  # the outcome columns every part has, in order
    records: dict[int, PartRecord] = field(default_factory=dict)  # parts kept or written
    notes: list[str] = field(default_factory=list)  # parts replanned, files ignored
    replanned: int = 0  # parts found on resume that failed a check
    ignored: int = 0  # files the manifest does not list

    @property
    def run(self) -> str:
        return fingerprint(self.settings)

    @property
    def manifest(self) -> Path:
        return self.folder / MANIFEST

    @classmethod
    def open(cls, out: Path, resume: bool, settings: dict[str, Any], columns: list[str],
             say: Callable[[str], None] | None = None) -> PartsFolder:
        """Create the folder, or reopen it (`resume`) keeping only parts that pass every
        check; each part replanned and each file ignored is a note, also passed to `say`."""
        folder = output_folder(out, "planned partitions")
        parts = cls(folder, dict(settings), columns)
        existing = sorted(folder.glob("part-*"))
        if not parts.manifest.exists():
            if existing:
                raise OptionError(f"{folder} holds part files but no {MANIFEST}; use an "
                                  "empty folder")
            parts._save()
            return parts
        if not resume:
            raise OptionError(f"{folder} already holds a run; resume it (--resume) or choose "
                              "an empty folder")
        listed = parts._reopen()
        for key, entry in sorted(listed.items()):
            try:
                record = _record_from(key, entry)
                _checked_part(folder / part_name(record.index), record, parts.run, columns)
            except PartRejected as reason:
                where = folder / (part_name(int(key)) if key.isdigit() else key)
                parts._note(f"{where}: planned again, {reason}", say)
                parts.replanned += 1
                continue
            parts.records[record.index] = record
        names = {part_name(i) for i in parts.records} | {MANIFEST, REJECTED}
        names |= {str(e.get("file")) for e in listed.values() if isinstance(e, dict)}
        for path in sorted(folder.iterdir()):
            if path.name not in names and not (path.name.startswith(".")
                                               and path.name.endswith(".tmp")):
                parts._note(f"{path}: ignored, not a part listed in {MANIFEST}", say)
                parts.ignored += 1
        parts._save()  # the manifest now lists only the parts kept
        return parts

    def _note(self, line: str, say: Callable[[str], None] | None) -> None:
        self.notes.append(line)
        if say is not None:
            say(line)

    def _reopen(self) -> dict[str, Any]:
        """The earlier manifest's parts, after checking it describes this same run."""
        try:
            earlier = json.loads(self.manifest.read_text(encoding="utf-8"))
        except (OSError, json.JSONDecodeError, UnicodeDecodeError) as exc:
            raise OptionError(f"{self.manifest} is not a readable manifest ({exc})") from None
        if not isinstance(earlier, dict) or earlier.get("kind") != MANIFEST_KIND:
            raise OptionError(f"{self.manifest} is not a manifest of planned partitions")
        if earlier.get("version") == 2:
            raise OptionError(f"{self.manifest} was written by an earlier recourse whose parts "
                              "count rows from 0 (manifest version 2); this one counts them "
                              "from 1 and does not resume such a folder: plan into an empty "
                              "folder")
        if earlier.get("version") != MANIFEST_VERSION:
            raise OptionError(f"{self.manifest} was written by another version of recourse "
                              f"(manifest version {earlier.get('version')!r}, this one reads "
                              f"{MANIFEST_VERSION}); plan into an empty folder")
        for key, label in SETTING_LABELS.items():
            if earlier.get(key) != self.settings[key]:
                hint = ("; the engines cut partitions differently, so resume with the same "
                        "engine" if key == "engine" else "")
                raise OptionError(f"cannot resume in {self.folder}: it was planned with "
                                  f"{label} ({key} {earlier.get(key)!r}, now "
                                  f"{self.settings[key]!r}){hint}")
        listed = earlier.get("parts")
        if not isinstance(listed, dict):
            raise OptionError(f"{self.manifest} is not a readable manifest (no table of parts)")
        return listed

    def _save(self) -> None:
        document = {"kind": MANIFEST_KIND, "version": MANIFEST_VERSION, **self.settings,
                    "run": self.run,
                    "parts": {f"{i:05d}": self.records[i].as_dict()
                              for i in sorted(self.records)}}
        write_atomic(self.manifest, json.dumps(document, indent=1) + "\n")

    def keeps(self, index: int, first_row: int, rows: int,
              say: Callable[[str], None] | None = None) -> bool:
        """Whether partition `index` (this block of the input) is already planned; a kept
        part recorded for another block is dropped and named in a note."""
        record = self.records.get(index)
        if record is None:
            return False
        if (record.first_row, record.rows) == (first_row, rows):
            return True
        del self.records[index]
        self.replanned += 1
        self._note(f"{self.folder / part_name(index)}: planned again, it was recorded for "
                   f"{record.block_words()}, but the partition holds data rows "
                   f"{first_row + 1}-{first_row + rows}", say)
        return False

    def write(self, index: int, table: pd.DataFrame, first_row: int, rows: int) -> None:
        """Save a finished partition, then list it in the manifest (a part written but not
        yet listed is planned again on resume). A Ctrl-C meanwhile waits until the part is
        listed, so a part on disk when the run stops is a part the manifest lists."""
        path = self.folder / part_name(index)
        stored = table.assign(row=table["row"].to_numpy(dtype=np.int64) + FIRST_ROW)
        content = _part_bytes(stored, index, self.run)
        with sigint_held():
            if path.exists() and not path.is_file():  # move it aside, never delete it
                aside = output_folder(self.folder / REJECTED, "rejected parts")
                os.replace(path, _free_name(aside / path.name))
            write_atomic(path, content)
            self.records[index] = PartRecord(index, first_row, rows, len(table),
                                             "sha256:" + hashlib.sha256(content).hexdigest())
            self._save()

    def read(self, index: int) -> pd.DataFrame:
        """A part's rows, checked again as they are read for the summary; `row` as the
        0-based position again."""
        record = self.records[index]
        try:
            table = _checked_part(self.folder / part_name(index), record, self.run,
                                  self.columns)
        except PartRejected as reason:
            raise DataError(f"{self.folder / part_name(index)} changed during the run: "
                            f"{reason}; rerun with --resume") from None
        return table.assign(row=table["row"].to_numpy(dtype=np.int64) - FIRST_ROW)


def _free_name(path: Path) -> Path:
    """`path`, or `path.1`, `path.2`... whichever does not exist yet."""
    candidate, number = path, 0
    while candidate.exists():
        number += 1
        candidate = path.with_name(f"{path.name}.{number}")
    return candidate
