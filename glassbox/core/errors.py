"""The project's own exception and warning types.

Every error a user can cause (a bad file, column, row or option) raises one of
these with a message that names the file, the column or the row; the CLI turns
them into one line and exit status 2.
"""

from __future__ import annotations


class GlassboxError(Exception):
    """Base class for errors a user can cause and fix."""


class DataError(GlassboxError, ValueError):
    """A data file or frame is unreadable, incomplete or malformed."""


class SchemaError(GlassboxError, ValueError):
    """A schema file is unreadable or contradicts itself or the data."""


class ModelFileError(GlassboxError, ValueError):
    """A model file is missing, damaged, edited or of an unknown version."""


class OptionError(GlassboxError, ValueError):
    """An option or parameter has a value the tool cannot use."""


class UnseenLevelWarning(UserWarning):
    """A category level never seen in training was scored with the unseen-level value."""



SHOWN_CHARACTERS = 60  # a value quoted in a message is cut here, and the message says so


def value_text(value: object) -> str:
    """A value as a message shows it: numbers plainly (never a numpy repr such as
    `np.float64(2.5)`), text quoted, and text longer than SHOWN_CHARACTERS cut with a note
    of its full length."""
    item = getattr(value, "item", None)
    if callable(item) and getattr(value, "shape", None) == ():  # a numpy scalar
        value = item()
    if isinstance(value, bool) or value is None:
        return str(value).lower() if value is not None else "null"
    if isinstance(value, int | float):
        return repr(value)
    if isinstance(value, list | tuple):
        return "[" + ", ".join(value_text(v) for v in value) + "]"
    text = str(value)
    if len(text) > SHOWN_CHARACTERS:
        return f"{text[:SHOWN_CHARACTERS]!r}... ({len(text):,} characters)"
    return repr(text)
