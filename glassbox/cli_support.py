"""What every command of both apps shares, light to import: the `--force` option, the error
wrapper, the consoles, writing to a file or standard output, option parsing.

Nothing here imports pandas, numpy or a fitting library: `glassbox --help` and
`recourse --help` load only this, typer and rich (`tests/test_startup.py`).
"""

from __future__ import annotations

import contextlib
import functools
import gc
import json
import sys
import warnings
from collections.abc import Callable, Iterable, Iterator
from pathlib import Path
from typing import TYPE_CHECKING, Annotated, Any

import click
import typer
from typer.core import TyperArgument, TyperCommand, TyperGroup

from glassbox.core.errors import GlassboxError, OptionError
from glassbox.guard import EXIT_USER_ERROR, Interrupted, show_error

if TYPE_CHECKING:
    from rich.console import Console

# bounds of numeric options: a value past them is refused before any work (issue 13)
MAX_SEED = 2**32 - 1  # numpy's and scikit-learn's largest seed
MAX_REPEATS = 1000  # repeats of the folds; each is a full cross-validation
MAX_JOBS = 256  # processes side by side; more than the fits to run would only wait
MAX_TOP = 1000  # reasons per row; a model has one reason at most per feature
# the same words for --jobs in every command of both apps
MAX_HELP_WIDTH = 200  # columns of help text at most, however wide the terminal
JOBS_HELP = "Processes working side by side; 1 starts none."
DROP_HELP = "Drop rows with no target value (counted on screen) instead of refusing the file."
Force = Annotated[bool, typer.Option(
    "--force", help="Overwrite an existing output file of another kind (a CSV, a model "
                    "file...). An input is never overwritten.")]
# arguments and options several commands share, declared once
ModelArgument = Annotated[Path, typer.Argument(metavar="MODEL", help="Model file (JSON).")]
TrainingData = Annotated[Path, typer.Argument(
    metavar="DATA", help="CSV or Parquet file with the target.")]
SchemaOption = Annotated[Path, typer.Option(metavar="FILE", help="Schema TOML file.")]


def stdout_console() -> Console:
    from rich.console import Console

    return Console(highlight=False)


def stderr_console() -> Console:
    from rich.console import Console

    return Console(stderr=True, highlight=False)


_CONSOLE: dict[str, bool] = {"run": False}  # true during a console run (console_run)


@contextlib.contextmanager
def console_run() -> Iterator[None]:
    """Around each console entry point's run (a process that ends with its command).

    Start-up makes some 10^5 long-lived objects and almost no garbage, yet Python's cycle
    collector scans them again and again as they are made: 30-50 ms of the 0.5 s that a
    one-row command takes. So the collector pauses while the options are read; `friendly`
    resumes it before a command's body, after freezing what was loaded (`gc.freeze`: never
    scanned again), and `loading()` pauses it again around a command's own imports. Only a
    console run does this: a library call or a test in a long-lived process is left alone,
    and the collector is back on when the run ends, however it ends."""
    _CONSOLE["run"] = True
    gc.disable()
    try:
        yield
    finally:
        _CONSOLE["run"] = False
        gc.enable()


def _resume_collector() -> None:
    if _CONSOLE["run"] and not gc.isenabled():
        gc.freeze()
        gc.enable()


@contextlib.contextmanager
def loading() -> Iterator[None]:
    """Around a command's imports: in a console run, the cycle collector pauses while they
    load, then what they loaded is frozen and collection resumes (see `console_run`)."""
    if not _CONSOLE["run"]:
        yield
        return
    gc.disable()
    try:
        yield
    finally:
        _resume_collector()


def friendly(command: Callable[..., Any]) -> Callable[..., Any]:
    """Turn the project's errors into one line and exit status 2; show warnings briefly.

    Anything else goes on to the last line of defence (`glassbox.guard.run_guarded`)."""
    @functools.wraps(command)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            try:
                _resume_collector()
                result = command(*args, **kwargs)
            except GlassboxError as exc:
                _show_warnings(caught)
                show_error(str(exc))
                raise typer.Exit(EXIT_USER_ERROR) from None
            except KeyboardInterrupt as exc:
                _show_warnings(caught)
                raise Interrupted(*exc.args) from None
            except BaseException:
                _show_warnings(caught)
                raise
        _show_warnings(caught)
        return result
    return wrapper


def _show_warnings(caught: list[warnings.WarningMessage]) -> None:
    seen = set()
    for item in caught:
        if not issubclass(item.category, UserWarning) or str(item.message) in seen:
            continue
        seen.add(str(item.message))
        from glassbox.publishing.render import WarningView, warning_text

        console = stderr_console()
        if console.is_terminal:  # a person reads it: folded with a hanging indent
            console.print(WarningView(str(item.message)))
        else:  # a pipe or a log: one line per warning, for grep
            console.print(warning_text(str(item.message)), soft_wrap=True)


def emit(text: str | bytes | Iterable[bytes], out: Path | None, what: str) -> None:
    """Text (or UTF-8 text in parts) to a file (atomically) or to standard output."""
    if out is None:
        if isinstance(text, bytes):
            text = text.decode()
        sys.stdout.writelines([text] if isinstance(text, str) else (p.decode() for p in text))
        return
    from glassbox.core.files import write_atomic

    write_atomic(out, text)
    stderr_console().print(f"wrote {what} to {out}", highlight=False)


def version_option(program: str, version: str) -> Any:
    """The eager `--version` option of an app's callback: prints `PROGRAM VERSION`."""
    def show(value: bool) -> None:
        if value:
            print(f"{program} {version}")
            raise typer.Exit()

    return typer.Option("--version", callback=show, is_eager=True,
                        help="Print the version and exit.")


def parse_options(pairs: list[str]) -> dict[str, Any]:
    """NAME=VALUE pairs; values read as JSON when they parse (numbers, lists, true)."""
    options: dict[str, Any] = {}
    for pair in pairs:
        name, equals, text = pair.partition("=")
        if not equals or not name.strip():
            raise OptionError(f"--option takes NAME=VALUE, not {pair!r}")
        try:
            value = json.loads(text)
        except json.JSONDecodeError:
            value = text
        options[name.strip().replace("-", "_")] = value
    return options


@contextlib.contextmanager
def progress_note(message: str) -> Iterator[None]:
    """A spinner on standard error while a long step runs (nothing when not a terminal)."""
    console = stderr_console()
    if not console.is_terminal:
        yield
        return
    with console.status(message):
        yield


class Command(TyperCommand):
    """A command whose help names its arguments by their placeholder alone (DATA, not
    `DATA <path>`), writes them plainly in the usage line (`MODEL [DATA]`), and ends with
    its example line (the epilog)."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        # help as wide as the terminal (to 200 columns), not click's 80
        self.context_settings.setdefault("max_content_width", MAX_HELP_WIDTH)
        for param in self.params:
            if isinstance(param, TyperArgument):
                param.display_type_rich = _no_type  # type: ignore[method-assign]

    def format_help(self, ctx: Any, formatter: Any) -> None:
        with whole_words():
            super().format_help(ctx, formatter)

    def get_short_help_str(self, limit: int = 45) -> str:
        """The first paragraph of the help, whole: the listing wraps it, never cuts it."""
        text = self.short_help or self.help or ""
        return " ".join(text.split("\n\n")[0].split())

    def collect_usage_pieces(self, ctx: click.Context) -> list[str]:
        pieces = [self.options_metavar] if self.options_metavar else []
        for param in self.get_params(ctx):
            if isinstance(param, TyperArgument):
                name = param.display_name_raw + ("..." if param.nargs != 1 else "")
                pieces.append(name if param.required else f"[{name}]")
            else:
                pieces.extend(param.get_usage_pieces(ctx))
        return pieces


class Group(TyperGroup):
    """The app itself: its help wraps at spaces only, like its commands', and lists the
    commands named in `order` first, in that order (the rest in the order registered)."""

    order: tuple[str, ...] = ()

    def list_commands(self, ctx: click.Context) -> list[str]:
        rank = {name: position for position, name in enumerate(self.order)}
        return sorted(super().list_commands(ctx), key=lambda name: rank.get(name, len(rank)))

    def format_help(self, ctx: Any, formatter: Any) -> None:
        with whole_words():
            super().format_help(ctx, formatter)


@contextlib.contextmanager
def whole_words() -> Iterator[None]:
    """While help is laid out, lines break at spaces only, never inside a hyphenated word
    (click's wrapper breaks after hyphens: "self-" / "contained")."""
    from typer._click import _textwrap

    plain = _textwrap.TextWrapper

    class Wrapper(plain):  # type: ignore[misc, valid-type]
        def __init__(self, *args: Any, **kwargs: Any) -> None:
            super().__init__(*args, **{**kwargs, "break_on_hyphens": False})

    _textwrap.TextWrapper = Wrapper
    try:
        yield
    finally:
        _textwrap.TextWrapper = plain


def _no_type(ctx: click.Context | None = None) -> None:
    return None


def example(line: str) -> str:
    """The last line of a command's help: one command line to copy."""
    return f"Example: {line}"


def choices(names: Iterable[str]) -> str:
    """The placeholder of an option with a few choices: `[a|b|c]`."""
    return "[" + "|".join(names) + "]"
