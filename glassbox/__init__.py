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
from glassbox.inference import infer_schema  # noqa: E402
from glassbox.schema import Schema, load_schema, read_table  # noqa: E402


def __getattr__(name: str) -> object:
    """`fit_model` loads the fitting code (scikit-learn, pygam) on first use only, so
    scoring and planning processes start quickly."""
    if name == "fit_model":
        from glassbox.fitting import fit_model

        return fit_model
    raise AttributeError(f"module 'glassbox' has no attribute {name!r}")


__all__ = [
    "AdditiveModel", "CurveTerm", "LevelsTerm", "StepTerm", "Schema",
    "DataError", "GlassboxError", "ModelFileError", "OptionError", "SchemaError",
    "UnseenLevelWarning", "fit_model", "infer_schema", "load", "load_schema", "read_table",
    "save", "__version__",
]
