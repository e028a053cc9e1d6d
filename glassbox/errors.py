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

