"""A model or a points card as a PMML 4.4 document (the open standard for exchanging models).

Every number and rule comes from `glassbox.publishing.export_tables` (the same tables the SQL export
copies), written with full precision (the repr of each double):

- the additive model is a RegressionModel over one derived field per term ("term:FEATURE"):
  Discretize for steps (right-closed bins: Interval closure "openClosed"), NormContinuous
  with LinearNorm pairs for curves (clamped at the end knots, as the tool does), MapValues
  for levels and flags over a "label:FEATURE" field (trimmed, a flag's words in lower case,
  missing for blank text and missing codes; pooled levels listed with the pooled level's
  value; `defaultValue` the unseen-level value), a missing input mapped (`mapMissingTo`)
  to the term's missing-value entry; the schema's fill is also the MiningField's
  `missingValueReplacement`. The score is the intercept plus each derived field (coefficient 1);
  classification adds the logistic link (normalizationMethod "logit").
- a pair ("term:A & B") is the sum over the entries j of the first feature's axis of
  "weight:A & B:j" (the entry's weight: 1 or 0 from a Discretize over its edges or a
  MapValues over its labels, or between knots a NormContinuous hat that is 1 at knot j and
  0 at its neighbours) times "row:A & B:j" (the table's row j along the second feature,
  written as that feature's own term is written).
- a points card is a Scorecard: one Characteristic per feature, one Attribute per bin or
  label, a first Attribute for a missing input and a last one (True) for an unseen level;
  reason codes are the feature names, ranked by points below each characteristic's best.

A row the tool refuses (a missing input with no entry, a flag word it does not know) gets
no number: the missing input is refused by the MiningField (missingValueTreatment
"returnInvalid"), and anything that only shows after trimming makes the term's value
missing, which leaves the scorer no result.
"""

from __future__ import annotations

import copy
import datetime as dt
import xml.etree.ElementTree as ET
from collections.abc import Iterable, Sequence
from typing import Any

from glassbox import __version__
from glassbox.core.additive import AdditiveModel
from glassbox.core.encoding import label_text
from glassbox.core.errors import OptionError
from glassbox.core.schema import Schema
from glassbox.explaining.cards import PointsCard
from glassbox.publishing.export_tables import (
    AxisTable,
    ColumnRule,
    ExportTable,
    PairExportTable,
    card_tables,
    model_tables,
    pair_tables,
    refuse_card_pairs,
)

NAMESPACE = "http://www.dmg.org/PMML-4_4"
BLANK = r"^\s*$"  # blank text (a Java regular expression), which the tool reads as missing
EPOCH_YEAR = 1970  # dates: days counted from 1 January of this year (dateDaysSinceYear)
CAUTION = ("Scores are model outputs, not decisions: a what-if of the model, not advice or "
           "a promise. Defer to local law, fair-lending rules and compliance.")


def model_pmml(model: AdditiveModel) -> str:
    """The additive model as a PMML regression over derived fields."""
    from glassbox.explaining.points import model_checksum

    tables = model_tables(model)
    pairs = pair_tables(model)
    target = model.schema.target
    classification = model.link == "logit"
    parts = [t.feature for t in tables] + [p.name for p in pairs]
    outputs = ["probability" if classification else "prediction", "score",
               *(f"contribution:{name}" for name in parts)]
    _check_names(tables, [target.column, *outputs, *_pair_fields(pairs)])
    root = _document(model_checksum(model), _model_notes(model, tables),
                     "a glassbox additive model")
    dictionary = _data_dictionary(root, [t.rule for t in tables])
    if classification:
        positive, other = _target_labels(target.positive)
        field = _el(dictionary, "DataField", name=target.column, optype="categorical",
                    dataType="string")
        for label in (positive, other):
            _el(field, "Value", value=label)
    else:
        _el(dictionary, "DataField", name=target.column, optype="continuous",
            dataType="double")
    _count_fields(dictionary)
    transforms = _el(root, "TransformationDictionary")
    terms = [_term_field(transforms, table) for table in tables]
    terms += [_pair_field(transforms, pair) for pair in pairs]
    regression = _el(root, "RegressionModel", modelName="glassbox additive model",
                     functionName="classification" if classification else "regression",
                     algorithmName="glassbox additive model", targetFieldName=target.column,
                     normalizationMethod="logit" if classification else "none")
    _mining_schema(regression, tables, target.column, model.schema)
    output = _el(regression, "Output")
    if classification:
        _el(output, "OutputField", name="probability", optype="continuous",
            dataType="double", feature="probability", value=positive)
    else:
        _el(output, "OutputField", name="prediction", optype="continuous",
            dataType="double", feature="predictedValue")
    score = _el(output, "OutputField", name="score", optype="continuous", dataType="double",
                feature="transformedValue")
    score.append(_sum([_constant(model.intercept), *(_ref(name) for name in terms)]))
    for part, name in zip(parts, terms, strict=True):
        contribution = _el(output, "OutputField", name=f"contribution:{part}",
                           optype="continuous", dataType="double",
                           feature="transformedValue")
        contribution.append(_ref(name))
    main = _el(regression, "RegressionTable", intercept=_number(model.intercept),
               **({"targetCategory": positive} if classification else {}))
    for name in terms:
        _el(main, "NumericPredictor", name=name, coefficient="1")
    if classification:
        _el(regression, "RegressionTable", intercept="0", targetCategory=other)
    return _text(root)


def card_pmml(card: PointsCard) -> str:
    """The points card as a PMML Scorecard (a card with pairs' points grids is refused:
    a Scorecard characteristic reads one field; see `refuse_card_pairs`)."""
    refuse_card_pairs(card, "the PMML export of a points card")
    tables = card_tables(card)
    _check_names(tables, ["total_points", *(f"reason_{k}" for k in range(1, len(tables) + 1))])
    root = _document(card.model_checksum, _card_notes(tables), "a glassbox points card")
    dictionary = _data_dictionary(root, [t.rule for t in tables])
    _el(dictionary, "DataField", name="total_points", optype="continuous", dataType="double")
    _count_fields(dictionary)
    # Reason codes, from memory of the standard's Scorecard text: with reasonCodeAlgorithm
    # "pointsBelow" each characteristic's difference is its baselineScore minus the row's
    # partial score, and reason codes are ranked by that difference, largest first. The
    # baseline is the characteristic's best points (baselineMethod "max"), written on each
    # Characteristic as the standard asks when the Scorecard has no baselineScore.
    scorecard = _el(root, "Scorecard", modelName="glassbox points card",
                    functionName="regression", algorithmName="glassbox points card",
                    initialScore=str(card.base_points), useReasonCodes="true",
                    reasonCodeAlgorithm="pointsBelow", baselineMethod="max")
    _mining_schema(scorecard, tables, "total_points", card.schema)
    output = _el(scorecard, "Output")
    _el(output, "OutputField", name="total_points", optype="continuous", dataType="double",
        feature="predictedValue")
    for rank in range(1, len(tables) + 1):
        _el(output, "OutputField", name=f"reason_{rank}", optype="categorical",
            dataType="string", feature="reasonCode", rank=str(rank))
    derived = [t for t in tables if t.shape == "levels" or t.rule.days_before is not None]
    if derived:
        local = _el(scorecard, "LocalTransformations")
        for table in derived:
            (_label_field if table.shape == "levels" else _days_field)(local, table)
    characteristics = _el(scorecard, "Characteristics")
    for table in tables:
        _characteristic(characteristics, table)
    return _text(root)


# -- the document's frame ------------------------------------------------------------------

def _el(parent: ET.Element, tag: str, **attributes: str) -> ET.Element:
    return ET.SubElement(parent, tag, attributes)


def _number(value: float) -> str:
    """A double with full precision (its repr), whole numbers without a fraction."""
    value = float(value)
    return str(int(value)) if value.is_integer() and abs(value) < 2**53 else repr(value)


def _check_names(tables: Sequence[ExportTable], outputs: Sequence[str]) -> None:
    """A feature may not share its name with a field the document adds (PMML has one name
    space for the fields of a model)."""
    derived = [f"{kind}:{t.feature}" for t in tables for kind in ("term", "label", "days")]
    taken = sorted({t.feature for t in tables} & {*outputs, *derived})
    if taken:
        raise OptionError(f"feature '{taken[0]}' has the name of a field the PMML export "
                          "writes; rename the column (and the schema's feature) to export it")


def _document(checksum: str | None, notes: list[str], description: str) -> ET.Element:
    root = ET.Element("PMML", {"xmlns": NAMESPACE, "version": "4.4"})
    header = _el(root, "Header", description=description)
    _el(header, "Application", name="glassbox", version=__version__)
    annotation = _el(header, "Annotation")
    annotation.text = CAUTION
    if checksum:
        _el(header, "Annotation").text = f"model checksum {checksum}"
    for note in notes:
        _el(header, "Annotation").text = note
    return root


def _text(root: ET.Element) -> str:
    ET.indent(root, space=" ")
    body = ET.tostring(root, encoding="unicode", short_empty_elements=True)
    return '<?xml version="1.0" encoding="UTF-8"?>\n' + body + "\n"


def _target_labels(positive: Any) -> tuple[str, str]:
    """The positive label and a name for every other value of the target (the model file
    records only the positive label: the tool reads any other value as negative)."""
    label = label_text(positive)
    return label, f"not {label}"


def _model_notes(model: AdditiveModel, tables: Sequence[ExportTable]) -> list[str]:
    notes = _input_notes(tables)
    if model.link == "logit":
        notes.append("probability = 1 / (1 + exp(-score)), the score being the intercept "
                     "plus each term's value; a scorer's exp may differ from the tool's in "
                     "the last bits (relative differences near 1e-16)")
    return notes


def _card_notes(tables: Sequence[ExportTable]) -> list[str]:
    return [*_input_notes(tables),
            "reason codes are the feature names, ranked by points below each "
            "characteristic's best points over its bins or labels (its baselineScore)"]


def _input_notes(tables: Sequence[ExportTable]) -> list[str]:
    notes = [_refusal_note(tables)]
    dates = [t for t in tables if t.rule.days_before is not None]
    if dates:
        notes.append(
            "dates (" + ", ".join(f"{t.feature}: days before {t.rule.days_before}"
                                  for t in dates) + ") are read as ISO dates (YYYY-MM-DD) "
            "with dateDaysSinceYear; a scorer that reads a given date as missing would give "
            "the missing-value entry instead (pypmml 1.5.8 does): check yours on a few rows")
    return notes


def _refusal_note(tables: Sequence[ExportTable]) -> str:
    refused = [t.feature for t in tables if t.missing is None]
    flags = [t.feature for t in tables if t.rule.kind == "flag"]
    parts = []
    if refused:
        parts.append(f"a missing value of {', '.join(refused)}")
    if flags:
        parts.append(f"a word other than the known ones in {', '.join(flags)}")
    unseen = [t.feature for t in tables if t.shape == "levels" and t.unseen is None
              and t.rule.kind != "flag"]
    if unseen:
        parts.append(f"a label not in the table of {', '.join(unseen)}")
    if not parts:
        return "every row gets a result (no input is refused)"
    return ("rows the tool refuses get no result here either (invalid or missing, never a "
            f"number): {'; '.join(parts)}")


def _data_dictionary(root: ET.Element, rules: Iterable[ColumnRule]) -> ET.Element:
    dictionary = _el(root, "DataDictionary")
    for rule in rules:
        if rule.days_before is not None:
            if rule.date_layout not in (None, "%Y-%m-%d"):
                raise OptionError(f"feature '{rule.name}': dates in the layout "
                                  f"{rule.date_layout} cannot be read by a PMML scorer (it "
                                  "reads ISO dates, YYYY-MM-DD); the PMML export needs ISO "
                                  "dates")
            if rule.missing_codes:
                raise OptionError(f"feature '{rule.name}': missing codes on a column of "
                                  "dates cannot be written in PMML")
            _el(dictionary, "DataField", name=rule.name, optype="continuous",
                dataType="date")
            continue
        numeric = rule.numeric
        field = _el(dictionary, "DataField", name=rule.name,
                    optype="continuous" if numeric else "categorical",
                    dataType="double" if numeric else "string")
        codes = [_number(c) for c in rule.missing_codes] if numeric else [
            "", *(str(c) for c in rule.missing_codes)]  # blank text is missing too
        for code in dict.fromkeys(codes):
            _el(field, "Value", value=code, property="missing")
    return dictionary


def _count_fields(dictionary: ET.Element) -> None:
    dictionary.set("numberOfFields", str(len(dictionary)))


def _mining_schema(model: ET.Element, tables: Sequence[ExportTable], target: str,
                   schema: Schema) -> None:
    """The target, then each input: refused when missing where the tool refuses it, or
    replaced by the schema's fill (which the term's missing entry also holds)."""
    mining = _el(model, "MiningSchema")
    _el(mining, "MiningField", name=target, usageType="target")
    for table in tables:
        attributes = {"name": table.feature}
        spec = schema.feature(table.feature)
        if table.missing is None:
            attributes["missingValueTreatment"] = "returnInvalid"
        elif spec.missing == "fill" and table.rule.days_before is None:
            attributes["missingValueReplacement"] = (
                _number(spec.fill) if table.rule.numeric else label_text(spec.fill))
            attributes["missingValueTreatment"] = "asValue"
        _el(mining, "MiningField", **attributes)


# -- expressions -------------------------------------------------------------------------

def _ref(name: str) -> ET.Element:
    return ET.Element("FieldRef", {"field": name})


def _constant(value: float | str, data_type: str = "double") -> ET.Element:
    constant = ET.Element("Constant", {"dataType": data_type})
    constant.text = _number(value) if data_type == "double" else str(value)
    return constant


def _apply(function: str, *arguments: ET.Element, **attributes: str) -> ET.Element:
    apply = ET.Element("Apply", {"function": function, **attributes})
    apply.extend(arguments)
    return apply


def _sum(parts: Sequence[ET.Element]) -> ET.Element:
    """Left to right, as the tool adds: ((a + b) + c) + ..."""
    total = parts[0]
    for part in parts[1:]:
        total = _apply("+", total, part)
    return total


def _source(table: ExportTable) -> str:
    """The field a numeric table reads: the raw column, or a date's age in days."""
    return f"days:{table.feature}" if table.rule.days_before is not None else table.feature


def _days_field(parent: ET.Element, table: ExportTable) -> None:
    """A date's whole days before the schema's reference date (negative after it)."""
    reference = dt.date.fromisoformat(table.rule.days_before)
    since = (reference - dt.date(EPOCH_YEAR, 1, 1)).days
    field = _el(parent, "DerivedField", name=_source(table), optype="continuous",
                dataType="double")
    days = _apply("-", _constant(since), _apply("dateDaysSinceYear", _ref(table.feature),
                                                 _constant(EPOCH_YEAR, "integer")))
    field.append(_apply("if", _apply("isNotMissing", _ref(table.feature)), days))


def _label_name(table: ExportTable) -> str:
    return f"label:{table.feature}"


def _label_field(parent: ET.Element, table: ExportTable) -> None:
    """A label as the tool compares it (trimmed, and in lower case for a flag), or missing
    where the tool sees no value: no input, blank text, or one of the missing codes. (The
    guards come before trimBlanks: a scorer may refuse to trim a missing value.)"""
    field = _el(parent, "DerivedField", name=_label_name(table), optype="categorical",
                dataType="string")
    raw = _ref(table.feature)
    label = _apply("trimBlanks", _ref(table.feature))
    if table.rule.lowercase:
        label = _apply("lowercase", label)
    codes = _missing_labels(table)
    if codes:
        label = _apply("if", _apply("isNotIn", copy.deepcopy(label),
                                    *(_constant(code, "string") for code in codes)), label)
    blank = _apply("matches", _ref(table.feature), _constant(BLANK, "string"))
    field.append(_apply("if", _apply("isNotMissing", raw),
                        _apply("if", _apply("not", blank), label)))


def _missing_labels(table: ExportTable) -> list[str]:
    """The schema's missing codes as labels compare (lower case for a flag)."""
    return list(dict.fromkeys(str(c).lower() if table.rule.lowercase else str(c)
                              for c in table.rule.missing_codes))


def _term_field(parent: ET.Element, table: ExportTable) -> str:
    """The derived field of one term ("term:FEATURE"): what it adds to the score."""
    name = f"term:{table.feature}"
    if table.shape == "levels":
        _label_field(parent, table)
    elif table.rule.days_before is not None:
        _days_field(parent, table)
    field = _el(parent, "DerivedField", name=name, optype="continuous", dataType="double")
    field.append(_term_expression(table))
    return name


def _term_expression(table: ExportTable) -> ET.Element:
    if table.shape == "levels":
        return _levels_expression(table)
    if len(table.values) == 1:  # one bin or one knot: a constant, apart from missing
        return _when_present(_ref(table.feature), _constant(table.values[0]), table.missing)
    if table.rule.days_before is not None:
        # the missing entry only for a date not given: a date the scorer cannot read
        # leaves the days missing too, and then the term has no value (never a guess)
        return _when_present(_ref(table.feature), _numeric_expression(table, None),
                             table.missing)
    return _numeric_expression(table, table.missing)


def _numeric_expression(table: ExportTable, missing_value: float | None) -> ET.Element:
    """Discretize (steps) or NormContinuous (a curve) of the number the table reads."""
    source = _source(table)
    missing = None if missing_value is None else _number(missing_value)
    if table.shape == "steps":
        discretize = ET.Element("Discretize", {"field": source, "dataType": "double"})
        if missing is not None:
            discretize.set("mapMissingTo", missing)
        for i, value in enumerate(table.values):
            margins = {}
            if i > 0:
                margins["leftMargin"] = _number(table.points[i - 1])
            if i < len(table.points):
                margins["rightMargin"] = _number(table.points[i])
            bin_ = _el(discretize, "DiscretizeBin", binValue=_number(value))
            _el(bin_, "Interval", closure="openClosed", **margins)
        return discretize
    norm = ET.Element("NormContinuous", {"field": source, "outliers": "asExtremeValues"})
    if missing is not None:
        norm.set("mapMissingTo", missing)
    for knot, value in zip(table.points, table.values, strict=True):
        _el(norm, "LinearNorm", orig=_number(knot), norm=_number(value))
    return norm


def _when_present(value: ET.Element, result: ET.Element, missing: float | None) -> ET.Element:
    """`result` when `value` is present; else the missing-value entry, or nothing (an `if`
    without an else is missing when its condition is false)."""
    if missing is None:
        return _apply("if", _apply("isNotMissing", value), result)
    return _apply("if", _apply("isMissing", value), _constant(missing), result)


def _levels_expression(table: ExportTable) -> ET.Element:
    mapping = ET.Element("MapValues", {"outputColumn": "value", "dataType": "double"})
    if table.missing is not None:
        mapping.set("mapMissingTo", _number(table.missing))
    if table.unseen is not None:
        mapping.set("defaultValue", _number(table.unseen))
    _el(mapping, "FieldColumnPair", field=_label_name(table), column="label")
    inline = _el(mapping, "InlineTable")
    for level, value in zip(table.levels, table.values, strict=True):
        row = _el(inline, "row")
        _el(row, "label").text = level
        _el(row, "value").text = _number(value)
    return mapping


# -- pairs -------------------------------------------------------------------------------

def _pair_fields(pairs: Sequence[PairExportTable]) -> list[str]:
    return [name for pair in pairs for j in range(len(pair.rows))
            for name in (f"weight:{pair.name}:{j}", f"row:{pair.name}:{j}")] + [
        f"term:{pair.name}" for pair in pairs]


def _pair_field(parent: ET.Element, pair: PairExportTable) -> str:
    """The derived field of a pair: sum over the first axis's entries of weight * row."""
    products = []
    for j, row in enumerate(pair.rows):
        weight = _el(parent, "DerivedField", name=f"weight:{pair.name}:{j}",
                     optype="continuous", dataType="double")
        weight.append(_weight_expression(pair.first, j))
        along = _el(parent, "DerivedField", name=f"row:{pair.name}:{j}", optype="continuous",
                    dataType="double")
        along.append(_term_expression(row))
        products.append(_apply("*", _ref(weight.get("name")), _ref(along.get("name"))))
    name = f"term:{pair.name}"
    _el(parent, "DerivedField", name=name, optype="continuous",
        dataType="double").append(_sum(products))
    return name


def _weight_expression(axis: AxisTable, j: int) -> ET.Element:
    """Entry j's weight for a row: from the label, the bin, or the knots around it; a
    missing input weighs as `axis.missing` says (none given: the weight is missing)."""
    missing = None if axis.missing is None else axis.missing[j]
    if axis.shape == "levels":
        mapping = ET.Element("MapValues", {"outputColumn": "weight", "dataType": "double"})
        if missing is not None:
            mapping.set("mapMissingTo", _number(missing))
        if axis.unseen is not None:
            mapping.set("defaultValue", _number(axis.unseen[j]))
        _el(mapping, "FieldColumnPair", field=f"label:{axis.feature}", column="label")
        inline = _el(mapping, "InlineTable")
        for level, weights in zip(axis.levels, axis.label_weights, strict=True):
            row = _el(inline, "row")
            _el(row, "label").text = level
            _el(row, "weight").text = _number(weights[j])
        return mapping
    source = f"days:{axis.feature}" if axis.rule.days_before is not None else axis.feature
    points = axis.points
    if j >= axis.axis.values_size or (axis.shape == "curve" and len(points) == 1):
        # the missing entry, or a single knot: a constant where a value is given
        present = 0.0 if j >= axis.axis.values_size else 1.0
        return _when_present(_ref(source), _constant(present), missing)
    if axis.shape == "steps":
        discretize = ET.Element("Discretize", {"field": source, "dataType": "double"})
        if missing is not None:
            discretize.set("mapMissingTo", _number(missing))
        for i in range(len(points) + 1):
            margins = {}
            if i > 0:
                margins["leftMargin"] = _number(points[i - 1])
            if i < len(points):
                margins["rightMargin"] = _number(points[i])
            bin_ = _el(discretize, "DiscretizeBin", binValue="1" if i == j else "0")
            _el(bin_, "Interval", closure="openClosed", **margins)
        return discretize
    norm = ET.Element("NormContinuous", {"field": source, "outliers": "asExtremeValues"})
    if missing is not None:
        norm.set("mapMissingTo", _number(missing))
    for i in (j - 1, j, j + 1):  # a hat: 1 at knot j, 0 at its neighbours, flat beyond
        if 0 <= i < len(points):
            _el(norm, "LinearNorm", orig=_number(points[i]), norm="1" if i == j else "0")
    return norm


# -- the points card -----------------------------------------------------------------------

def _best(table: ExportTable) -> float:
    """The characteristic's best points over its bins or labels (never the missing row or
    the unseen level, as the tool's reasons seek the best over values only)."""
    return max(table.values)


def _characteristic(parent: ET.Element, table: ExportTable) -> None:
    characteristic = _el(parent, "Characteristic", name=f"points:{table.feature}",
                         reasonCode=table.feature, baselineScore=_number(_best(table)))
    levels = table.shape == "levels"
    field = _label_name(table) if levels else _source(table)
    # first a missing input; then each label and any other label, or each bin
    dates = table.rule.days_before is not None
    _points(characteristic, table.missing,
            _predicate(table.feature if dates else field, "isMissing"))
    if levels:
        for level, value in zip(table.levels, table.values, strict=True):
            _points(characteristic, value, _predicate(field, "equal", level))
        _points(characteristic, table.unseen, ET.Element("True"))
        return
    edges = [_number(edge) for edge in table.points]
    for i, value in enumerate(table.values):
        if not edges:
            predicate = _predicate(field, "isNotMissing")
        elif i == 0:
            predicate = _predicate(field, "lessOrEqual", edges[0])
        elif i == len(edges):
            predicate = _predicate(field, "greaterThan", edges[-1])
        else:
            predicate = ET.Element("CompoundPredicate", {"booleanOperator": "and"})
            predicate.extend([_predicate(field, "greaterThan", edges[i - 1]),
                              _predicate(field, "lessOrEqual", edges[i])])
        _points(characteristic, value, predicate)
    if dates:  # a date the scorer cannot read: no points rather than a guess
        _points(characteristic, None, ET.Element("True"))


def _predicate(field: str, operator: str, value: str | None = None) -> ET.Element:
    attributes = {"field": field, "operator": operator}
    if value is not None:
        attributes["value"] = value
    return ET.Element("SimplePredicate", attributes)


def _points(characteristic: ET.Element, points: float | None,
            predicate: ET.Element) -> None:
    """An Attribute scoring `points` where `predicate` holds, or, where the tool refuses
    the row (None), a missing partial score: the scorer then gives no total rather than a
    made-up number."""
    if points is not None:
        _el(characteristic, "Attribute", partialScore=_number(points)).append(predicate)
        return
    attribute = _el(characteristic, "Attribute")
    attribute.append(predicate)
    _el(_el(attribute, "ComplexPartialScore"), "Constant", dataType="double",
        missing="true")
