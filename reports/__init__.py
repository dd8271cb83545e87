"""Rendering of result Datasets: terminal tables, HTML and Markdown reports, figures.

The report is a list of sections (:class:`Section` of :class:`Text`,
:class:`Table` and :class:`Figure` blocks) rendered to self-contained HTML and
Markdown; :func:`write_report` writes a whole report folder atomically and
:func:`rerender_report` renders it again from its saved Datasets. Figures
(``trapbudget.reports.figures``) and terminal tables
(``trapbudget.reports.terminal``) are imported on use, as they pull in
matplotlib and rich.
"""

from trapbudget.reports.blocks import Figure, Section, Table, Text, register_section
from trapbudget.reports.render import (
    RenderedReport,
    build_sections,
    load_report,
    render_report,
    rerender_report,
    write_report,
)
from trapbudget.reports.results import prediction_json, study_json

__all__ = [
    "Figure",
    "RenderedReport",
    "Section",
    "Table",
    "Text",
    "build_sections",
    "load_report",
    "prediction_json",
    "register_section",
    "render_report",
    "rerender_report",
    "study_json",
    "write_report",
]
