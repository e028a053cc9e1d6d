"""glassbox: glass-box additive models whose term tables are the model."""

from __future__ import annotations

__version__ = "0.1.0"

from glassbox.core.additive import AdditiveModel, CurveTerm, LevelsTerm, StepTerm  # noqa: E402
from glassbox.core.artifact import load, save  # noqa: E402
from glassbox.core.errors import (  # noqa: E402
    DataError,
    GlassboxError,
    ModelFileError,
    OptionError,
    SchemaError,
    UnseenLevelWarning,
)
from glassbox.core.inference import infer_schema  # noqa: E402
from glassbox.core.schema import Schema, load_schema, read_table  # noqa: E402

# heavier public names load on first use (fitting loads scikit-learn and pygam), so that
# scoring and planning processes start quickly: name -> the module that holds it
LATER = {
    "fit_model": "glassbox.fitting.fit",
    "AdditiveClassifier": "glassbox.fitting.estimators",
    "AdditiveRegressor": "glassbox.fitting.estimators",
    "compare": "glassbox.fitting.compare",
    "score_table": "glassbox.core.additive",
    "reasons_table": "glassbox.explaining.reasons",
    "shape_tables": "glassbox.explaining.shapes",
    "points_card": "glassbox.explaining.points",
    "score_points": "glassbox.explaining.points",
    "monitor": "glassbox.explaining.monitor",
    "model_changes": "glassbox.explaining.changes",
    "model_sql": "glassbox.publishing.sql_export",
    "card_sql": "glassbox.publishing.sql_export",
    "model_pmml": "glassbox.publishing.pmml_export",
    "card_pmml": "glassbox.publishing.pmml_export",
}
RENAMED = {"shape_tables": "all_tables"}  # the public name differs from the module's


def __getattr__(name: str) -> object:
    """The names of LATER, each imported from its module on first use."""
    if name in LATER:
        import importlib

        return getattr(importlib.import_module(LATER[name]), RENAMED.get(name, name))
    raise AttributeError(f"module 'glassbox' has no attribute {name!r}")


__all__ = [
    "AdditiveModel", "CurveTerm", "LevelsTerm", "StepTerm", "Schema",
    "DataError", "GlassboxError", "ModelFileError", "OptionError", "SchemaError",
    "UnseenLevelWarning", "infer_schema", "load", "load_schema", "read_table", "save",
    "__version__", *LATER,
]
