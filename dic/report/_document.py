"""The report as plain data: sections of paragraphs, tables and figures, rendered to HTML and PDF
by separate modules."""

from __future__ import annotations

from dataclasses import dataclass, field

__all__ = ["Document", "FigureBlock", "Paragraph", "Section", "Table"]


@dataclass
class Paragraph:
    """A paragraph of text; ``kind`` is ``"text"``, ``"note"`` (smaller, grey) or ``"caution"``
    (framed)."""

    text: str
    kind: str = "text"


@dataclass
class Table:
    """A table of text cells; ``header`` may be empty for a two-column list of facts."""

    rows: list
    header: tuple = ()
    caption: str = ""


@dataclass
class FigureBlock:
    """A figure as PNG bytes with its pixel size, caption and text alternative."""

    png: bytes
    width: int
    height: int
    caption: str
    alt: str


@dataclass
class Section:
    """A numbered section with an anchor ``id`` (letters, digits and hyphens)."""

    id: str
    title: str
    blocks: list = field(default_factory=list)


@dataclass
class Document:
    """The whole report."""

    title: str
    subtitle: str
    generated: str
    sections: list = field(default_factory=list)
    footer: str = ""
