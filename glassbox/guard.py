"""The commands' last line of defence: every way a run can end, as one line and an exit status.

A user's error (`GlassboxError`, or a usage error found while the options are read) prints
`error: ...` and exits 2; an interrupt prints one line and exits 130; anything else is our
fault: one line asking for a report and exit 1, with the traceback only when the environment
variable GLASSBOX_TRACEBACK is 1. Both commands (`glassbox`, `recourse`) run through here.
"""

from __future__ import annotations

import os
import sys
import traceback
from collections.abc import Sequence

import typer

from glassbox.core.errors import GlassboxError

EXIT_USER_ERROR = 2
EXIT_INTERNAL = 1
EXIT_INTERRUPTED = 130
TRACEBACK_VARIABLE = "GLASSBOX_TRACEBACK"
INTERRUPTED = "interrupted"


class Interrupted(BaseException):
    """A KeyboardInterrupt carried past typer (which would turn it into a silent status 130)
    to `run_guarded`, with its words if it had any."""


def one_line(message: str) -> str:
    """A message on one line: its lines joined, blank ones dropped."""
    return " / ".join(line.strip() for line in str(message).splitlines() if line.strip())


def show_error(message: str) -> None:
    """`error: MESSAGE` on standard error, on one line however wide the terminal."""
    from rich.console import Console

    from glassbox.publishing.render import error_text

    Console(stderr=True, highlight=False).print(error_text(one_line(message)), soft_wrap=True)


def show_line(message: str) -> None:
    from rich.console import Console
    from rich.text import Text

    Console(stderr=True, highlight=False).print(Text(one_line(message)), soft_wrap=True)


def run_guarded(app: typer.Typer, args: Sequence[str] | None = None,
                prog_name: str | None = None) -> int:
    """Run a typer app on `args` (default: the command line) and return its exit status.

    Never raises: the caller passes the status to `sys.exit`. A KeyboardInterrupt raised
    with a message (`KeyboardInterrupt("interrupted; rerun with --resume")`) prints that
    message instead of the plain "interrupted"."""
    command = typer.main.get_command(app)
    try:
        status = command.main(args=None if args is None else list(args), prog_name=prog_name,
                              standalone_mode=False)
    except GlassboxError as exc:  # raised outside a command body (a callback, an option)
        show_error(str(exc))
        return EXIT_USER_ERROR
    except typer.TyperException as exc:  # usage errors: an unknown option, a bad number...
        if exc.format_message():  # (no words: the help was shown for a bare command)
            show_error(_usage_message(exc))
        code = getattr(exc, "exit_code", EXIT_USER_ERROR)
        return code if isinstance(code, int) and code != 0 else EXIT_USER_ERROR
    except (KeyboardInterrupt, Interrupted, typer.Abort) as exc:
        show_line(_interrupt_message(exc))
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        return _pipe_closed()
    except SystemExit as exc:
        return _system_exit_status(exc)
    except Exception as exc:
        return internal_error(exc)
    if status == EXIT_INTERRUPTED:  # typer turns an interrupt into this status, silently
        show_line(INTERRUPTED)
    return status if isinstance(status, int) else 0


def internal_error(exc: BaseException) -> int:
    """One line asking for a report; the traceback too when GLASSBOX_TRACEBACK=1."""
    if os.environ.get(TRACEBACK_VARIABLE) == "1":
        traceback.print_exception(exc, file=sys.stderr)
    message = one_line(str(exc)) or "(no message)"
    hint = "" if os.environ.get(TRACEBACK_VARIABLE) == "1" else (
        f" (set {TRACEBACK_VARIABLE}=1 to see where)")
    show_line(f"internal error, please report: {type(exc).__name__}: {message}{hint}")
    return EXIT_INTERNAL


def _usage_message(exc: typer.TyperException) -> str:
    message = exc.format_message()
    context = getattr(exc, "ctx", None)
    if context is not None and getattr(context, "command_path", None):
        message += f" (see '{context.command_path} --help')"
    return message


def _interrupt_message(exc: BaseException) -> str:
    given = one_line(str(exc)) if isinstance(exc, KeyboardInterrupt | Interrupted) else ""
    return given or INTERRUPTED


def _system_exit_status(exc: SystemExit) -> int:
    code = exc.code
    if code is None:
        return 0
    if isinstance(code, int):
        return code
    show_line(str(code))  # sys.exit("text"): the text and status 1, as Python has it
    return EXIT_INTERNAL


def _pipe_closed() -> int:
    """Standard output closed early (`glassbox score ... | head`): stop quietly."""
    try:
        sys.stdout = open(os.devnull, "w")  # noqa: SIM115 - the interpreter's final flush
    except OSError:
        pass
    return EXIT_INTERNAL
