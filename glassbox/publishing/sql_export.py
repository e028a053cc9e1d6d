"""A model or a points card as one SQL SELECT that scores the rows of a table.

Every number and rule comes from `glassbox.publishing.export_tables` (the tables the PMML export
copies too); the SELECT computes what `ExportTable.read` computes, one CASE per feature:

    WITH inputs AS (...)        each raw column as its table reads it (number, label, days)
    , terms AS (...)            one CASE per feature: its contribution (or points); one
                                nested CASE per pair (outer on the first feature's entry,
                                inner on the second feature, as its own table is read)
    , scores AS (...)           the intercept (base points) plus the terms, in model order
    [, gaps AS (...), ranks AS (...)]   with reasons: each term's gap below its best, ranked
    SELECT ...                  id, score, probability or prediction, contributions, reasons

The text runs unchanged in DuckDB, SQLite (3.35+, with its math functions) and PostgreSQL:
identifiers in double quotes, strings in single quotes, and only functions all three have
(CAST, TRIM, LOWER, SUBSTR, LENGTH, ABS, FLOOR, EXP). A row the tool refuses gets NULL,
never a made-up number.
"""

from __future__ import annotations

import math
from collections.abc import Sequence

from glassbox.core.additive import AdditiveModel
from glassbox.core.documents import checksum
from glassbox.core.errors import OptionError
from glassbox.core.files import SQL_MARK
from glassbox.core.schema import Schema
from glassbox.explaining.cards import PointsCard, card_to_dict
from glassbox.explaining.reasons import NOTHING, Best, bests
from glassbox.publishing.export_tables import (
    AxisTable,
    ExportTable,
    PairExportTable,
    card_pair_tables,
    card_tables,
    model_tables,
    pair_tables,
)

# Scores above this give probability exactly 1.0 in doubles (exp(-40) < 2**-54, so
# 1 + exp(-40) rounds to 1), as `glassbox score` gives; below LOWEST the probability is
# written as 0: exp(-score) would overflow, and PostgreSQL raises on an overflow.
HIGHEST = 40.0
LOWEST = -709.0
LARGEST = 1.7976931348623157e308  # the largest double: anything beyond is infinite or NaN
INDENT = "    "


def model_sql(model: AdditiveModel, *, table: str = "applications", id_column: str | None = None,
              contributions: bool = False, reasons: int = 0) -> str:
    """One SELECT scoring `table` as `glassbox score` does: the id column (the option, or
    the schema's; none when neither names one), `score`, `probability` (classification) or
    `prediction` (regression), with `contributions` each `contribution:FEATURE`, and with
    `reasons` K > 0 the K terms and pairs furthest below their best (`feature_k`: the
    feature, or the pair's name "A & B", as the reason code; `gap_k`), ranked as
    `glassbox reasons` ranks them (a pair's gap from its own best value, terms first on
    ties)."""
    if reasons < 0:
        raise OptionError(f"--reasons takes a number of reasons, 0 or more, not {reasons}")
    tables = model_tables(model)
    pairs = pair_tables(model)
    ident = _id_column(id_column or model.schema.id_column, tables)
    outcome = "probability" if model.link == "logit" else "prediction"
    names = [t.feature for t in tables] + [p.name for p in pairs]
    scale = "log-odds" if model.link == "logit" else "prediction scale"
    head = _header(
        f"the {model.task} model {_model_checksum(model)}", model.schema, tables, ident,
        [f"score: the intercept plus the contributions (the {scale})",
         f"{outcome}: {_outcome_words(model.link)}",
         *(["contribution:FEATURE: what each feature adds to the score"] if contributions
           else []),
         *([f"contribution:{p.name}: what the pair adds (its two-feature table)"
            for p in pairs] if contributions else []),
         *([f"feature_1..{reasons}: the features{' or pairs' if pairs else ''} (reason codes) "
            "holding the score furthest",
            f"  below their best, first the furthest; gap_1..{reasons}: how far (score scale),",
            "  from the best within the central 98% of training values (as glassbox reasons);",
            f"  NULL where fewer features are more than {NOTHING!r} below their best"]
           if reasons else [])],
        _precision_words(model.link))
    parts = [_inputs_cte(tables, ident, table),
             _terms_cte(tables, ident, "contribution", as_double=True, pairs=pairs),
             _scores_cte(names, ident, "contribution", "score", _operand(model.intercept))]
    final = [*([_quote(ident)] if ident else []), '"score"',
             f"{_outcome_expression(model.link)} AS {_quote(outcome)}"]
    if contributions:
        final += [_quote(f"contribution:{name}") for name in names]
    source = "scores"
    if reasons:
        best = bests(model)  # protected features never have one
        ranked = [name for name in names if name in best]
        parts += [_gaps_cte(model, names, ranked, best, ident),
                  _ranks_cte(names, ranked, ident)]
        final += _reason_columns(ranked, reasons)
        source = "ranks"
    return head + _assemble(parts, final, source)


def card_sql(card: PointsCard, *, table: str = "applications", id_column: str | None = None,
             contributions: bool = False, reasons: int = 0) -> str:
    """One SELECT giving each row of `table` its points as `glassbox score --points` does:
    the id column, `total_points`, `base_points`, and with `contributions` each
    `points:FEATURE` (all whole numbers)."""
    if reasons:
        raise OptionError("--reasons ranks a model's terms: export the model file for reasons "
                          "(a points card has no reasons of its own)")
    tables = card_tables(card)
    pairs = card_pair_tables(card)
    for found in (*tables, *(row for pair in pairs for row in pair.rows)):
        for value in (*found.values, found.unseen, found.missing):
            if value is not None and not float(value).is_integer():
                raise OptionError(f"the card's points for '{found.feature}' are not whole "
                                  f"numbers ({value!r}); the card file is damaged")
    ident = _id_column(id_column or card.schema.id_column, tables)
    names = [t.feature for t in tables] + [p.name for p in pairs]
    card_sum = checksum(card_to_dict(card))
    head = _header(
        f"the points card {card_sum} (of the model {card.model_checksum or 'not recorded'})",
        card.schema, tables, ident,
        ["total_points: base_points plus each feature's points (whole numbers)",
         f"base_points: {card.base_points} on every row",
         *(["points:FEATURE: each feature's points"] if contributions else []),
         *([f"points:{p.name}: the pair's points (its grid's cell)" for p in pairs]
           if contributions else [])],
        ["Points are whole numbers added exactly, as `glassbox score --points` adds them."])
    parts = [_inputs_cte(tables, ident, table),
             _terms_cte(tables, ident, "points", as_double=False, pairs=pairs),
             _scores_cte(names, ident, "points", "total_points", str(card.base_points))]
    final = [*([_quote(ident)] if ident else []), '"total_points"',
             f'{card.base_points} AS "base_points"']
    if contributions:
        final += [_quote(f"points:{name}") for name in names]
    return head + _assemble(parts, final, "scores")


def _id_column(name: str | None, tables: Sequence[ExportTable]) -> str | None:
    """The id column, refused when it is one of the features (it is returned as it is)."""
    if name is not None and any(t.feature == name for t in tables):
        raise OptionError(f"--id {name} is a feature of the model; name the column that "
                          "identifies each row")
    return name


# ---------------------------------------------------------------- words


def _model_checksum(model: AdditiveModel) -> str:
    from glassbox.explaining.points import model_checksum

    return model_checksum(model) or "(no checksum: the model cannot be written as a file)"


def _outcome_words(link: str) -> str:
    if link == "logit":
        return "1 / (1 + exp(-score)), the modelled probability of the positive class"
    return "the score itself (identity link)"


def _precision_words(link: str) -> list[str]:
    lines = ["Every number is the repr of a double, in exponent form: DuckDB and SQLite read",
             "it as a double; PostgreSQL reads it as an exact decimal, turned into the same",
             "double (each CASE is cast to DOUBLE PRECISION), so contributions equal the",
             "tool's own bit for bit and the score to within the rounding of the sum."]
    if link == "logit":
        lines += ["The probability uses the engine's exp(), which may differ from the tool's in",
                  "the last digit (about 1e-16). Scores above 40 give exactly 1, as the tool",
                  "does; scores below -709 give 0 (the tool gives a number under 1e-307 down",
                  "to -709.78, then 0): exp would overflow, and PostgreSQL raises on that."]
    return lines


def _header(what: str, schema: Schema, tables: Sequence[ExportTable], ident: str | None,
            outputs: list[str], precision: list[str]) -> str:
    lines = [f"{SQL_MARK}SQL export: {what}",
             "-- Scores are model outputs, not decisions: a decision rests with people, under",
             "-- local law, fair-lending rules and compliance.",
             "-- Runs unchanged in DuckDB, SQLite 3.35+ (built with its math functions: exp,",
             "-- floor) and PostgreSQL; no ORDER BY (rows come in the engine's order).",
             "--",
             "-- Columns the table must have (a blank is NULL, or empty text in a text column):"]
    if ident:
        lines.append(f"--   {ident}: names each row (returned as it is)")
    for found in tables:
        lines.append(f"--   {found.feature}: {_column_words(found, schema)}")
    lines += ["--", "-- Output columns:", *(f"--   {line}" for line in outputs), "--",
              "-- NULL in an output means the tool refuses the row: a missing value the model",
              "-- has no entry for (or the schema refuses), a flag word it does not know, a",
              "-- number that is not finite, a fraction in a whole-number column, a date not",
              "-- written YYYY-MM-DD. Labels are trimmed of spaces (the tool also trims tabs",
              "-- and line breaks); a number read as 35 and as 35.0 is the same.",
              "--", *(f"-- {line}" for line in precision), ""]
    return "\n".join(lines)


def _column_words(found: ExportTable, schema: Schema) -> str:
    rule = found.rule
    spec = schema.feature(found.feature)
    if rule.days_before is not None:
        kind = f"a date (DATE, or text YYYY-MM-DD), read as days before {rule.days_before}"
    elif rule.kind == "flag":
        kind = "a flag: a boolean, 0 or 1, or a word (yes/no, true/false, y/n, t/f)"
    elif rule.kind == "category":
        kind = "a category: text (or whole numbers)"
    elif rule.kind == "integer":
        kind = "whole numbers (a numeric column)"
    else:
        kind = "numbers (a numeric column)"
    if rule.missing_codes:
        kind += "; missing codes " + ", ".join(str(code) for code in rule.missing_codes)
    if found.missing is None:
        kind += "; a missing value is refused"
    elif spec.missing == "fill":
        kind += f"; a missing value scores as {spec.fill!r}"
    return kind


# ---------------------------------------------------------------- literals


def _quote(name: str) -> str:
    """An identifier in double quotes, embedded double quotes doubled."""
    return '"' + str(name).replace('"', '""') + '"'


def _table_name(table: str) -> str:
    """The table to score: a name, or SCHEMA.NAME (split at dots), each part quoted."""
    parts = str(table).split(".")
    if not table or any(not part for part in parts):
        raise OptionError(f"--table {table!r} is not a table name (NAME or SCHEMA.NAME)")
    return ".".join(_quote(part) for part in parts)


def _text(value: str) -> str:
    """A string literal, embedded single quotes doubled."""
    return "'" + str(value).replace("'", "''") + "'"


def _number(value: float) -> str:
    """The repr of a double in exponent form, so DuckDB reads a double, not a DECIMAL
    (it reads 0.1 as DECIMAL(2,1) but 0.1e0 as DOUBLE); SQLite reads either as a double;
    PostgreSQL reads both as an exact NUMERIC, which becomes the same double where it
    meets one (and each CASE is cast)."""
    number = float(value)
    if not math.isfinite(number):
        raise OptionError(f"the tables hold a number that is not finite ({number!r})")
    text = repr(number)
    return text if "e" in text else text + "e0"


def _operand(value: float) -> str:
    """A number inside arithmetic: negative ones in brackets (so "- -" never appears)."""
    text = _number(value)
    return f"({text})" if text.startswith("-") else text


def _whole(value: float) -> str:
    return str(int(value))


# ---------------------------------------------------------------- the CTEs


def _assemble(parts: list[str], final: list[str], source: str) -> str:
    body = "WITH " + ",\n".join(parts)
    columns = (",\n" + INDENT).join(final)
    return f"{body}\nSELECT\n{INDENT}{columns}\nFROM {source};\n"


def _cte(name: str, columns: list[str], source: str, materialized: bool = False) -> str:
    """A named SELECT; `materialized` computes it once (all three engines take the hint):
    PostgreSQL and SQLite would otherwise copy a CTE's expressions into every place that
    uses its columns, computing each table's CASE again for the probability and the ranks."""
    inner = (",\n" + INDENT * 2).join(columns)
    hint = " MATERIALIZED" if materialized else ""
    return (f"{name} AS{hint} (\n{INDENT}SELECT\n{INDENT * 2}{inner}\n{INDENT}FROM {source}"
            "\n)")


def _inputs_cte(tables: Sequence[ExportTable], ident: str | None, table: str) -> str:
    columns = [_quote(ident)] if ident else []
    for found in tables:
        columns += _read_columns(found)
    return _cte("inputs", columns, _table_name(table))


def _read_columns(found: ExportTable) -> list[str]:
    """The raw column as the table reads it (a date also says whether it is well formed)."""
    raw, name, rule = _quote(found.feature), _quote(found.feature), found.rule
    if rule.days_before is not None:
        if rule.date_layout not in (None, "%Y-%m-%d"):
            raise OptionError(f"the SQL export reads dates as YYYY-MM-DD only; the schema "
                              f"gives '{found.feature}' the layout {rule.date_layout}")
        text = f"TRIM(CAST({raw} AS TEXT))"
        return [f"CASE WHEN {_iso_date(text)} THEN {_days_before(text, rule.days_before)} "
                f"END AS {name}",
                f"CASE WHEN {text} <> '' AND NOT ({_iso_date(text)}) THEN 1 ELSE 0 END "
                f"AS {_quote('not a date:' + found.feature)}"]
    if found.shape != "levels":
        return [f"CAST({raw} AS DOUBLE PRECISION) AS {name}"]
    text = f"TRIM(CAST({raw} AS TEXT))"
    return [f"{'LOWER(' + text + ')' if rule.lowercase else text} AS {name}"]


def _iso_date(text: str) -> str:
    """Text of the form YYYY-MM-DD (digits where digits belong)."""
    digits = " AND ".join(f"SUBSTR({text}, {i}, 1) BETWEEN '0' AND '9'"
                          for i in (1, 2, 3, 4, 6, 7, 9, 10))
    return (f"LENGTH({text}) = 10 AND SUBSTR({text}, 5, 1) = '-' AND "
            f"SUBSTR({text}, 8, 1) = '-' AND {digits}")


def _day_number(year: str, month: str, day: str) -> str:
    """Days from a fixed origin to a date of the proleptic Gregorian calendar (the year
    counted from March), with FLOOR of doubles: exact for these small whole numbers."""
    march = f"(CASE WHEN {month} <= 2 THEN 1 ELSE 0 END)"
    shifted = f"({year} - {march})"
    month_index = f"({month} + 12 * {march} - 3)"
    return (f"(365 * {shifted} + FLOOR({shifted} / 4.0e0) - FLOOR({shifted} / 100.0e0) + "
            f"FLOOR({shifted} / 400.0e0) + FLOOR((153 * {month_index} + 2) / 5.0e0) + {day})")


def _days_before(text: str, reference: str) -> str:
    year, month, day = (f"CAST(SUBSTR({text}, {start}, {size}) AS INTEGER)"
                        for start, size in ((1, 4), (6, 2), (9, 2)))
    y, m, d = (int(part) for part in reference.split("-"))
    march = 1 if m <= 2 else 0
    shifted, index = y - march, m + 12 * march - 3
    origin = (365 * shifted + shifted // 4 - shifted // 100 + shifted // 400
              + (153 * index + 2) // 5 + d)
    return f"CAST({origin} - {_day_number(year, month, day)} AS DOUBLE PRECISION)"


def _terms_cte(tables: Sequence[ExportTable], ident: str | None, prefix: str,
               as_double: bool, pairs: Sequence[PairExportTable] = ()) -> str:
    columns = [_quote(ident)] if ident else []
    for found in tables:
        case = _case(found, as_double)
        if as_double:
            case = f"CAST({case} AS DOUBLE PRECISION)"
        columns.append(f"{case} AS {_quote(f'{prefix}:{found.feature}')}")
    for pair in pairs:
        case = _pair_case(pair, as_double)
        if as_double:
            case = f"CAST({case} AS DOUBLE PRECISION)"
        columns.append(f"{case} AS {_quote(f'{prefix}:{pair.name}')}")
    return _cte("terms", columns, "inputs")


def _pair_case(pair: PairExportTable, as_double: bool = True) -> str:
    """A pair as a nested CASE: the outer CASE reads the first feature's entry (or two
    entries and their weights between knots); each entry's result is a CASE on the second
    feature, that entry's row of the table read as the feature's own table is read."""
    step = INDENT * 3
    whens = []
    for condition, weights in _axis_branches(pair.first):
        if weights is None:
            result = "NULL"
        else:
            if not as_double and any(weight != "1" for _, weight in weights):
                raise OptionError(f"the points grid of '{pair.name}' reads between two "
                                  "entries; the card file is damaged")
            added = [_case(pair.rows[j], as_double) if weight == "1" else
                     f"{weight} * {_case(pair.rows[j], True)}" for j, weight in weights]
            result = (f"\n{step}+ ".join(added) if added
                      else _number(0.0) if as_double else "0")
        whens.append(f"{'ELSE' if condition is None else f'WHEN {condition} THEN'} {result}")
    first = pair.first
    title = (f"pair {pair.name}: by {first.feature} ({first.axis.kind}), then "
             f"{pair.second} as its own table reads it")
    return f"CASE  -- {title}\n{step}" + f"\n{step}".join(whens) + f"\n{INDENT * 2}END"


def _weights(weights: Sequence[float] | None) -> list[tuple[int, str]] | None:
    """Fixed weights per entry as SQL factors, entries weighing nothing left out."""
    if weights is None:
        return None
    return [(j, "1" if w == 1.0 else _operand(w)) for j, w in enumerate(weights) if w != 0.0]


def _axis_branches(axis: AxisTable) -> list[tuple[str | None, list[tuple[int, str]] | None]]:
    """The outer CASE's branches: (condition, None for ELSE), with the entries and their
    weights (SQL factors), or None where the row is refused (NULL)."""
    x, rule = _quote(axis.feature), axis.rule
    if axis.shape == "levels":
        codes = {code.lower() if rule.lowercase else code for code in rule.missing_codes}
        blank = " OR ".join([f"{x} IS NULL", f"{x} = ''",
                             *([f"{x} IN ({', '.join(_text(c) for c in sorted(codes))})"]
                               if codes else [])])
        branches = [(blank, _weights(axis.missing))]
        branches += [(f"{x} = {_text(label)}", _weights(weights))
                     for label, weights in zip(axis.levels, axis.label_weights, strict=True)]
        return [*branches, (None, _weights(axis.unseen))]
    branches: list = []
    if rule.days_before is not None:
        branches.append((f"{_quote('not a date:' + axis.feature)} = 1", None))
    blank = f"{x} IS NULL"
    if rule.missing_codes:
        blank += f" OR {x} IN ({', '.join(_number(c) for c in rule.missing_codes)})"
    branches.append((blank, _weights(axis.missing)))
    refused = f"NOT (ABS({x}) <= {_number(LARGEST)})"
    if rule.kind == "integer":
        refused += f" OR {x} <> FLOOR({x})"
    branches.append((refused, None))
    points = axis.points
    if axis.shape == "steps":
        branches += [(f"{x} <= {_number(edge)}", [(i, "1")]) for i, edge in enumerate(points)]
        return [*branches, (None, [(len(points), "1")])]
    branches.append((f"{x} <= {_number(points[0])}", [(0, "1")]))
    for i in range(len(points) - 1):
        share = (f"(({x} - {_operand(points[i])}) / "
                 f"{_operand(points[i + 1] - points[i])})")
        branches.append((f"{x} < {_number(points[i + 1])}",
                         [(i, f"(1.0e0 - {share})"), (i + 1, share)]))
    return [*branches, (None, [(len(points) - 1, "1")])]


def _case(found: ExportTable, as_double: bool) -> str:
    """The feature's table as one CASE: the missing value first, refusals, then the table."""
    value = _number if as_double else _whole
    x, rule = _quote(found.feature), found.rule
    missing = "NULL" if found.missing is None else value(found.missing)
    step = INDENT * 3
    whens = []
    if found.shape == "levels":
        codes = {code.lower() if rule.lowercase else code for code in rule.missing_codes}
        blank = " OR ".join([f"{x} IS NULL", f"{x} = ''",
                             *([f"{x} IN ({', '.join(_text(c) for c in sorted(codes))})"]
                               if codes else [])])
        whens.append(f"WHEN {blank} THEN {missing}")
        whens += [f"WHEN {x} = {_text(label)} THEN {value(v)}"
                  for label, v in zip(found.levels, found.values, strict=True)]
        whens.append(f"ELSE {'NULL' if found.unseen is None else value(found.unseen)}")
        kind = "levels" if rule.kind != "flag" else "flag words"
        return (f"CASE  -- {found.feature}: {kind}, then any other label\n{step}"
                + f"\n{step}".join(whens) + f"\n{INDENT * 2}END")
    blank = f"{x} IS NULL"
    if rule.missing_codes:
        blank += f" OR {x} IN ({', '.join(_number(c) for c in rule.missing_codes)})"
    if rule.days_before is not None:
        whens.append(f"WHEN {_quote('not a date:' + found.feature)} = 1 THEN NULL")
    whens.append(f"WHEN {blank} THEN {missing}")
    refused = f"NOT (ABS({x}) <= {_number(LARGEST)})"
    if rule.kind == "integer":
        refused += f" OR {x} <> FLOOR({x})"
    whens.append(f"WHEN {refused} THEN NULL")
    if found.shape == "steps":
        whens += [f"WHEN {x} <= {_number(edge)} THEN {value(v)}"
                  for edge, v in zip(found.points, found.values, strict=False)]
        whens.append(f"ELSE {value(found.values[-1])}")
        title = f"steps over {len(found.points)} edges: value i where edge i-1 < x <= edge i"
    else:
        knots, values, slopes = found.points, found.values, found.slopes
        whens.append(f"WHEN {x} <= {_number(knots[0])} THEN {value(values[0])}")
        whens += [f"WHEN {x} < {_number(knots[i + 1])} THEN {_operand(values[i])} + "
                  f"({x} - {_operand(knots[i])}) * {_operand(slopes[i])}"
                  for i in range(len(knots) - 1)]
        whens.append(f"ELSE {value(values[-1])}")
        title = (f"curve over {len(knots)} knots, linear between them, flat beyond the "
                 "first and last")
    return (f"CASE  -- {found.feature}: {title}\n{step}" + f"\n{step}".join(whens)
            + f"\n{INDENT * 2}END")


def _scores_cte(names: list[str], ident: str | None, prefix: str, total: str,
                start: str) -> str:
    terms = [_quote(f"{prefix}:{name}") for name in names]
    added = f"\n{INDENT * 3}+ ".join([start, *terms])
    columns = [*([_quote(ident)] if ident else []), *terms, f"{added} AS {_quote(total)}"]
    return _cte("scores", columns, "terms", materialized=True)


def _outcome_expression(link: str) -> str:
    if link != "logit":
        return '"score"'
    return (f'CASE WHEN "score" > {_number(HIGHEST)} THEN 1.0e0 '
            f'WHEN "score" < {_operand(LOWEST)} THEN 0.0e0 '
            'ELSE 1.0e0 / (1.0e0 + EXP(-"score")) END')


def _gaps_cte(model: AdditiveModel, names: list[str], ranked: list[str],
              best: dict[str, Best], ident: str | None) -> str:
    """Each ranked term's gap below its best: max(0, sign * (best - contribution))."""
    sign = model.schema.target.good_sign
    columns = [*([_quote(ident)] if ident else []), '"score"',
               *(_quote(f"contribution:{name}") for name in names)]
    for name in ranked:
        contribution = _quote(f"contribution:{name}")
        pull = (f"({_operand(best[name].contribution)} - {contribution})" if sign > 0
                else f"({contribution} - {_operand(best[name].contribution)})")
        columns.append(f"CASE WHEN {pull} > 0.0e0 THEN {pull} ELSE 0.0e0 END "
                       f"AS {_quote(f'gap:{name}')}")
    return _cte("gaps", columns, "scores", materialized=True)


def _ranks_cte(names: list[str], ranked: list[str], ident: str | None) -> str:
    """Each gap's place among the row's gaps: larger first, ties in model order."""
    columns = [*([_quote(ident)] if ident else []), '"score"',
               *(_quote(f"contribution:{name}") for name in names),
               *(_quote(f"gap:{name}") for name in ranked)]
    for j, name in enumerate(ranked):
        mine = _quote(f"gap:{name}")
        ahead = [f"CASE WHEN {_quote(f'gap:{other}')} {'>=' if i < j else '>'} {mine} "
                 "THEN 1 ELSE 0 END" for i, other in enumerate(ranked) if i != j]
        joined = f"\n{INDENT * 3}+ ".join(["1", *ahead])
        columns.append(f"{joined} AS {_quote(f'rank:{name}')}")
    return _cte("ranks", columns, "gaps")


def _reason_columns(names: list[str], top: int) -> list[str]:
    out = []
    for k in range(1, top + 1):
        for column, shown in ((f"feature_{k}", _text), (f"gap_{k}", None)):
            whens = ['WHEN "score" IS NULL THEN NULL']
            whens += [f"WHEN {_quote(f'rank:{name}')} = {k} AND {_quote(f'gap:{name}')} > "
                      f"{_number(NOTHING)} THEN "
                      f"{shown(name) if shown else _quote(f'gap:{name}')}" for name in names]
            lines = f"\n{INDENT * 2}".join(whens)
            out.append(f"CASE\n{INDENT * 2}{lines}\n{INDENT}END AS {_quote(column)}")
    return out
