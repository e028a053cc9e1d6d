"""What the words of a data file suggest, for an inferred schema to show the user.

Which way the score is better for the person (from the target's name and its positive
label), which columns look like protected characteristics, and which deserve a second
look. Each guess comes with the words behind it, written as a comment in the schema so
the user confirms or corrects it; nothing here decides silently what a fit will use.
"""

from __future__ import annotations

import re
from collections.abc import Iterable, Mapping
from dataclasses import dataclass
from typing import Any

TRUE_WORDS = frozenset({"1", "yes", "y", "true", "t"})
FALSE_WORDS = frozenset({"0", "no", "n", "false", "f"})

# Words that name an outcome bad for the person a decision is about (lower is better)
# and words that name a good one (higher is better). Trade words of credit and
# marketplaces (common practice, no source). Several words in a row are one phrase.
BAD_OUTCOMES = (
    "bad", "default", "defaults", "defaulted", "defaulter", "delinquent", "delinquency",
    "delinq", "charged off", "charge off", "chargeoff", "chargedoff", "written off",
    "write off", "writeoff", "past due", "overdue", "arrears", "late", "churn", "churned",
    "churner", "fraud", "fraudulent", "deny", "denied", "denial", "reject", "rejected",
    "rejection", "decline", "declined", "refused", "bankrupt", "bankruptcy", "loss",
    "fail", "failed", "failure", "lapse", "lapsed", "foreclosure", "foreclosed",
)
GOOD_OUTCOMES = (
    "good", "approve", "approved", "approval", "accept", "accepted", "acceptance",
    "repaid", "repay", "paid", "paid off", "payoff", "top", "success", "successful",
    "granted", "funded", "performing", "rating",
)
NEGATIONS = frozenset({"not", "no", "non", "never", "without"})

# Column names that suggest a protected characteristic (race, colour, religion,
# national origin, sex, marital status, age, disability, pregnancy, citizenship, receipt
# of public assistance: the bases of the US Equal Credit Opportunity Act, 15 U.S.C.
# 1691(a), and the Fair Housing Act, 42 U.S.C. 3604, from memory). A hint of four or
# more letters also matches words it begins ("ethnic" finds "ethnicity"); a shorter one
# only a whole word of the name.
PROTECTED_HINTS = (
    "age", "ages", "aged", "sex", "gender", "race", "racial", "ethnic", "religio", "creed", "caste",
    "marital", "nationality", "disab", "handicap", "pregnan", "maternity", "orientation",
    "colour", "color_of_skin", "citizen", "immigra", "birth", "dob", "yob", "hispan",
    "latino", "latina", "afam", "african", "caucasian", "minority", "welfare",
    "national_origin", "public_assistance",
)
# Words that are a protected characteristic only when they are the whole name (with
# filler such as "is_" or "applicant_" around them): "white" alone is a race indicator in
# public mortgage files, "white_goods" is not (common practice, no source).
PROTECTED_NAMES = frozenset({
    "white", "black", "asian", "nonwhite", "male", "female", "man", "woman", "men", "women",
    "married", "single", "divorced", "widowed", "widow", "separated", "old", "young",
    "elderly",
})
FILLER = frozenset({"is", "applicant", "app", "borrower", "owner", "co", "coapp", "flag",
                    "ind", "indicator", "dummy", "d", "yn", "main", "primary"})
# Names that are not a protected characteristic but may describe the person or stand in
# for one (family status, a stage of life, a place or a name): shown for the user to
# decide (common practice, no source).
SUSPICIOUS_HINTS = {
    "dependents": "family", "dependants": "family", "depend": "family", "dep": "family",
    "children": "family", "child": "family", "kids": "family", "kid": "family",
    "family": "family", "familial": "family", "household": "family", "spouse": "family",
    "partner": "family", "student": "a stage of life", "retired": "a stage of life",
    "retiree": "a stage of life", "pension": "a stage of life",
    "pensioner": "a stage of life", "senior": "a stage of life", "old": "an age",
    "young": "an age", "elder": "an age", "generation": "an age", "veteran": "service",
    "military": "service", "zip": "a place", "zipcode": "a place", "postcode": "a place",
    "postal": "a place", "tract": "a place", "census": "a place",
    "neighbourhood": "a place", "neighborhood": "a place", "surname": "a name",
    "firstname": "a name", "lastname": "a name", "name": "a name", "language": "a language",
}
SHORT_FLAG = 6  # letters: a yes/no column with a name this short is shown for a check


@dataclass(frozen=True)
class Note:
    """One thing inference saw about a column (`topic`: "better", "missing", "protected"
    or "check"), in words for a schema comment and the screen."""

    column: str
    topic: str
    text: str


@dataclass(frozen=True)
class BetterGuess:
    """`better` as the words say it ("lower", "higher", or None when they do not), and
    why, in words for a schema comment."""

    better: str | None
    why: str


def words(name: str) -> list[str]:
    """A name's words, lower case: split at anything not a letter or digit and at
    camelCase joins ("isDefault_12m" gives is, default, 12, m)."""
    found = re.findall(r"[A-Z]+(?![a-z])|[A-Z]?[a-z]+|\d+", str(name))
    return [word.lower() for word in found]


def _outcome_sign(tokens: list[str]) -> int | None:
    """+1 if the words name a good outcome, -1 a bad one, None if neither or both. A
    negation ("not", "non-") turns the outcome round."""
    tokens = list(tokens)
    negated = False
    for i, token in enumerate(tokens):
        if token in NEGATIONS:
            negated = not negated
        elif token.startswith("non") and len(token) > 5:  # "nondefault"
            tokens[i] = token[3:]
            negated = not negated
    text = f" {' '.join(tokens)} "
    bad = any(f" {phrase} " in text for phrase in BAD_OUTCOMES)
    good = any(f" {phrase} " in text for phrase in GOOD_OUTCOMES)
    if bad == good:
        return None
    sign = 1 if good else -1
    return -sign if negated else sign


def guess_better(target: str, positive: str | None, task: str) -> BetterGuess:
    """Which way the score is better for the person, from the words of the target's name
    and (classification) its positive label `positive` (as text).

    A label that names an outcome decides ("bad", "Charged Off", "approved"); a yes-like
    label (1, yes, true) hands the question to the column's name ("default" with 1: a
    default is bad, so lower is better) and a no-like label turns that name's answer
    round. A regression score is taken as better when higher unless its name names a
    bad outcome ("loss"): usual for ratings and amounts (common practice, no source).
    """
    name_sign = _outcome_sign(words(target))
    if task != "classification":
        if name_sign == -1:
            return BetterGuess("lower", f"better = \"lower\": the target's name {target!r} "
                                        "names a bad outcome for the person: check")
        return BetterGuess("higher", "better = \"higher\" assumed: a higher predicted value "
                                     "is better for the person, as for a rating; write "
                                     "\"lower\" if not")
    label = str(positive).strip()
    lowered = label.lower()
    if lowered in TRUE_WORDS or lowered in FALSE_WORDS:
        sign = name_sign if lowered in TRUE_WORDS or name_sign is None else -name_sign
        source = f"the target's name {target!r} with positive label {label!r}"
    else:
        sign = _outcome_sign(words(label))
        source = f"the positive label {label!r}"
    if sign is None:
        return BetterGuess(None, "better = \"?\" must be replaced before fitting: "
                                 + better_needed(target, label))
    outcome = "a good" if sign > 0 else "a bad"
    better = "higher" if sign > 0 else "lower"
    return BetterGuess(better, f"better = \"{better}\": {source} names {outcome} outcome "
                               "for the person: check")


def better_needed(target: str, positive: str | None) -> str:
    """What to write when `better` is not stated."""
    if positive is None:
        return (f"write better = \"higher\" if a higher {target!r} is better for the person "
                "(a rating), or better = \"lower\" if a lower one is (a loss)")
    return (f"write better = \"lower\" if the positive label {positive!r} of {target!r} is "
            "the bad outcome for the person (a default, a decline), or better = \"higher\" "
            "if it is the good one (repaid, approved)")


def protected_hint(name: str) -> str | None:
    """The word of a column's name that suggests a protected characteristic, if any."""
    parts = words(name)
    joined = "_".join(parts)
    for hint in PROTECTED_HINTS:
        if "_" in hint:
            if f"_{hint}_" in f"_{joined}_":
                return hint
            continue
        for part in parts:
            if part == hint or (len(hint) > 3 and part.startswith(hint)):
                return part
    core = [part for part in parts if part not in FILLER]
    if len(core) == 1 and core[0] in PROTECTED_NAMES:
        return core[0]
    return None


def suspicious_reason(name: str, flag: bool) -> str | None:
    """Why a column not guessed protected deserves a look, or None: a name that may
    describe the person or stand in for a protected characteristic, or a yes/no column
    with a name too short to say what it is."""
    for part in words(name):
        if part in SUSPICIOUS_HINTS:
            return (f"the word {part!r} may describe the person ({SUSPICIOUS_HINTS[part]}) or "
                    "stand in for a protected characteristic")
    letters = sum(ch.isalpha() for ch in str(name))
    if flag and letters <= SHORT_FLAG:
        return ("a yes/no column with a short name: if it describes the person (race, sex, "
                "age, family), mark it protected")
    return None


def column_notes(features: Iterable[Any], missing: Mapping[str, int], rows: int) -> list[Note]:
    """Per feature (a `FeatureSpec`): how many of its `rows` values are `missing` and the
    rule that applies, whether it was guessed protected (and from which word), or why it
    deserves a look."""
    notes = []
    for spec in features:
        count = missing.get(spec.name, 0)
        if count:
            rule = ("fitting refuses a column with no values: drop it or set ignore = true"
                    if count == rows else f"missing = \"{spec.missing}\", a value for missing "
                    "is learned from the data")
            share = "under 0.1%" if count / rows < 0.001 else f"{count / rows:.1%}"
            notes.append(Note(spec.name, "missing",
                              f"{count:,} of {rows:,} values missing ({share}): {rule}"))
        hint = protected_hint(spec.name)
        if spec.protected and hint:
            notes.append(Note(spec.name, "protected", f"protected: guessed from the word "
                              f"{hint!r} in its name (never a model input): check"))
        elif not spec.protected:
            why = suspicious_reason(spec.name, spec.kind == "flag")
            if why:
                notes.append(Note(spec.name, "check", f"check: {why}"))
    return notes


def summary(notes: Iterable[Note]) -> list[str]:
    """What inference saw, one line per note (for the screen): missing counts, the
    `better` it wrote and why, guessed-protected columns and columns to check."""
    notes = list(notes)
    found = [f"{note.column}: {note.text}" for note in notes]
    if notes and not any(note.topic == "missing" for note in notes):
        found.append("no feature column has a missing value")
    return found
