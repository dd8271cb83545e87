"""Tests of the report layer (trapbudget.reports), driven by Datasets built here to the
DEVELOPERS.md schemas from a linear model whose indices are known in closed form."""

from __future__ import annotations

import io
import json

import matplotlib.image as mpimg
import numpy as np
import pytest
import xarray as xr

from trapbudget.reports import figures
from trapbudget.reports.blocks import SECTION_BUILDERS, Section, Table, Text, register_section
from trapbudget.reports.formatting import format_number, format_quantity
from trapbudget.reports.render import load_report, render_report, rerender_report, write_report
from trapbudget.reports.results import study_json
from trapbudget.reports.sections import budget_rows

INPUTS = ("beam_power", "detuning", "unused")
COEFFICIENTS = np.array([2.0e11, 3.0e3, 0.0])  # invented: atoms per W, atoms per Hz, none
STD = np.array([1.0e-4, 5.0e5, 1.0])  # invented standard uncertainties (W, Hz, 1)
NOMINAL = np.array([4.0e-3, -12e6, 0.0])
UNITS = {"beam_power": "W", "detuning": "Hz", "unused": ""}


def _linear_datasets(n: int = 4096, seed: int = 3, second_order: bool = False):
    """Datasets of Y = sum b_i x_i with independent normal x_i, to the DEVELOPERS.md schema.

    Closed form for a linear model with independent inputs (Saltelli et al. 2008, Primer,
    section 1.2.3): S_i = ST_i = b_i^2 s_i^2 / sum_j b_j^2 s_j^2.
    """
    rng = np.random.default_rng(seed)
    x = NOMINAL + STD * rng.standard_normal((n, 3))
    y = x @ COEFFICIENTS
    y0 = float(NOMINAL @ COEFFICIENTS)
    samples = xr.Dataset(
        {
            name: ("sample", x[:, i], {"units": UNITS[name], "role": "input"})
            for i, name in enumerate(INPUTS)
        },
        attrs={"method": "random", "n_samples": n, "seed": seed},
    )
    samples["atom_number"] = ("sample", y, {"units": "", "role": "output"})
    samples["validity"] = ("sample", np.where(np.arange(n) < 7, 4, 0))
    samples.attrs["validity_counts"] = {"NO_CAPTURE": 7}
    q = np.quantile(y, [0.025, 0.975])
    summary = xr.Dataset(
        {
            key: ("output", [value])
            for key, value in {
                "mean": y.mean(),
                "std": y.std(ddof=1),
                "median": np.median(y),
                "interval_low": q[0],
                "interval_high": q[1],
                "shortest_low": q[0],
                "shortest_high": q[1],
                "nominal": y0,
            }.items()
        },
        coords={"output": ["atom_number"]},
        attrs={"units_atom_number": "", "confidence_level": 0.95},
    )
    var = COEFFICIENTS**2 * STD**2
    s = var / var.sum()
    one = ("output", "input")
    budget = xr.Dataset(
        {
            "first_order": (one, [s]),
            "first_order_low": (one, [s - 0.01]),
            "first_order_high": (one, [s + 0.01]),
            "total_order": (one, [s]),
            "total_order_low": (one, [s - 0.01]),
            "total_order_high": (one, [s + 0.01]),
            "interaction": (one, [np.zeros(3)]),
            "rank": (one, [np.array([2, 1, 3])]),
            "variance_share": (one, [var]),
            "sensitivity_coefficient": (one, [COEFFICIENTS]),
            "input_uncertainty": ("input", STD),
            "uncertainty_contribution": (one, [np.abs(COEFFICIENTS) * STD]),
            "below_noise_floor": (one, [np.array([False, False, True])]),
            "output_mean": ("output", [y.mean()]),
            "output_std": ("output", [np.sqrt(var.sum())]),
            "history_first_order": (("step", "output", "input"), np.stack([[s], [s]])),
            "history_total_order": (("step", "output", "input"), np.stack([[s], [s]])),
        },
        coords={
            "output": ["atom_number"],
            "input": list(INPUTS),
            "step_n_samples": ("step", [512, 1024]),
        },
        attrs={
            "method": "sobol",
            "n_samples": 1024,
            "n_evaluations": 5120,
            "seed": seed,
            "confidence_level": 0.95,
            "converged": True,
        },
    )
    if second_order:
        m = np.full((3, 3), np.nan)
        m[0, 1], m[0, 2], m[1, 2] = 0.02, 0.0, 0.001
        budget["second_order"] = (("output", "input", "input_b"), [m])
        budget = budget.assign_coords(input_b=list(INPUTS))
    linear = xr.Dataset(
        {
            "sensitivity_coefficient": (one, [COEFFICIENTS]),
            "input_uncertainty": ("input", STD),
            "uncertainty_contribution": (one, [np.abs(COEFFICIENTS) * STD]),
            "output_nominal": ("output", [y0]),
            "output_std_linear": ("output", [np.sqrt(var.sum())]),
        },
        coords={"output": ["atom_number"], "input": list(INPUTS)},
    )
    return {"samples": samples, "summary": summary, "budget": budget, "linear": linear}


def _study(title="Invented test lab: linear stand-in"):
    return {
        "title": title,
        "description": "Invented numbers for a test.",
        "species": "Rb87",
        "model": "linear",
        "model_options": {},
        "trapbudget_version": "test",
        "seed": 3,
        "n_samples": 1024,
        "n_evaluations": 9216,
        "method": "sobol",
        "confidence_level": 0.95,
        "date": "2026-01-01 00:00 UTC",
        "sha256": "0" * 64,
        "scenario_file": "test.toml",
        "outputs": ["atom_number"],
        "inputs": [
            {
                "name": n,
                "description": f"meaning of {n}",
                "unit": UNITS[n],
                "nominal": NOMINAL[i],
                "nominal_text": format_quantity(NOMINAL[i], UNITS[n]),
                "tolerance_text": "2 %",
                "shape": "normal",
                "meaning": "standard",
                "standard_uncertainty": STD[i],
                "u_text": format_quantity(STD[i], UNITS[n]),
                "relative_u_text": "",
                "group": "",
            }
            for i, n in enumerate(INPUTS)
        ],
        "fixed": [],
        "correlations": [{"a": "beam_power", "b": "detuning", "coefficient": 0.5}],
        "requirements": [],
        "assumptions": ["A stand-in linear model."],
    }


def test_html_escapes_scenario_title():
    # Jinja2 autoescape (common practice for HTML built from user text).
    datasets = _linear_datasets(n=512)
    rendered = render_report(datasets, _study(title="<script>alert(1)</script>"))
    assert "<script>alert(1)</script>" not in rendered.html
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in rendered.html
    assert "<script>" not in rendered.markdown


def test_html_is_self_contained_and_has_every_section():
    rendered = render_report(_linear_datasets(n=512, second_order=True), _study())
    for title in (
        "What was studied",
        "Inputs and tolerances",
        "Outputs",
        "Error budget",
        "Interactions",
        "Output against its top drifts",
        "Linear check",
        "Convergence",
        "Validity",
        "Model assumptions and limits",
        "Safety",
    ):
        assert f">{title}</h2>" in rendered.html, title
        assert f"## {title}" in rendered.markdown, title
    assert "http://" not in rendered.html and "https://" not in rendered.html
    assert rendered.html.count("data:image/png;base64,") == len(rendered.figures)
    assert "laser-safety officer" in rendered.html
    for name, png in rendered.figures.items():
        assert f"figures/{name}.png" in rendered.markdown
        image = mpimg.imread(io.BytesIO(png), format="png")
        assert image.ndim == 3 and image.shape[0] > 100


def test_budget_rows_follow_the_closed_form_ranking():
    # Linear model, independent inputs: S_i = b_i^2 s_i^2 / Var(Y) (Saltelli et al. 2008 Primer).
    datasets = _linear_datasets(n=512)
    var = COEFFICIENTS**2 * STD**2
    rows = budget_rows(datasets["budget"], "atom_number")
    assert [r[1] for r in rows] == ["detuning", "beam_power", "unused (noise floor)"]
    assert rows[0][3].startswith(f"{var[1] / var.sum():.3f}")
    # sqrt(variance share) of the top input equals |b| s in output units.
    assert rows[0][5] == format_quantity(abs(COEFFICIENTS[1]) * STD[1], "")


def test_write_and_rerender_give_the_same_tables(tmp_path):
    datasets = _linear_datasets(n=1024)
    study = _study()
    out = write_report(
        tmp_path / "rep", datasets=datasets, study=study, result=study_json(datasets, study)
    )
    html, md = (out / "report.html").read_text(), (out / "report.md").read_text()
    loaded, study2 = load_report(out)
    assert set(loaded) == set(datasets)
    (out / "report.md").unlink()
    rerender_report(out)
    assert (out / "report.md").read_text() == md
    assert (out / "report.html").read_text() == html
    assert json.loads((out / "result.json").read_text()) == study_json(loaded, study2)
    assert not list(tmp_path.glob(".rep*")), "temporary folders must not be left behind"


def test_write_report_refuses_a_foreign_folder(tmp_path):
    (tmp_path / "notes.txt").write_text("mine")
    with pytest.raises(Exception, match="is not a trapbudget report folder"):
        write_report(tmp_path, datasets=_linear_datasets(n=256), study=_study())
    assert (tmp_path / "notes.txt").read_text() == "mine"


def test_study_json_carries_summary_and_ranked_indices():
    datasets = _linear_datasets(n=2048)
    result = study_json(datasets, _study())
    entry = result["outputs"]["atom_number"]
    assert entry["summary"]["mean"] == pytest.approx(float(datasets["summary"]["mean"][0]))
    ranked = [r["input"] for r in entry["ranked_inputs"]]
    assert ranked == ["detuning", "beam_power", "unused"]
    assert {"first_order", "total_order", "total_order_low"} <= set(entry["ranked_inputs"][0])
    json.dumps(result, allow_nan=False)  # strict JSON: no NaN


def test_extra_sections_and_registered_builders_are_rendered():
    datasets = _linear_datasets(n=256)
    extra = Section("Spec sheet", [Text("allocation <b>here</b>"), Table(["a|b"], [["1|2"]])])

    def builder(ds, study):
        return Section("Registered section", [Text("from a builder")])

    register_section(builder)
    try:
        rendered = render_report(datasets, _study(), extra_sections=[extra])
    finally:
        SECTION_BUILDERS.remove(builder)
    assert "allocation &lt;b&gt;here&lt;/b&gt;" in rendered.html
    assert "| a\\|b |" in rendered.markdown
    assert rendered.html.index("Registered section") < rendered.html.index("Spec sheet")
    assert rendered.html.index("Spec sheet") < rendered.html.index(">Safety</h2>")


def test_figures_without_optional_data_return_none():
    budget = _linear_datasets(n=256)["budget"].drop_vars(["history_total_order"])
    assert figures.convergence_figure(budget, "atom_number") is None
    assert figures.interaction_figure(budget, "atom_number") is None


@pytest.mark.parametrize(
    ("value", "text"),
    [(0.00123456, "0.00123"), (123456.0, "1.23e+05"), (-12.0, "-12.0"), (0.0, "0")],
)
def test_format_number(value, text):
    # Significant-digit rounding as Python's format spec defines it (Python docs, format spec).
    assert format_number(value) == text


def test_given_data_budget_ranks_by_delta_and_plots_its_history():
    # Correlated inputs: Sobol' total-order indices are undefined (NaN); the budget carries
    # the moment-independent delta (Borgonovo 2007) and the report must show that instead.
    datasets = _linear_datasets(n=512)
    budget = datasets["budget"]
    delta = budget["first_order"] * 0.8
    budget["delta"] = delta
    budget["delta_low"], budget["delta_high"] = delta - 0.01, delta + 0.01
    budget["history_delta"] = budget["history_first_order"] * 0.8
    for key in ("total_order", "total_order_low", "total_order_high", "history_total_order"):
        budget[key] = budget[key] * np.nan
    budget.attrs["method"] = "delta"
    rendered = render_report(datasets, _study())
    assert "| Delta (moment-independent) |" in rendered.markdown
    assert "Total order" not in rendered.markdown
    png = figures.convergence_figure(budget, "atom_number")
    assert png is not None and png in rendered.figures.values()
    result = study_json(datasets, _study())
    top = result["outputs"]["atom_number"]["ranked_inputs"][0]
    assert top["total_order"] is None and top["delta"] == pytest.approx(float(delta[0, 1]))
    assert result["index_method"] == "delta"
    json.dumps(result, allow_nan=False)


def test_validity_section_counts_flagged_samples():
    rendered = render_report(_linear_datasets(n=512), _study())
    assert "Monte Carlo samples: 7 of 512 outside the model&#39;s validity." in rendered.html
    assert "| NO_CAPTURE | 7 |" in rendered.markdown


def test_public_names_exist():
    # The package's __all__ names what it exports (common practice, checked as in httpx).
    import trapbudget.reports as package

    for name in package.__all__:
        assert hasattr(package, name), name


def test_rerender_loads_datasets_other_sections_added(tmp_path):
    datasets = _linear_datasets(n=256)
    extra = xr.Dataset({"x": ("k", [1.0, 2.0])})
    out = write_report(tmp_path / "r", datasets={**datasets, "extra_table": extra}, study=_study())
    loaded, _ = load_report(out)
    assert list(loaded)[: len(datasets)] == [
        n
        for n in ("samples", "summary", "linear", "linear_check", "budget", "requirements")
        if n in datasets
    ]
    assert "extra_table" in loaded


def test_terminal_tables_keep_their_headers_for_every_output():
    from trapbudget.reports.terminal import budget_tables

    datasets = _linear_datasets(n=256)
    budget = datasets["budget"]
    per_output = [v for v in budget.data_vars if "output" in budget[v].dims]
    parts = [budget[per_output], budget[per_output].assign_coords(output=["fluorescence"])]
    two = xr.concat(parts, dim="output", data_vars="all")
    tables = budget_tables(datasets["summary"], two)
    assert len(tables) == 2
    for table in tables:
        assert [c.header for c in table.columns][:3] == ["#", "input", "total order"]
