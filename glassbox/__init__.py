"""glassbox: glass-box additive models whose term tables are the model."""

from __future__ import annotations

__version__ = "0.1.0"

# every public name loads on first use (`from glassbox import fit_model` still works), so that
# `glassbox --help` loads neither pandas nor numpy and scoring loads no fitting library:
# name -> the module that holds it
LATER = {
    "AdditiveModel": "glassbox.core.additive",
    "CurveTerm": "glassbox.core.additive",
    "LevelsTerm": "glassbox.core.additive",
    "StepTerm": "glassbox.core.additive",
    "load": "glassbox.core.artifact",
    "save": "glassbox.core.artifact",
    "DataError": "glassbox.core.errors",
    "GlassboxError": "glassbox.core.errors",
    "ModelFileError": "glassbox.core.errors",
    "OptionError": "glassbox.core.errors",
    "SchemaError": "glassbox.core.errors",
    "UnseenLevelWarning": "glassbox.core.errors",
    "infer_schema": "glassbox.core.inference",
    "Schema": "glassbox.core.schema",
    "load_schema": "glassbox.core.schema",
    "read_table": "glassbox.core.schema",
    "fit_model": "glassbox.fitting.fit",
    "AdditiveClassifier": "glassbox.fitting.estimators",
    "AdditiveRegressor": "glassbox.fitting.estimators",
    "compare": "glassbox.fitting.compare",
    "score_table": "glassbox.core.scores",
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


__all__ = ["__version__", *LATER]


def __dir__() -> list[str]:
    return sorted({*globals(), *LATER})
