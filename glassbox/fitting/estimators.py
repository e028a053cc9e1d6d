"""scikit-learn estimators that fit any family and keep the `AdditiveModel` in `model_`.

They follow scikit-learn's contract (configuration in `__init__`, learning in
`fit`, learned state in attributes ending in `_`), so `clone`, `Pipeline` and
`GridSearchCV` work. Arrays get columns named x0, x1, ...; a DataFrame keeps its
column names and, with a `schema` (a `Schema` or the path of a TOML file), everything the
schema declares: the fit takes the same path as `glassbox fit`, so the model, its reasons
and its points card are the ones the command would make from the same rows. NaN in X (None
in a category column) is a missing value: learned in fitting, scored through each term's
missing-value entry, refused where the training data had none.
"""

from __future__ import annotations

import os
from typing import Any

import numpy as np
import pandas as pd
from scipy.special import expit
from sklearn.base import BaseEstimator, ClassifierMixin, RegressorMixin
from sklearn.utils.multiclass import check_classification_targets
from sklearn.utils.validation import check_is_fitted, validate_data

from glassbox.core.additive import AdditiveModel
from glassbox.core.errors import SchemaError
from glassbox.core.inference import infer_kind
from glassbox.core.schema import FeatureSpec, Schema, TargetSpec, encode_target, load_schema
from glassbox.fitting.fit import fit_model

TARGET = "__target__"


class _AdditiveEstimator(BaseEstimator):
    """What the classifier and the regressor share: turning X into a frame, fitting."""

    _task = "classification"

    def __init__(self, family: str = "sparse", max_features: int | None = None,
                 schema: Schema | str | os.PathLike | None = None,
                 options: dict[str, Any] | None = None):
        self.family = family
        self.max_features = max_features
        self.schema = schema
        self.options = options

    def _frame(self, X: Any, y: Any = None, *, reset: bool) -> tuple[pd.DataFrame, Any]:
        if reset and y is None:
            raise ValueError(f"{type(self).__name__} requires y to be passed, but the target y "
                             "is None")
        if isinstance(X, pd.DataFrame):
            validate_data(self, X, skip_check_array=True, reset=reset)
            frame = X.copy()
            frame.columns = [str(c) for c in frame.columns]
            if y is not None:
                y = np.asarray(y)
            return frame, y
        # NaN is a missing value (scored through each term's missing-value entry); an
        # infinite value is still refused
        if y is None:
            array = validate_data(self, X, reset=reset, dtype="numeric",
                                  ensure_all_finite="allow-nan")
        else:
            array, y = validate_data(self, X, y, reset=reset, dtype="numeric",
                                     ensure_all_finite="allow-nan",
                                     y_numeric=self._task == "regression")
        if reset and array.shape[0] < 2:
            raise ValueError(f"{type(self).__name__} needs at least 2 rows to fit; got "
                             "1 sample")
        names = [f"x{i}" for i in range(array.shape[1])]
        return pd.DataFrame(array, columns=names), y

    def _schema(self, frame: pd.DataFrame) -> Schema:
        """The schema to fit with: a given one exactly as `glassbox fit` reads it (target
        column, positive label, `better`, id, every feature's declarations), or, without
        one, kinds inferred from X and a target named __target__ whose positive label is 1
        and whose higher scores count as better (`better = "higher"`, stated here: arrays
        carry no words to say otherwise; pass a schema to say "lower")."""
        if self.schema is None:
            features = tuple(FeatureSpec(name, infer_kind(frame[name])) for name in frame)
            return Schema(TargetSpec(TARGET, self._task, 1 if self._task == "classification"
                                     else None, better="higher"), features)
        schema = self.schema if isinstance(self.schema, Schema) else load_schema(self.schema)
        if schema.target.task != self._task:
            where = f"schema {schema.source}" if schema.source else "the schema"
            raise SchemaError(f"{where} declares a {schema.target.task} target, but "
                              f"{type(self).__name__} fits {self._task}")
        return schema

    def _fit(self, frame: pd.DataFrame, target: np.ndarray) -> Schema:
        """Fit through `fit_model`, the path `glassbox fit` takes; return the schema used."""
        schema = self._schema(frame)
        options = dict(self.options or {})
        if self.max_features is not None:
            options["max_features"] = self.max_features
        data = frame.assign(**{schema.target.column: target})
        self.model_: AdditiveModel = fit_model(data, schema, self.family, **options)
        return schema

    def _score(self, X: Any) -> np.ndarray:
        check_is_fitted(self, "model_")
        frame, _ = self._frame(X, reset=False)
        return self.model_.score(frame)

    def __sklearn_tags__(self):  # noqa: D105
        tags = super().__sklearn_tags__()
        tags.input_tags.allow_nan = True
        return tags


class AdditiveClassifier(ClassifierMixin, _AdditiveEstimator):
    """Binary classifier on the logit scale; `model_` is its `AdditiveModel`."""

    _task = "classification"

    def fit(self, X: Any, y: Any) -> AdditiveClassifier:
        frame, y = self._frame(X, y, reset=True)
        check_classification_targets(y)
        self.classes_ = np.unique(y)
        if len(self.classes_) != 2:
            found = "one class" if len(self.classes_) == 1 else f"{len(self.classes_)} classes"
            raise ValueError("Only binary classification is supported: AdditiveClassifier "
                             f"needs exactly two classes in y, found {found}")
        if self.schema is None:
            self._fit(frame, (y == self.classes_[1]).astype(int))
            self.positive_class_ = self.classes_[1]
        else:
            schema = self._fit(frame, y)
            # the label the model gives the probability of, decided as fit_model decided it
            positive = encode_target(pd.Series(y), schema, "y").astype(bool)
            self.positive_class_ = y[np.flatnonzero(positive)[0]]
        return self

    def decision_function(self, X: Any) -> np.ndarray:
        """The log-odds of classes_[1] (scikit-learn's convention): the model's score, or
        its negative when the schema's positive label is classes_[0]."""
        score = self._score(X)
        return score if self.positive_class_ == self.classes_[1] else -score

    def predict_proba(self, X: Any) -> np.ndarray:
        positive = expit(self.decision_function(X))
        return np.column_stack([1.0 - positive, positive])

    def predict(self, X: Any) -> np.ndarray:
        check_is_fitted(self, "model_")
        return self.classes_[(self.decision_function(X) > 0).astype(int)]

    def __sklearn_tags__(self):  # noqa: D105
        tags = super().__sklearn_tags__()
        tags.classifier_tags.multi_class = False
        return tags


class AdditiveRegressor(RegressorMixin, _AdditiveEstimator):
    """Regressor on the identity scale; `model_` is its `AdditiveModel`."""

    _task = "regression"

    def fit(self, X: Any, y: Any) -> AdditiveRegressor:
        frame, y = self._frame(X, y, reset=True)
        self._fit(frame, np.asarray(y, dtype=float))
        return self

    def predict(self, X: Any) -> np.ndarray:
        return self._score(X)
