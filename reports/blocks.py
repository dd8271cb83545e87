"""The blocks of a report (text, tables, figures, sections) and the registry of sections.

A section builder is ``builder(datasets, study) -> Section | None``; modules that
add sections call :func:`register_section` on import.
"""

from __future__ import annotations

import re
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import xarray as xr

__all__ = [
    "SECTION_BUILDERS",
    "Figure",
    "Section",
    "SectionBuilder",
    "Table",
    "Text",
    "register_section",
    "safe_stem",
]


@dataclass(frozen=True)
class Text:
    """A paragraph of plain text (escaped on output). ``kind``: 'p', 'note' or 'caution'."""

    text: str
    kind: str = "p"


@dataclass(frozen=True)
class Table:
    """A table of already formatted cells; ``numeric[i]`` right-aligns column i."""

    columns: Sequence[str]
    rows: Sequence[Sequence[str]]
    caption: str = ""
    numeric: Sequence[bool] | None = None

    def align(self, i: int) -> str:
        return "right" if self.numeric is not None and self.numeric[i] else "left"


def safe_stem(name: str, *, limit: int = 80) -> str:
    """``name`` as a file stem that stays inside its folder (no separators, dots or spaces)."""
    stem = re.sub(r"[^A-Za-z0-9_-]+", "_", str(name)).strip("_-")[:limit]
    return stem or "figure"


@dataclass(frozen=True)
class Figure:
    """A PNG figure; ``name`` is its file stem in ``figures/``.

    Names often come from data (an output's name in a saved Dataset), so they are
    reduced to a safe file stem: letters, digits, ``-`` and ``_`` only, never a path.
    """

    name: str
    png: bytes
    caption: str = ""

    def __post_init__(self) -> None:
        object.__setattr__(self, "name", safe_stem(self.name))


@dataclass
class Section:
    """One report section: a title and blocks, or its own template with a context."""

    title: str
    blocks: list[Text | Table | Figure] = field(default_factory=list)
    template: str | None = None
    context: dict[str, Any] = field(default_factory=dict)
    figures: list[Figure] = field(default_factory=list)

    @property
    def anchor(self) -> str:
        return re.sub(r"[^a-z0-9]+", "-", self.title.lower()).strip("-") or "section"

    def all_figures(self) -> list[Figure]:
        return [b for b in self.blocks if isinstance(b, Figure)] + list(self.figures)


SectionBuilder = Callable[[Mapping[str, xr.Dataset], Mapping[str, Any]], "Section | None"]

#: Builders of the sections that come after the core ones and before the closing ones.
SECTION_BUILDERS: list[SectionBuilder] = []


def register_section(builder: SectionBuilder) -> SectionBuilder:
    """Register ``builder(datasets, study) -> Section | None``; usable as a decorator."""
    if builder not in SECTION_BUILDERS:
        SECTION_BUILDERS.append(builder)
    return builder
