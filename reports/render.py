"""Report rendering: sections of blocks, HTML and Markdown through Jinja2, atomic report folders.

A report is a list of :class:`Section` objects. A section holds a title and a
list of blocks (:class:`Text`, :class:`Table`, :class:`Figure`) that the two
generic templates render, or names its own template pair
(``templates/<template>.html.j2`` and ``templates/<template>.md.j2``, given
``section.context``). Extra sections are added in two ways:

- pass ``extra_sections=[...]`` to :func:`render_report` / :func:`write_report`;
- or register a builder with :func:`register_section`: a callable
  ``builder(datasets, study) -> Section | None`` called on every render
  (return None when its Datasets are absent), so re-rendering a saved folder
  brings the section back too.

The HTML is self-contained (inline CSS, figures as base64 PNG) and autoescaped;
the Markdown sits beside ``figures/*.png``. Folders are built in a temporary
folder and moved into place."""

from __future__ import annotations

import base64
import os
import re
import shutil
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import jinja2
import xarray as xr
from markupsafe import Markup

from trapbudget.reports.blocks import (
    SECTION_BUILDERS,
    Figure,
    Section,
    Table,
    Text,
    safe_stem,
)
from trapbudget.sensitivity.errors import UsageError
from trapbudget.sensitivity.io import (
    atomic_write_bytes,
    atomic_write_json,
    atomic_write_text,
    clean_leftovers,
    default_mode,
    folder_lock,
    replace_folder,
    save_dataset,
    scratch_name,
)

__all__ = [
    "DATASET_NAMES",
    "RenderedReport",
    "build_sections",
    "import_section_modules",
    "load_report",
    "render_report",
    "rerender_report",
    "write_report",
]

#: Subfolder of a report that holds a copy of the scenario file it was made from.
INPUT_FOLDER = "input"

#: Datasets of a ``rank`` report folder, saved as ``<name>.nc`` (others may be added).
DATASET_NAMES: tuple[str, ...] = (
    "samples",
    "summary",
    "linear",
    "linear_check",
    "budget",
    "requirements",
)


def build_sections(
    datasets: Mapping[str, xr.Dataset],
    study: Mapping[str, Any],
    *,
    extra_sections: Sequence[Section] = (),
) -> list[Section]:
    """Core sections, registered ones, ``extra_sections``, then assumptions and cautions."""
    from trapbudget.reports import checks as core

    built: list[Section | None] = [b(datasets, study) for b in core.CORE_BUILDERS]
    built += [b(datasets, study) for b in SECTION_BUILDERS]
    built += list(extra_sections)
    built += [b(datasets, study) for b in core.CLOSING_BUILDERS]
    return [s for s in built if s is not None]


# --------------------------------------------------------------------------- templates

# Raw HTML in Markdown is live in most viewers: neutralise tags in every value.
# User text (titles, labels, notes) is carried as text: HTML tags, link and image
# syntax, emphasis, code, headings and table pipes are escaped, and newlines folded, so
# no value can start a heading, a link or a remote image in the Markdown report.
_MD_ESCAPES = str.maketrans(
    {
        "<": "&lt;",
        ">": "&gt;",
        **{c: "\\" + c for c in "\\`*[]#!|~{}"},
    }
)


_EDGE_UNDERSCORE = re.compile(r"(?<![A-Za-z0-9])_|_(?![A-Za-z0-9])")


def _md_finalize(value: Any) -> Any:
    if isinstance(value, Markup) or not isinstance(value, str):
        return value
    text = " ".join(value.split()).translate(_MD_ESCAPES)
    # an underscore inside a word (beam_power) is text; at a word's edge it could emphasise
    return _EDGE_UNDERSCORE.sub(r"\\_", text)


def _md_cell(value: Any) -> str:
    return " ".join(str(value).split())


def _md_raw(value: Any) -> Markup:
    """Template-made Markdown (anchors, figure paths) that must not be escaped."""
    return Markup(str(value))


def _environment(kind: str) -> jinja2.Environment:
    loader = jinja2.PackageLoader("trapbudget.reports", "templates")
    if kind == "html":
        env = jinja2.Environment(
            loader=loader,
            autoescape=True,
            trim_blocks=True,
            lstrip_blocks=True,
            undefined=jinja2.StrictUndefined,
        )
    else:
        env = jinja2.Environment(
            loader=loader,
            autoescape=False,
            trim_blocks=True,
            lstrip_blocks=True,
            finalize=_md_finalize,
            undefined=jinja2.StrictUndefined,
        )
        env.filters["mdcell"] = _md_cell
        env.filters["raw"] = _md_raw
    env.globals.update(
        is_text=lambda b: isinstance(b, Text),
        is_table=lambda b: isinstance(b, Table),
        is_figure=lambda b: isinstance(b, Figure),
    )
    return env


def _data_uri(png: bytes) -> str:
    return "data:image/png;base64," + base64.b64encode(png).decode("ascii")


@dataclass(frozen=True)
class RenderedReport:
    """The rendered report: HTML text, Markdown text and the figures by file stem."""

    html: str
    markdown: str
    figures: dict[str, bytes]


#: What a report is, by the result Dataset it holds (first match wins).
REPORT_KINDS: tuple[tuple[str, str], ...] = (
    ("calibration", "Calibration"),
    ("diagnosis", "Drift diagnosis"),
    ("allocation", "Tolerance allocation"),
    ("comparison", "Upgrade comparison"),
    ("scan", "Scan"),
)


def report_subtitle(datasets: Mapping[str, xr.Dataset], study: Mapping[str, Any]) -> str:
    """One line under the title: what kind of report, of which model, seed and size.

    The seed and the sample size are left out where the work had none (a calibration
    or a diagnosis draws no samples).
    """
    kind = next((text for name, text in REPORT_KINDS if name in datasets), "Error budget")
    model = " ".join(str(study.get(k, "") or "") for k in ("species", "model")).strip()
    parts = [f"{kind} of a {model} study" if model else kind]
    if study.get("seed") not in (None, ""):
        parts.append(f"seed {study['seed']}")
    n_samples = study.get("n_samples")
    if isinstance(n_samples, int | float) and n_samples > 0:
        # a study's n_samples is the base size of its index design, not its sample count
        parts.append(
            f"base N = {int(n_samples)}" if "budget" in datasets else f"{int(n_samples)} samples"
        )
    if study.get("date"):
        parts.append(str(study["date"]))
    return ", ".join(parts)


def render_report(
    datasets: Mapping[str, xr.Dataset],
    study: Mapping[str, Any],
    *,
    extra_sections: Sequence[Section] = (),
    figure_dir: str = "figures",
) -> RenderedReport:
    """Render the report's HTML and Markdown from the result Datasets and the study record."""
    sections = build_sections(datasets, study, extra_sections=extra_sections)
    subtitle = report_subtitle(datasets, study)
    figures: dict[str, bytes] = {}
    for section in sections:
        for fig in section.all_figures():
            if fig.name in figures:
                raise ValueError(f"two figures named {fig.name!r}; figure names must be unique")
            figures[fig.name] = fig.png
    html = (
        _environment("html")
        .get_template("report.html.j2")
        .render(study=study, subtitle=subtitle, sections=sections, data_uri=_data_uri)
    )
    markdown = (
        _environment("md")
        .get_template("report.md.j2")
        .render(study=study, subtitle=subtitle, sections=sections, figure_dir=figure_dir)
    )
    return RenderedReport(html=html, markdown=markdown, figures=figures)


# --------------------------------------------------------------------------- folders


def _write_rendered(folder: Path, rendered: RenderedReport) -> None:
    fig_dir = folder / "figures"
    fig_dir.mkdir(parents=True, exist_ok=True)
    for name, png in rendered.figures.items():
        atomic_write_bytes(fig_dir / f"{name}.png", png)
    for stale in fig_dir.glob("*.png"):
        if stale.stem not in rendered.figures:
            stale.unlink()
    atomic_write_text(folder / "report.html", rendered.html)
    atomic_write_text(folder / "report.md", rendered.markdown)


def _is_report_folder(folder: Path) -> bool:
    return (folder / "study.json").is_file() or not any(folder.iterdir())


def write_report(
    out: str | os.PathLike[str],
    *,
    datasets: Mapping[str, xr.Dataset],
    study: Mapping[str, Any],
    result: Mapping[str, Any] | None = None,
    scenario_file: str | os.PathLike[str] | None = None,
    extra_sections: Sequence[Section] = (),
    extra_files: Mapping[str, str] | None = None,
) -> Path:
    """Write a complete report folder atomically and return its path.

    The folder holds ``report.html``, ``report.md``, ``figures/*.png``, one
    NetCDF per Dataset (``<name>.nc``), ``study.json``, ``result.json`` (the
    machine-readable result, when given) and a copy of the scenario file. It
    is built in a temporary folder beside ``out`` and moved into place; an
    existing ``out`` is replaced only if it is empty or a previous report.
    ``extra_files`` maps file names to text written beside them (e.g. the spec
    sheet as CSV); names are reduced to safe file names.

    Raises
    ------
    UsageError
        If ``out`` is a file, or a folder that is not empty and not a report.
    """
    out = Path(out)
    with folder_lock(out):
        clean_leftovers(out)  # what killed runs left beside ``out``
        if out.exists() and (not out.is_dir() or not _is_report_folder(out)):
            raise UsageError(
                f"--out {out}: exists and is not a trapbudget report folder; give a new folder"
            )
        tmp = scratch_name(out, "part")
        tmp.mkdir()
        try:
            for name, ds in datasets.items():
                save_dataset(ds, tmp / f"{safe_stem(name)}.nc")
            atomic_write_json(tmp / "study.json", dict(study))
            for name, text in (extra_files or {}).items():
                stem, _, suffix = str(name).rpartition(".")
                safe = f"{safe_stem(stem)}.{safe_stem(suffix)}" if stem else safe_stem(suffix)
                (tmp / safe).write_text(text, encoding="utf-8")
            if result is not None:
                atomic_write_json(tmp / "result.json", dict(result))
            if scenario_file is not None and Path(scenario_file).is_file():
                # beside the results, never among them: a scenario named study.json or
                # budget.nc cannot overwrite a result file
                (tmp / INPUT_FOLDER).mkdir()
                shutil.copyfile(scenario_file, tmp / INPUT_FOLDER / Path(scenario_file).name)
            _write_rendered(tmp, render_report(datasets, study, extra_sections=extra_sections))
            os.chmod(tmp, default_mode(directory=True))
            replace_folder(tmp, out)
        finally:
            if tmp.exists():
                shutil.rmtree(tmp, ignore_errors=True)
    return out


def load_report(folder: str | os.PathLike[str]) -> tuple[dict[str, xr.Dataset], dict[str, Any]]:
    """Load the Datasets and the study record saved in a report folder."""
    import json

    from trapbudget.sensitivity.io import load_dataset

    folder = Path(folder)
    study_file = folder / "study.json"
    if not study_file.is_file():
        raise UsageError(
            f"{folder}: not a trapbudget report folder (no study.json); check the path"
        )
    study = json.loads(study_file.read_text(encoding="utf-8"))
    # The known Datasets first, in their order, then any other a section added.
    names = [n for n in DATASET_NAMES if (folder / f"{n}.nc").is_file()]
    names += sorted(p.stem for p in folder.glob("*.nc") if p.stem not in DATASET_NAMES)
    datasets = {name: load_dataset(folder / f"{name}.nc") for name in names}
    return datasets, study


def import_section_modules() -> None:
    """Import every module of ``trapbudget.reports`` so their registered sections apply.

    Section modules call :func:`register_section` on import; a folder written
    by any subcommand then re-renders with its sections (each builder returns
    None when its Datasets are absent).
    """
    import importlib
    import pkgutil

    for info in pkgutil.iter_modules([str(Path(__file__).parent)]):
        importlib.import_module(f"{__package__}.{info.name}")


def rerender_report(
    folder: str | os.PathLike[str], *, extra_sections: Sequence[Section] = ()
) -> tuple[dict[str, xr.Dataset], dict[str, Any], Path]:
    """Re-render ``report.html``, ``report.md`` and the figures of a saved report folder."""
    folder = Path(folder)
    datasets, study = load_report(folder)
    import_section_modules()
    with folder_lock(folder):
        _write_rendered(folder, render_report(datasets, study, extra_sections=extra_sections))
    return datasets, study, folder
