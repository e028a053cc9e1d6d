"""What `glassbox changes` shows: the review as blocks of text cells, then laid out for a
terminal (80 columns, nothing cut: long cells fold) or written as Markdown. Both come from
the same blocks, so the two never say different things; JSON is `Changes.to_dict()`.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from rich.console import Group, RenderableType
from rich.text import Text

from glassbox.core.provenance import COLUMNS_METHOD, FINGERPRINT_METHODS, fingerprint_method
from glassbox.core.wording import plural
from glassbox.explaining.changes import UNSEEN, Changes, TermChange
from glassbox.publishing import palette
from glassbox.publishing.monitor_view import WIDTH, count_text, share_text
from glassbox.publishing.narrow import FittedTable, number_texts

CAUTION = ("A comparison of two models' tables and of their scores: a prompt for the "
           "validator's judgement, not an approval; decisions also answer to local law, "
           "fair-lending rules and compliance.")


@dataclass(frozen=True)
class Block:
    """One table of the review: a title, (heading, "left" | "right") pairs, rows of text
    cells (a cell may hold several lines), and sentences to read under it."""

    title: str
    headings: tuple[tuple[str, str], ...]
    rows: tuple[tuple[str, ...], ...]
    notes: tuple[str, ...] = ()


def number(value: Any, digits: int = 4) -> str:
    """A number to `digits` significant figures; "" for none."""
    return "" if value is None else f"{float(value):.{digits}g}"


def signed(value: Any, digits: int = 4) -> str:
    """A change with its sign; "" for none."""
    return "" if value is None else f"{float(value):+.{digits}g}"


def setting_text(value: Any) -> str:
    """A setting's value as short text: lists joined, None as "not set"."""
    if value is None:
        return "not set"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, list | tuple):
        return ", ".join(setting_text(v) for v in value) if value else "none"
    if isinstance(value, dict):
        return json.dumps(value, sort_keys=True)
    return str(value)


def where_text(term: TermChange) -> str:
    """Where a term's largest change is: a value, just above an edge, or a level."""
    if term.at is None:
        return ""
    if isinstance(term.at, str):
        return term.at if term.at == UNSEEN else f"level {term.at}"
    value = f"{term.at:.6g}"
    return f"just above {value}" if term.just_above else value


def missing_text(term: TermChange) -> str:
    """The missing-value entries, old → new ("refused" where a version has none)."""
    before = "refused" if term.old_missing is None else number(term.old_missing)
    after = "refused" if term.new_missing is None else number(term.new_missing)
    if term.old_missing is None and term.new_missing is None:
        return "refused in both"
    text = f"{before} → {after}"
    if term.missing_change is not None:
        return f"{text}\n({signed(term.missing_change)})"
    return f"{text}\n({term.missing_words})"


def _column(values: Sequence[Any], sign: bool = False) -> list[str]:
    """A column of numbers in one style (the same decimals), signed for changes."""
    return number_texts(list(values), signed=sign)


def _rank(old: int | None, new: int | None) -> str:
    return f"{'–' if old is None else old} → {'–' if new is None else new}"


FINGERPRINT_SHOWN = 12  # hex digits of a fingerprint a terminal table shows
FINGERPRINT_NOTE = ("Fingerprints shown as their first 12 hex digits (of the SHA-256 over "
                    "the columns, unless marked csv:); --format json gives them whole.")


def short_text(value: Any) -> str:
    """`setting_text`, with a fingerprint shortened to its first 12 hex digits and no
    method prefix (the column-bytes method is the note's; the older CSV-text one is marked
    `csv:`): 64 digits and a prefix would split a table at 80 columns (JSON keeps them
    whole)."""
    text = setting_text(value)
    method = fingerprint_method(text)
    if method in (None, "unknown"):
        return text
    digits = text.split(":", 1)[1]
    shown = digits[:FINGERPRINT_SHOWN] + ("…" if len(digits) > FINGERPRINT_SHOWN else "")
    return shown if method == FINGERPRINT_METHODS[COLUMNS_METHOD] else f"csv:{shown}"


def _changes_block(title: str, changes: Sequence[Any], empty: str, short: bool) -> Block:
    shown = short_text if short else setting_text
    rows = tuple((c.setting if c.subject == "model" else f"{c.subject}: {c.setting}",
                  shown(c.old), shown(c.new)) for c in changes)
    shortened = any(shown(v) != setting_text(v) for c in changes for v in (c.old, c.new))
    notes = ((empty,) if not rows else (FINGERPRINT_NOTE,) if shortened else ())
    return Block(title, (("setting", "left"), ("old", "left"), ("new", "left")), rows, notes)


def review_blocks(changes: Changes, short: bool = True) -> list[Block]:
    """The review in reading order: what turns the reading round, structure, fitting,
    schema, terms, importance, then the data's decisions and score shift. `short`:
    fingerprints shortened to fit a terminal (Markdown and JSON keep them whole)."""
    blocks = []
    if changes.prominent:
        blocks.append(Block(
            "Changes that turn the model's reading round",
            (("of", "left"), ("setting", "left"), ("old → new", "left"),
             ("why it matters", "left")),
            tuple((c.subject, c.setting, f"{setting_text(c.old)} → {setting_text(c.new)}",
                   c.prominent) for c in changes.prominent)))
    intercept = changes.new_intercept - changes.old_intercept
    blocks.append(Block("Structure", (("item", "left"), ("value", "left")), (
        ("features added", ", ".join(changes.added) or "none"),
        ("features removed", ", ".join(changes.removed) or "none"),
        ("intercept", f"{number(changes.old_intercept)} → {number(changes.new_intercept)} "
                      f"({signed(intercept)})"))))
    blocks.append(_changes_block("Family and fitting settings", changes.settings,
                                 "The same family and settings.", short))
    blocks.append(_changes_block("Schema", changes.schema, "The same schema.", short))
    blocks.append(Block(
        f"Largest change of each common term's contribution (new − old, {changes.scale})",
        (("feature", "left"), ("tables", "left"), ("largest change", "right"),
         ("at", "left"), ("missing value", "left")),
        tuple((t.feature, t.old_kind if t.old_kind == t.new_kind else
               f"{t.old_kind} → {t.new_kind}", largest, where_text(t),
               missing_text(t)) for t, largest in zip(
                   changes.terms, _column([t.largest for t in changes.terms], True),
                   strict=True)),
        _term_notes(changes)))
    blocks.append(Block(
        "Importance: mean |contribution| and rank (1 = most important)",
        (("feature", "left"), ("old", "right"), ("new", "right"), ("change", "right"),
         ("rank", "left")),
        tuple((i.feature, old, new, change, _rank(i.old_rank, i.new_rank))
              for i, old, new, change in zip(
                  changes.importance, _column([i.old for i in changes.importance]),
                  _column([i.new for i in changes.importance]),
                  _column([i.change for i in changes.importance], True), strict=True)),
        (_importance_note(changes),)))
    if changes.pairs:
        blocks.append(_pairs_block(changes))
    if changes.data is not None:
        blocks += _data_blocks(changes)
    return blocks


def _pair_at(cell: Any) -> str:
    """The cell where a pair's change is largest, as "A 100 to 125 and B 8 to 14"."""
    return "" if cell is None else " and ".join(cell)


def _pairs_block(changes: Changes) -> Block:
    """The pairwise tables of either version: added, removed, and how far a common one's
    table moved (exact, over the union of both grids) and where."""
    pairs = changes.pairs
    largest = _column([p.largest for p in pairs], True)
    rows = tuple((p.pair, p.status, move, _pair_at(p.cell), old, new)
                 for p, move, old, new in zip(
                     pairs, largest, _column([p.old_importance for p in pairs]),
                     _column([p.new_importance for p in pairs]), strict=True))
    notes = ["Largest change of a common pair's table (new − old): exact, at every corner "
             "of the union of both versions' grids within the training range (levels, "
             "knots, edges and just above each edge), its missing entries where both "
             "versions have one. Importance: mean |contribution| over training rows, as "
             "each model file records it."]
    notes += [f"{p.pair}: {p.note}." for p in pairs if p.note]
    return Block(f"Pairwise tables ({changes.scale})",
                 (("pair", "left"), ("status", "left"), ("largest change", "right"),
                  ("at", "left"), ("old importance", "right"), ("new importance", "right")),
                 rows, tuple(notes))


def _importance_note(changes: Changes) -> str:
    if changes.old_importance_source == changes.new_importance_source:
        return f"Both over {changes.old_importance_source}."
    return (f"{changes.old_name} over {changes.old_importance_source}; {changes.new_name} "
            f"over {changes.new_importance_source}.")


def _term_notes(changes: Changes) -> tuple[str, ...]:
    notes = [
        "Exact: numbers over the training range of either version, every knot and edge "
        "(and just above each edge) checked; categories at every level either version "
        "knows and for a level neither saw. Missing values are compared on their own "
        "(refused: that version gives no score to a row without the value).",
        "Each version's terms are centred on its own training rows, so a table shifted "
        f"as a whole against the intercept shows here: the intercept moved by "
        f"{signed(changes.new_intercept - changes.old_intercept)}.",
    ]
    notes += [f"{t.feature}: {t.note}." for t in changes.terms if t.note]
    return tuple(notes)


def _data_blocks(changes: Changes) -> list[Block]:
    data = changes.data
    assert data is not None
    cut = (f"probability {number(data.cutoff)}" if changes.task == "classification"
           else f"predicted value {number(data.cutoff)}")
    both = f"{count_text(data.scored)} of {count_text(data.rows)}"

    def counted(count: int) -> str:
        share = data.share(count)
        return count_text(count) if share is None else f"{count_text(count)} ({share_text(share)})"

    blocks = [Block(
        f"Decisions at the cut-off ({cut}) on {data.source}",
        (("decisions", "left"), ("rows", "right")), (
            ("rows scored by both versions", both),
            (f"unfavourable under {changes.old_name}", counted(data.old_unfavourable)),
            (f"unfavourable under {changes.new_name}", counted(data.new_unfavourable)),
            ("flipped to unfavourable", counted(data.to_unfavourable)),
            ("flipped to favourable", counted(data.to_favourable)),
            ("flipped in all", counted(data.flipped))),
        ("Which side is favourable follows each version's schema ([target] better); "
         "shares are of the rows both versions score.",))]
    if data.shift_mean is not None:
        stats = [("mean", data.shift_mean), ("lowest", data.shift_min),
                 *((f"percentile {p}", v) for p, v in data.shift_percentiles),
                 ("highest", data.shift_max)]
        blocks.append(Block(f"Score shift, new − old ({changes.scale})",
                            (("statistic", "left"), ("shift", "right")),
                            tuple(zip([name for name, _ in stats],
                                      _column([value for _, value in stats], True),
                                      strict=True))))
    if data.unscored:
        blocks.append(Block(
            "Rows a version cannot score (left out of the figures above)",
            (("version", "left"), ("feature", "left"), ("rows", "right"),
             ("reason", "left")),
            tuple((u.version, u.feature, count_text(u.rows), f"{u.which}: {u.reason}")
                  for u in data.unscored),
            (f"{changes.old_name} cannot score {plural(data.unscored_old, 'row')}, "
             f"{changes.new_name} {plural(data.unscored_new, 'row')}.",)))
    return blocks


def heading(changes: Changes) -> str:
    return (f"Changes from {changes.old_name} to {changes.new_name}: a {changes.task} "
            f"model, contributions in {changes.scale}")


def changes_view(changes: Changes, width: int = WIDTH) -> RenderableType:
    """The review laid out for a terminal `width` columns wide, nothing cut."""
    parts: list[RenderableType] = [Text(heading(changes), style="bold"), Text("")]
    for block in review_blocks(changes):
        prominent = block.title.startswith("Changes that turn")
        # the shared layout: the title a paragraph of its own, a table too wide even
        # with its text wrapped shown in parts that repeat the first column
        table = FittedTable(block.title, block.headings, block.rows)
        if prominent:
            table.title_style = palette.ERROR_STYLE
        parts.append(table if block.rows else Text(block.title, style="bold"))
        parts += [Text(note) for note in block.notes]
        parts.append(Text(""))
    parts.append(Text(CAUTION, style="italic"))
    return Group(*parts)


def changes_markdown(changes: Changes) -> str:
    """The review as a Markdown document for a validator's file."""
    lines = [f"# {heading(changes)}", ""]
    for block in review_blocks(changes, short=False):
        lines += [f"## {block.title}", ""]
        if block.rows:
            lines.append("| " + " | ".join(h for h, _ in block.headings) + " |")
            lines.append("|" + "|".join("---:" if j == "right" else "---"
                                        for _, j in block.headings) + "|")
            lines += ["| " + " | ".join(_markdown_cell(c) for c in row) + " |"
                      for row in block.rows]
            lines.append("")
        lines += [*(f"{note}\n" for note in block.notes)]
    lines.append(f"*{CAUTION}*")
    return "\n".join(lines) + "\n"


def _markdown_cell(text: str) -> str:
    return text.replace("|", "\\|").replace("\n", "<br>")


def changes_json(changes: Changes) -> str:
    """The review as JSON: every number at full precision."""
    return json.dumps(changes.to_dict(), indent=1, ensure_ascii=False, allow_nan=False) + "\n"
