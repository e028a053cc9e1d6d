"""glassbox: glass-box additive models whose term tables are the model."""

from __future__ import annotations

__version__ = "0.1.0"

from glassbox.additive import AdditiveModel, CurveTerm, LevelsTerm, StepTerm  # noqa: E402
from glassbox.artifact import load, save  # noqa: E402
from glassbox.errors import (  # noqa: E402
    DataError,
    GlassboxError,
    ModelFileError,
    OptionError,
    SchemaError,
    UnseenLevelWarning,
)
from glassbox.fitting import fit_model  # noqa: E402
from glassbox.schema import Schema, infer_schema, load_schema, read_table  # noqa: E402

__all__ = [
    "AdditiveModel", "CurveTerm", "LevelsTerm", "StepTerm", "Schema",
    "DataError", "GlassboxError", "ModelFileError", "OptionError", "SchemaError",
    "UnseenLevelWarning", "fit_model", "infer_schema", "load", "load_schema", "read_table",
    "save", "__version__",
]
