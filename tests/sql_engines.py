"""The SQL engines the export tests run a SELECT in: DuckDB, Python's sqlite3 and, where one
can be started, a real PostgreSQL server (a temporary cluster, stopped afterwards)."""

from __future__ import annotations

import contextlib
import glob
import math
import os
import shutil
import socket
import subprocess
import tempfile
import warnings
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pandas as pd


def spoiled(frame: pd.DataFrame, features, places) -> tuple[pd.DataFrame, np.ndarray]:
    """A copy of `frame` with each (row, column, value) of `places` set where the column is
    one of `features` (the rows a test expects refused, constructed), and which rows they
    are; the flag column Records is read as words and numeric columns set to a fraction or
    a blank as floats."""
    frame = frame.copy()
    frame["Records"] = frame["Records"].astype(object)
    refused = np.zeros(len(frame), dtype=bool)
    for row, column, value in places:
        if column in features:
            if frame[column].dtype.kind in "iu":
                frame[column] = frame[column].astype(float)
            frame.loc[row, column] = value
            refused[row] = True
    assert refused.sum() >= 2
    return frame, refused


def _frame_for_engine(frame: pd.DataFrame) -> pd.DataFrame:
    """Gaps as NULL (None in text columns, NaN in numeric ones, which engines load as NULL)."""
    out = frame.copy()
    for name in out.columns:
        if not pd.api.types.is_numeric_dtype(out[name].dtype):
            out[name] = out[name].astype(object).where(out[name].notna(), None)
    return out


def run_duckdb(sql: str, frame: pd.DataFrame, table: str = "applications") -> pd.DataFrame:
    """Load the frame as the table `table` (a plain name, unquoted) and run the SELECT."""
    import duckdb

    connection = duckdb.connect()
    try:
        connection.register("loaded", _frame_for_engine(frame))
        connection.execute(f"CREATE TABLE {_quoted(table)} AS SELECT * FROM loaded")
        return connection.execute(sql).df()
    finally:
        connection.close()


def sqlite_connection():
    """A sqlite3 connection with exp and floor: the build's own math functions, or (when
    it was built without them) Python's registered in their place, with a warning saying so."""
    import sqlite3

    connection = sqlite3.connect(":memory:")
    try:
        connection.execute("SELECT exp(1.0), floor(2.5)").fetchall()
    except sqlite3.OperationalError:
        warnings.warn("this sqlite3 build has no math functions: exp and floor are "
                      "registered from Python's math module", stacklevel=2)
        connection.create_function("exp", 1, math.exp, deterministic=True)
        connection.create_function("floor", 1, math.floor, deterministic=True)
    return connection


def run_sqlite(sql: str, frame: pd.DataFrame, table: str = "applications") -> pd.DataFrame:
    connection = sqlite_connection()
    try:
        _frame_for_engine(frame).to_sql(table, connection, index=False)
        return pd.read_sql_query(sql, connection)
    finally:
        connection.close()


# ---------------------------------------------------------------- PostgreSQL


def _pg_binaries() -> Path | None:
    found = shutil.which("pg_ctl")
    if found:
        return Path(os.path.realpath(found)).parent
    candidates = sorted(glob.glob("/usr/lib/postgresql/*/bin/pg_ctl"))
    return Path(candidates[-1]).parent if candidates else None


def _server_user() -> str | None:
    """The user the server runs as: ours when we are not root, else postgres or nobody."""
    if os.geteuid() != 0:
        return None
    import pwd

    for name in ("postgres", "nobody"):
        with contextlib.suppress(KeyError):
            pwd.getpwnam(name)
            return name
    raise RuntimeError("running as root and there is no postgres or nobody user to run "
                       "the server as")


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return probe.getsockname()[1]


@contextlib.contextmanager
def postgres_server() -> Iterator[str]:
    """A throwaway PostgreSQL cluster on 127.0.0.1 and a free port; yields the connection
    string; stopped and removed afterwards. RuntimeError (with the reason) if it cannot."""
    binaries = _pg_binaries()
    if binaries is None:
        raise RuntimeError("no PostgreSQL binaries (pg_ctl) on PATH or in "
                           "/usr/lib/postgresql/*/bin")
    user = _server_user()
    folder = Path(tempfile.mkdtemp(prefix="glassbox-pg-"))
    data, log = folder / "data", folder / "server.log"
    as_user = ["runuser", "-u", user, "--"] if user else []
    if user:
        import pwd

        entry = pwd.getpwnam(user)
        os.chown(folder, entry.pw_uid, entry.pw_gid)
        os.chmod(folder, 0o700)
    port = _free_port()
    role = user or "postgres"

    def run(*command: str) -> subprocess.CompletedProcess:
        return subprocess.run([*as_user, *command], capture_output=True, text=True,
                              timeout=120, cwd=folder)

    started = False
    try:
        made = run(str(binaries / "initdb"), "-D", str(data), "-U", role, "-A", "trust",
                   "--no-sync", "-E", "UTF8")
        if made.returncode != 0:
            raise RuntimeError(f"initdb failed: {_last_line(made.stderr or made.stdout)}")
        start = run(str(binaries / "pg_ctl"), "-D", str(data), "-l", str(log), "-w",
                    "-o", f"-h 127.0.0.1 -p {port} -k {folder} -F", "start")
        if start.returncode != 0:
            text = log.read_text(errors="replace") if log.exists() else start.stderr
            raise RuntimeError(f"the server did not start: {_last_line(text)}")
        started = True
        yield f"host=127.0.0.1 port={port} user={role} dbname=postgres"
    finally:
        if started:
            run(str(binaries / "pg_ctl"), "-D", str(data), "-m", "immediate", "-w", "stop")
        shutil.rmtree(folder, ignore_errors=True)


def _last_line(text: str) -> str:
    lines = [line for line in (text or "").splitlines() if line.strip()]
    return lines[-1] if lines else "(no message)"


def _pg_type(column: pd.Series) -> str:
    if pd.api.types.is_bool_dtype(column.dtype):
        return "BOOLEAN"
    if pd.api.types.is_integer_dtype(column.dtype):
        return "BIGINT"
    if pd.api.types.is_numeric_dtype(column.dtype):
        return "DOUBLE PRECISION"
    return "TEXT"


def run_postgres(dsn: str, sql: str, frame: pd.DataFrame,
                 table: str = "applications") -> pd.DataFrame:
    """Load the frame into a fresh table (COPY) and run the SELECT."""
    import psycopg

    frame = _frame_for_engine(frame)
    quoted = [(_quoted(name), _pg_type(frame[name])) for name in frame.columns]
    table = _quoted(table)
    with psycopg.connect(dsn, autocommit=True) as connection:
        connection.execute(f"DROP TABLE IF EXISTS {table}")
        connection.execute(f"CREATE TABLE {table} ("
                           + ", ".join(f"{name} {kind}" for name, kind in quoted) + ")")
        with connection.cursor() as cursor:
            with cursor.copy(f"COPY {table} FROM STDIN") as copy:
                for row in frame.itertuples(index=False):
                    copy.write_row([None if _blank(v) else _plain(v) for v in row])
            cursor.execute(sql)
            names = [d.name for d in cursor.description]
            rows = cursor.fetchall()
    return pd.DataFrame(rows, columns=names)


def _quoted(name: str) -> str:
    return '"' + name.replace('"', '""') + '"'


def _blank(value) -> bool:
    return value is None or (isinstance(value, float) and math.isnan(value))


def _plain(value):
    if isinstance(value, np.integer):
        return int(value)
    if isinstance(value, np.floating):
        return float(value)
    return value
