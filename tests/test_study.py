"""The study in the engine: run_study reproduces what `trapbudget rank` writes, bit for bit."""

from __future__ import annotations

from importlib import resources
from pathlib import Path

import pytest
import xarray as xr

from trapbudget.cli.main import main
from trapbudget.sensitivity import Study, load_dataset, load_scenario, run_study

#: Attrs that record where and when a result was made, not what it is.
PROVENANCE = ("date", "created", "source", "path")


def _without_provenance(ds: xr.Dataset) -> xr.Dataset:
    ds = ds.copy()
    ds.attrs = {k: v for k, v in ds.attrs.items() if k not in PROVENANCE}
    return ds


@pytest.fixture(scope="module")
def demo_scenario(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("demo")
    source = resources.files("trapbudget.examples") / "harrier-rb87.toml"
    path = folder / "harrier-rb87.toml"
    path.write_bytes(source.read_bytes())
    return path


@pytest.mark.filterwarnings("ignore::trapbudget.sensitivity.ModelValidityWarning")
def test_run_study_reproduces_the_rank_command(demo_scenario, tmp_path):
    out = tmp_path / "report"
    argv = ["rank", str(demo_scenario), "--seed", "7", "--samples", "64", "--no-convergence"]
    assert main([*argv, "--out", str(out), "--quiet"]) == 0
    study = run_study(load_scenario(demo_scenario), n_samples=64, rng=7, convergence=False)
    assert isinstance(study, Study)
    saved = study.save(tmp_path / "python")
    written = sorted(p.stem for p in out.glob("*.nc"))
    assert written == sorted(study.datasets)
    for name in written:
        from_cli = load_dataset(out / f"{name}.nc")
        from_python = load_dataset(saved / f"{name}.nc")
        xr.testing.assert_identical(
            _without_provenance(from_cli), _without_provenance(from_python)
        )
    assert study.seed == 7
    assert "harrier" in repr(study).lower() or "kite" in repr(study).lower()
    assert "<table>" in study._repr_html_()


def test_a_study_without_a_seed_draws_and_records_one(demo_scenario):
    scenario = load_scenario(demo_scenario)
    options = scenario.settings.resolve(rng=None)
    again = scenario.settings.resolve(rng=options.seed)
    assert options.seed is not None and again.seed == options.seed
    # rng=0 is a seed, not "no seed" (a lesson from the SALib peer, style.md).
    assert scenario.settings.resolve(rng=0).seed == 0


@pytest.mark.filterwarnings("ignore::trapbudget.sensitivity.ModelValidityWarning")
def test_the_monte_carlo_is_sized_by_the_adaptive_rule(demo_scenario):
    # JCGM 101:2008 clause 7.9: batches of max(100 / (1 - p), 10^4) trials (2^14 on Sobol',
    # one independent scramble each) until 2 s / sqrt(h) of y, u(y) and both interval ends
    # is below the numerical tolerance; the size does not follow the index base size.
    scenario = load_scenario(demo_scenario)
    small = run_study(scenario, n_samples=64, rng=3, convergence=False)
    large = run_study(scenario, n_samples=128, rng=3, convergence=False)
    samples = small["samples"]
    assert samples.attrs["batch_size"] == 2**14 and samples.attrs["n_batches"] >= 2
    assert samples.sizes["sample"] == samples.attrs["n_batches"] * 2**14
    assert samples.attrs["converged"] is True
    for name, spread in samples.attrs["achieved_tolerance"].items():
        assert max(spread) <= samples.attrs["numerical_tolerance"][name], name
    xr.testing.assert_identical(samples, large["samples"])
    assert small["budget"].attrs["n_samples"] == 64 and large["budget"].attrs["n_samples"] == 128
    # Requirement probabilities on as many independent random draws, with their interval.
    req = small["requirements"]
    assert req.attrs["sampling"] == "random"
    assert req.attrs["n_samples"] == samples.sizes["sample"]
    finite = req["probability"].notnull()
    assert bool((req["probability_low"] <= req["probability"]).where(finite, True).all())


@pytest.mark.filterwarnings("ignore::trapbudget.sensitivity.ModelValidityWarning")
def test_the_demo_study_converges(demo_scenario):
    # The demo's convergence loop reaches its stated tolerance (widest interval of every
    # index, Shapley effects included, below 0.05, and a stable ranking) before the limit.
    import warnings

    from trapbudget.sensitivity import BudgetConvergenceWarning

    with warnings.catch_warnings():
        warnings.simplefilter("error", BudgetConvergenceWarning)
        study = run_study(load_scenario(demo_scenario))
    budget = study["budget"]
    assert budget.attrs["converged"] is True
    assert budget["history_max_width"].values[-1] < budget.attrs["convergence_tolerance"]
    assert budget.attrs["headline"] == "shapley_effect"  # the demo declares correlations


def test_result_objects_have_short_reprs_for_notebooks(demo_scenario):
    scenario = load_scenario(demo_scenario)
    text = repr(scenario)
    assert len(text) < 300 and "VaporCellMOT" in text and "11 uncertain inputs" in text
    assert "<table>" in scenario._repr_html_()
    import matplotlib

    backend = matplotlib.get_backend()
    import trapbudget.reports.figures  # noqa: F401  (no backend switch on import)

    assert matplotlib.get_backend() == backend


def _blue_scenario(tolerances: dict[str, str]):
    from trapbudget.sensitivity.scenario.core import Scenario

    inputs = {
        name: {"nominal": value, "tolerance": tol} for name, (value, tol) in tolerances.items()
    }
    inputs["detuning"] = {"nominal": "+12 MHz"}  # blue of the cycling line: no trap
    return Scenario.from_dict(
        {
            "scenario": {"title": "blue detuning", "model": "VaporCellMOT", "species": "Rb87"},
            "inputs": inputs,
            "outputs": {"names": ["atom_number", "loading_time", "temperature"]},
            "settings": {"n_samples": 64, "seed": 5, "max_samples": 40000},
        }
    )


def test_outputs_without_variance_are_named_not_ranked():
    # Blue of resonance the light force heats (Metcalf & van der Straten, ch. 7): no trap,
    # zero atoms in every run, no cloud temperature; the loading time (1 / vapor loss) still
    # follows the vapor density and is ranked as usual
    from trapbudget.models import Validity
    from trapbudget.reports.conclusion import bottom_line
    from trapbudget.sensitivity.propagation import ModelValidityWarning

    scenario = _blue_scenario(
        {"cell_temperature": ("295 K", "1 K"), "beam_power": ("6 mW", "3 %")}
    )
    with pytest.warns(ModelValidityWarning, match="BLUE_DETUNING"):
        study = run_study(scenario, convergence=False)
    budget = study.datasets["budget"]
    assert list(budget["output"].values) == ["loading_time"]
    reasons = dict(
        zip(budget.attrs["unranked_outputs"], budget.attrs["unranked_reasons"], strict=True)
    )
    assert set(reasons) == {"atom_number", "temperature"}
    assert reasons["atom_number"].startswith("the same in every run (0)")
    assert reasons["temperature"].startswith("undefined in every run")
    assert all(Validity.BLUE_DETUNING.name in why for why in reasons.values())
    findings, sentences = bottom_line(study.datasets, study.record)
    unranked = [f for f in findings if f["kind"] == "unranked"]
    assert {f["output"] for f in unranked} == {"atom_number", "temperature"}
    assert any(f["kind"] == "next" and "predict" in f["command"] for f in findings)
    assert not any("nan" in sentence for sentence in sentences)


def test_a_study_where_nothing_varies_is_one_clear_error():
    from trapbudget.sensitivity.errors import ScenarioError
    from trapbudget.sensitivity.propagation import ModelValidityWarning

    # only the beam power is uncertain, and blue of resonance it changes nothing
    scenario = _blue_scenario({"beam_power": ("6 mW", "3 %")})
    with (
        pytest.warns(ModelValidityWarning, match="BLUE_DETUNING"),
        pytest.raises(ScenarioError, match=r"nothing to rank \(atom_number: the same in every"),
    ):
        run_study(scenario, convergence=False)
