"""Start-up: what the commands load before they do anything (constructed checks, in fresh
processes; `sys.modules` is the truth of what was imported)."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from .conftest import DEMO

HEAVY = ("matplotlib", "sklearn", "scipy", "pygam", "pulp", "dask", "numba")


def loaded_after(code: str, argv: list[str] | None = None) -> list[str]:
    """The heavy modules (and pandas) in sys.modules after `code` runs in a new process."""
    probe = (f"import sys\nsys.argv = {argv!r}\n{code}\n" if argv else f"import sys\n{code}\n")
    probe += ("print(__import__('json').dumps([m for m in "
              f"{[*HEAVY, 'pandas']!r} if m in sys.modules]))")
    result = subprocess.run([sys.executable, "-c", probe], capture_output=True, text=True,
                            timeout=300)
    assert result.returncode == 0, result.stderr
    return json.loads(result.stdout.splitlines()[-1])


RUN_APP = ("from {module} import app\nimport typer\n"
           "try:\n    typer.main.get_command(app).main(args={args!r}, standalone_mode=False)\n"
           "except SystemExit:\n    pass\n")


@pytest.mark.parametrize("args", [["--help"], ["--version"], []])
def test_glassbox_help_and_version_load_nothing_heavy(args):
    code = ("import glassbox.cli" if not args else
            RUN_APP.format(module="glassbox.cli", args=args))
    assert loaded_after(code) == []


@pytest.mark.parametrize("args", [["--help"], ["--version"], []])
def test_recourse_help_and_version_load_nothing_heavy(args):
    code = ("import recourse.cli" if not args else
            RUN_APP.format(module="recourse.cli", args=args))
    assert loaded_after(code) == []


def test_every_glassbox_command_help_loads_nothing_heavy():
    commands = ["schema", "fit", "score", "points", "shapes", "compare", "reasons", "report",
                "monitor", "export", "changes"]
    code = "\n".join(RUN_APP.format(module="glassbox.cli", args=[name, "--help"])
                     for name in commands)
    assert loaded_after(code) == []


def test_scoring_one_row_loads_no_fitting_or_drawing_library(tmp_path):
    import pandas as pd

    from glassbox.core import artifact
    from glassbox.core.schema import load_schema
    from glassbox.fitting.fit import fit_model

    frame = pd.read_csv(DEMO / "loans.csv")
    model_file, one_row = tmp_path / "m.json", tmp_path / "one.csv"
    artifact.save(fit_model(frame.head(1500), load_schema(DEMO / "loans.schema.toml"),
                            "sparse", max_features=4), model_file)
    frame.head(1).to_csv(one_row, index=False)
    out = tmp_path / "scores.csv"
    code = RUN_APP.format(module="glassbox.cli",
                          args=["score", str(model_file), str(one_row), "--out", str(out)])
    loaded = loaded_after(code)
    assert out.is_file() and len(pd.read_csv(out)) == 1
    assert [name for name in loaded if name != "pandas"] == []


@pytest.fixture(scope="module")
def spline_model(tmp_path_factory):
    """The demo's spline model (the one the start-up targets are timed on, bench/run.py)."""
    import pandas as pd

    from glassbox.core import artifact
    from glassbox.core.schema import load_schema
    from glassbox.fitting.fit import fit_model

    path = tmp_path_factory.mktemp("startup") / "loans.spline.json"
    artifact.save(fit_model(pd.read_csv(DEMO / "loans.csv"),
                            load_schema(DEMO / "loans.schema.toml"), "spline"), path)
    return path


def test_scoring_one_row_with_the_spline_model_loads_no_scipy(spline_model, tmp_path):
    # the probability comes from glassbox.core.logistic (math.exp for a few rows), not
    # scipy.special, and no fitting or drawing library loads (constructed check)
    import pandas as pd

    one_row = tmp_path / "one.csv"
    pd.read_csv(DEMO / "loans.csv").head(1).to_csv(one_row, index=False)
    out = tmp_path / "scores.csv"
    code = RUN_APP.format(module="glassbox.cli",
                          args=["score", str(spline_model), str(one_row), "--out", str(out)])
    assert loaded_after(code) == ["pandas"]
    assert list(pd.read_csv(out)["application_id"]) == ["L000001"]


def test_planning_one_row_loads_no_scipy_or_solver_library(spline_model):
    # `recourse plan` for one declined row (the start-up target's command): the exact search
    # in plain numpy; neither scipy, the integer-program libraries, dask nor numba load
    code = RUN_APP.format(module="recourse.cli", args=[
        "plan", str(spline_model), "--mutability", str(DEMO / "loans.mutability.toml"),
        "--data", str(DEMO / "loans.csv"), "--id", "L001096"])
    assert loaded_after(code) == ["pandas"]


COLLECTOR = """import gc, sys
sys.argv = {argv!r}
from {module} import main
from glassbox.cli_support import _CONSOLE
collections = []  # those made during the run (not after it, when the collector catches up)
gc.callbacks.append(lambda phase, info: collections.append(phase)
                    if phase == "start" and _CONSOLE["run"] else None)
try:
    main()
except SystemExit as exit:
    status = exit.code
print(__import__("json").dumps([status, gc.isenabled() and not _CONSOLE["run"],
                                len(collections), len(gc.get_objects()),
                                gc.get_freeze_count()]))
"""


@pytest.mark.parametrize("module,argv", [
    ("glassbox.cli", ["glassbox", "score", "MODEL", str(DEMO / "loans.csv"), "--out",
                      "OUT"]),
    ("recourse.cli", ["recourse", "plan", "MODEL", "--mutability",
                      str(DEMO / "loans.mutability.toml"), "--data", str(DEMO / "loans.csv"),
                      "--id", "L001096", "--format", "json"])])
def test_a_console_run_resumes_the_cycle_collector(module, argv, spline_model, tmp_path):
    # constructed: the console entry point pauses the collector while it starts, and the
    # command resumes it (what was loaded is frozen), so a long run still collects cycles
    argv = [str(spline_model) if word == "MODEL" else
            str(tmp_path / "scores.csv") if word == "OUT" else word for word in argv]
    code = COLLECTOR.format(argv=argv, module=module)
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=300)
    status, restored, collections, tracked, frozen = json.loads(done.stdout.splitlines()[-1])
    assert status == 0 and restored, done.stderr
    assert collections > 0  # the command's work ran with the collector on
    assert frozen > 50_000 and tracked < 20_000  # start-up's objects: frozen, out of its way


def test_a_console_run_refused_while_reading_options_restores_the_collector():
    # constructed: a usage error ends the run before any command body; collector back on
    code = COLLECTOR.format(argv=["recourse", "plan", "--no-such-option"],
                            module="recourse.cli")
    done = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True,
                          timeout=300)
    status, restored, collections, _, frozen = json.loads(done.stdout.splitlines()[-1])
    assert status == 2 and restored and collections == 0 and frozen == 0


def test_library_calls_leave_the_collector_alone():
    # constructed: outside a console run (a test, a notebook) `loading` changes nothing
    import gc

    from glassbox.cli_support import loading

    before = gc.get_freeze_count()
    assert gc.isenabled()
    with loading():
        assert gc.isenabled()
    assert gc.isenabled() and gc.get_freeze_count() == before
