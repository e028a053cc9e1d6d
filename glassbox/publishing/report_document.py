"""The report as a document (sections of paragraphs, lists, tables and pictures) and its
two renderings: one self-contained HTML page and Markdown with the pictures beside it.

`glassbox.publishing.report` builds the document; this module lays it out and writes it.
"""

from __future__ import annotations

import base64
import html
import io
import re
import string
from collections.abc import Iterable, Mapping
from dataclasses import dataclass, field
from pathlib import Path

import pandas as pd
from matplotlib.figure import Figure

from glassbox.core.errors import OptionError
from glassbox.core.files import output_folder, write_atomic
from glassbox.core.formats import to_markdown as table_markdown
from glassbox.publishing import palette
from glassbox.publishing.render import cell

HTML_NAME = "report.html"
MARKDOWN_NAME = "report.md"
PNG_METADATA = {"Software": None}  # no version or time stamp inside the PNG bytes

@dataclass(frozen=True, eq=False)
class Paragraph:
    text: str


@dataclass(frozen=True, eq=False)
class Bullets:
    items: tuple[str, ...]
    caution: bool = False


@dataclass(frozen=True, eq=False)
class Table:
    """A table for people; cells are shown as `render.cell` writes them."""

    frame: pd.DataFrame
    caption: str = ""
    pairs: bool = False  # a two-column list of items and values


@dataclass(frozen=True, eq=False)
class Picture:
    """A figure, saved as `name`.png beside the Markdown and embedded in the HTML."""

    name: str
    figure: Figure
    alt: str


Block = Paragraph | Bullets | Table | Picture


@dataclass(frozen=True, eq=False)
class Section:
    title: str
    blocks: tuple[Block, ...]
    level: int = 2

    @property
    def anchor(self) -> str:
        return re.sub(r"[^a-z0-9]+", "-", self.title.lower()).strip("-") or "section"


@dataclass(frozen=True, eq=False)
class Report:
    """Everything the report says, in order."""

    title: str
    intro: str
    sections: tuple[Section, ...]
    facts: Mapping[str, object] = field(default_factory=dict)  # for tests and tools

    @property
    def pictures(self) -> list[Picture]:
        return [b for s in self.sections for b in s.blocks if isinstance(b, Picture)]

    @property
    def headings(self) -> list[str]:
        return [section.title for section in self.sections]


def check_folder(folder: str | Path) -> Path:
    """Fail early when the report folder is an existing file."""
    folder = Path(folder)
    if folder.exists() and not folder.is_dir():
        raise OptionError(f"cannot write the report into {folder}: it is a file, not a folder")
    return folder


def unique_names(names: Iterable[str], taken: Iterable[str] = ()) -> list[str]:
    """The names, with -2, -3, ... added to repeats (and to names already taken)."""
    seen: dict[str, int] = dict.fromkeys(taken, 1)
    out = []
    for name in names:
        count = seen.get(name, 0)
        seen[name] = count + 1
        out.append(name if count == 0 else f"{name}-{count + 1}")
    return out



# ---------------------------------------------------------------- rendering


def png_bytes(figure: Figure) -> bytes:
    """A figure as PNG bytes that repeat exactly for the same figure."""
    buffer = io.BytesIO()
    figure.savefig(buffer, format="png", metadata=PNG_METADATA)
    return buffer.getvalue()


def picture_files(report: Report) -> dict[str, bytes]:
    """File name to PNG bytes for every picture of the report."""
    return {_picture_file(picture): png_bytes(picture.figure) for picture in report.pictures}


def _picture_file(picture: Picture) -> str:
    return f"{picture.name}.png"


def output_files(report: Report | None = None) -> list[tuple[str, str]]:
    """(name, kind) of the files `write_report` writes: the two pages, then the pictures
    (known once the report is built)."""
    pictures = [] if report is None else report.pictures
    return [(HTML_NAME, "html"), (MARKDOWN_NAME, "markdown"),
            *((_picture_file(picture), "png") for picture in pictures)]


def _cells(frame: pd.DataFrame) -> pd.DataFrame:
    return frame.map(lambda value: cell(value)).astype(str)


STYLE = string.Template("""
body { margin: 0; background: $PAGE; color: $INK;
  font: 15px/1.5 "DejaVu Sans", "Liberation Sans", Arial, sans-serif; }
main { max-width: 920px; margin: 0 auto; padding: 24px 28px 64px; background: $PAPER;
  border-left: 1px solid $EDGE; border-right: 1px solid $EDGE; }
h1 { font-size: 26px; margin: 8px 0 4px; color: $HEADING; }
h2 { font-size: 20px; margin: 36px 0 10px; padding-bottom: 4px; color: $HEADING;
  border-bottom: 2px solid $RULE; }
h3 { font-size: 16px; margin: 28px 0 8px; color: $HEADING; }
p.intro { color: $QUIET; margin-top: 0; }
nav ol { columns: 2; margin: 8px 0 0; padding-left: 22px; font-size: 14px; }
nav a { color: $LINK; text-decoration: none; }
ul.caution { background: $CAUTION_PAPER; border-left: 5px solid $CAUTION_EDGE; margin: 0;
  padding: 12px 16px 12px 34px; }
ul.caution li { margin: 4px 0; }
table { border-collapse: collapse; margin: 8px 0 4px; font-size: 13px; }
caption { caption-side: top; text-align: left; font-weight: bold; padding: 4px 0; }
th { text-align: left; background: $HEADER_PAPER; border-bottom: 1px solid $HEADER_RULE; }
th, td { padding: 3px 10px 3px 6px; vertical-align: top; }
td { border-bottom: 1px solid $CELL_RULE; overflow-wrap: anywhere; }
td.number { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
table.pairs td:first-child { font-weight: bold; white-space: nowrap; }
tr:nth-child(even) td { background: $STRIPE; }
figure { margin: 10px 0; }
img { max-width: 100%; height: auto; border: 1px solid $CELL_RULE; }
""").substitute(vars(palette))  # colours: the house palette (glassbox/publishing/palette.py)


def _numeric(column: pd.Series) -> bool:
    text = column.astype(str).str.replace(r"[%,]", "", regex=True).str.strip()
    return bool(len(text)) and bool(pd.to_numeric(text.where(text != "", "0"),
                                                  errors="coerce").notna().all())


def _html_table(table: Table) -> str:
    frame = _cells(table.frame)
    numeric = [_numeric(frame[c]) for c in frame.columns]
    parts = ['<table class="pairs">' if table.pairs else "<table>"]
    if table.caption:
        parts.append(f"<caption>{html.escape(table.caption)}</caption>")
    parts.append("<thead><tr>" + "".join(f"<th>{html.escape(str(c))}</th>"
                                        for c in frame.columns) + "</tr></thead><tbody>")
    for row in frame.itertuples(index=False):
        cells = "".join(f'<td class="number">{html.escape(v)}</td>' if num
                        else f"<td>{html.escape(v)}</td>"
                        for v, num in zip(row, numeric, strict=True))
        parts.append(f"<tr>{cells}</tr>")
    parts.append("</tbody></table>")
    return "\n".join(parts)


def _html_block(block: Block, images: Mapping[str, bytes]) -> str:
    if isinstance(block, Paragraph):
        return f"<p>{html.escape(block.text)}</p>"
    if isinstance(block, Bullets):
        kind = ' class="caution"' if block.caution else ""
        items = "".join(f"<li>{html.escape(item)}</li>" for item in block.items)
        return f"<ul{kind}>{items}</ul>"
    if isinstance(block, Table):
        return _html_table(block)
    data = base64.b64encode(images[f"{block.name}.png"]).decode("ascii")
    width, height = (int(round(v)) for v in block.figure.get_size_inches() * block.figure.dpi)
    return (f'<figure><img src="data:image/png;base64,{data}" alt="{html.escape(block.alt)}" '
            f'width="{width}" height="{height}"></figure>')


def to_html(report: Report, images: Mapping[str, bytes] | None = None) -> str:
    """One self-contained page: CSS inline, pictures as data URIs, no scripts or links out."""
    images = picture_files(report) if images is None else images
    anchors = unique_names(s.anchor for s in report.sections)
    contents = "".join(f'<li><a href="#{anchor}">{html.escape(s.title)}</a></li>'
                       for s, anchor in zip(report.sections, anchors, strict=True)
                       if s.level == 2)
    body = [f"<h1>{html.escape(report.title)}</h1>",
            f'<p class="intro">{html.escape(report.intro)}</p>',
            f"<nav><strong>Contents</strong><ol>{contents}</ol></nav>"]
    for section, anchor in zip(report.sections, anchors, strict=True):
        body.append(f'<h{section.level} id="{anchor}">{html.escape(section.title)}'
                    f"</h{section.level}>")
        body += [_html_block(block, images) for block in section.blocks]
    return ("<!DOCTYPE html>\n<html lang=\"en\">\n<head>\n<meta charset=\"utf-8\">\n"
            "<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\">\n"
            f"<title>{html.escape(report.title)}</title>\n<style>{STYLE}</style>\n</head>\n"
            "<body>\n<main>\n" + "\n".join(body) + "\n</main>\n</body>\n</html>\n")


def to_markdown(report: Report) -> str:
    """The same content as Markdown; pictures are linked as NAME.png beside the file."""
    lines = [f"# {report.title}", "", report.intro, ""]
    for section in report.sections:
        lines += ["#" * section.level + f" {section.title}", ""]
        for block in section.blocks:
            if isinstance(block, Paragraph):
                lines += [block.text, ""]
            elif isinstance(block, Bullets):
                prefix = "> " if block.caution else ""
                lines += [f"{prefix}- {item}" for item in block.items] + [""]
            elif isinstance(block, Table):
                if block.caption:
                    lines += [f"**{block.caption}**", ""]
                lines += [table_markdown(_cells(block.frame)).rstrip("\n"), ""]
            else:
                lines += [f"![{block.alt}]({block.name}.png)", ""]
    return "\n".join(lines)


def write_report(report: Report, folder: str | Path) -> list[Path]:
    """Write report.html, report.md and the pictures into `folder`; return the paths."""
    folder = output_folder(check_folder(folder), "the report")
    images = picture_files(report)
    paths = []
    for name, content in images.items():
        write_atomic(folder / name, content)
        paths.append(folder / name)
    write_atomic(folder / MARKDOWN_NAME, to_markdown(report))
    write_atomic(folder / HTML_NAME, to_html(report, images))
    return [folder / HTML_NAME, folder / MARKDOWN_NAME, *paths]
