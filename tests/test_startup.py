"""Start-up: what the commands load before they do anything (constructed checks, in fresh
processes; `sys.modules` is the truth of what was imported)."""

from __future__ import annotations

import json
import subprocess
import sys

import pytest

from .conftest import DEMO

HEAVY = ("matplotlib", "sklearn", "scipy.stats", "pygam", "pulp", "dask")


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
