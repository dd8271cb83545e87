"""Summary-only Monte Carlo (trapbudget.sensitivity.streaming): bounded memory, same summary."""

from __future__ import annotations

import math
from importlib import resources

import numpy as np
import pytest
from scipy import stats

from trapbudget.sensitivity import load_scenario, propagate, summarize
from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.guard import memory_needed
from trapbudget.sensitivity.propagation import propagate_adaptive
from trapbudget.sensitivity.streaming import SUMMARY_ONLY_SAMPLES, choose_keep
from trapbudget.sensitivity.testfunctions import LinearModel

# float32 keeps 24 significant bits: rounding moves a value by at most 2^-24 of itself
# (IEEE 754 binary32, round to nearest), and rounding is monotone, so each order
# statistic of the float32 values is the float32 of the float64 one.
FLOAT32_ROUNDING = 2.0**-24


def test_summary_only_gives_the_in_memory_summary_to_float32_rounding():
    scenario = load_scenario(resources.files("trapbudget.examples") / "harrier-rb87.toml")
    outputs = list(scenario.outputs)
    runs = {
        keep: propagate(
            scenario.model,
            scenario.inputs,
            n_samples=2**13,
            rng=21,
            outputs=outputs,
            nominal=scenario.nominal,
            correlation=scenario.correlation,
            chunk_size=1024,
            keep=keep,
        )
        for keep in ("all", "outputs")
    }
    held = runs["outputs"]
    assert held.attrs["kept"] == "outputs"
    assert not any(name in held for name in scenario.inputs)  # no input columns held
    assert held[outputs[0]].dtype == np.float32
    full, summary_only = summarize(runs["all"]), summarize(held)
    for key in ("interval_low", "interval_high", "shortest_low", "shortest_high", "median"):
        np.testing.assert_allclose(
            summary_only[key].values, full[key].values, rtol=FLOAT32_ROUNDING, atol=0
        )
    # moments streamed in float64 (Chan, Golub & LeVeque 1983 pairwise update): the sums
    # differ from numpy's only in the order of additions
    for key in ("mean", "std"):
        np.testing.assert_allclose(summary_only[key].values, full[key].values, rtol=1e-12)


def test_summary_only_interval_of_a_normal_output_within_its_sampling_error():
    n = 2**16
    ds = propagate(
        LinearModel((1.0,)),
        {"x1": stats.norm()},
        n_samples=n,
        method="random",
        rng=8,
        keep="outputs",
    )
    summary = summarize(ds, confidence_level=0.95)
    # Sample p-quantile: asymptotically normal, sd sqrt(p (1 - p) / n) / f(q_p)
    # (Serfling 1980, Approximation Theorems of Mathematical Statistics, 2.3.3);
    # exact quantiles from scipy.stats.norm; 4.5 sd over the 6 checks of this test.
    for key, p in (("interval_low", 0.025), ("interval_high", 0.975), ("median", 0.5)):
        q = stats.norm.ppf(p)
        sd = math.sqrt(p * (1 - p) / n) / stats.norm.pdf(q)
        assert abs(float(summary[key].item()) - q) < 4.5 * sd, key
    # mean: sd 1/sqrt(n); standard deviation: sd about 1/sqrt(2 n) for a normal sample
    assert abs(float(summary["mean"].item())) < 4.5 / math.sqrt(n)
    assert abs(float(summary["std"].item()) - 1.0) < 4.5 / math.sqrt(2 * n)
    assert ds.attrs["moments"]["y"][0] == n


def test_large_runs_keep_outputs_only_from_the_stated_size():
    assert choose_keep(None, SUMMARY_ONLY_SAMPLES, 12, 4) == "outputs"
    assert choose_keep(None, SUMMARY_ONLY_SAMPLES // 2, 12, 4) == "all"
    assert choose_keep("all", SUMMARY_ONLY_SAMPLES, 12, 4) == "all"
    with pytest.raises(ValueError, match="keep='some' is not known"):
        choose_keep("some", 8, 1, 1)  # type: ignore[arg-type]


def test_the_memory_guard_no_longer_refuses_what_summary_only_can_hold(monkeypatch):
    n = 2**15
    full = memory_needed("propagate", n, 1, 1)
    # a machine with half of what the full run needs: summary-only, not a refusal
    for module in ("guard", "streaming"):
        monkeypatch.setattr(f"trapbudget.sensitivity.{module}.available_memory", lambda: full // 2)
    ds = propagate(LinearModel((1.0,)), {"x1": stats.norm()}, n_samples=n, rng=1)
    assert ds.attrs["kept"] == "outputs" and ds.sizes["sample"] == n
    # a machine that cannot hold even the outputs: refused, naming a size that fits
    for module in ("guard", "streaming"):
        monkeypatch.setattr(f"trapbudget.sensitivity.{module}.available_memory", lambda: 4096)
    with pytest.raises(ScenarioError, match=r"n_samples = 32768 would need about .* use"):
        propagate(LinearModel((1.0,)), {"x1": stats.norm()}, n_samples=n, rng=1)


def test_adaptive_run_joins_the_moments_of_its_batches():
    ds = propagate_adaptive(
        LinearModel((2.0,), offset=1.0),
        {"x1": stats.norm()},
        max_samples=SUMMARY_ONLY_SAMPLES,
        rng=4,
        significant_digits=1,
    )
    assert ds.attrs["kept"] == "outputs"
    count, mean, std = ds.attrs["moments"]["y"]
    y = ds["y"].values.astype(float)
    assert count == y.size == ds.attrs["n_samples"]
    # the float64 moments of the batches joined agree with the float32 values kept
    assert mean == pytest.approx(float(np.mean(y)), rel=8 * FLOAT32_ROUNDING)
    assert std == pytest.approx(float(np.std(y, ddof=1)), rel=8 * FLOAT32_ROUNDING)


@pytest.mark.parametrize(("method", "n"), [("random", 1000), ("sobol", 1024), ("latin", 100)])
def test_points_drawn_chunk_by_chunk_are_those_of_one_draw(method, n):
    from trapbudget.sensitivity.sampling import unit_design
    from trapbudget.sensitivity.streaming import _unit_chunks

    whole = unit_design(n, 3, method=method, rng=17)
    chunks = list(_unit_chunks(n, 3, method=method, rng=17, chunk_size=256))
    assert [len(c) for c in chunks] == [min(256, n - s) for s in range(0, n, 256)]
    np.testing.assert_array_equal(np.concatenate(chunks), whole)


def test_a_summary_only_study_is_saved_and_reported(monkeypatch, tmp_path):
    from trapbudget.reports.render import write_report
    from trapbudget.reports.results import study_json
    from trapbudget.sensitivity import load_dataset, run_study

    # every Monte Carlo of the study summary-only, as a run of 2^22 samples would be
    monkeypatch.setattr("trapbudget.sensitivity.streaming.SUMMARY_ONLY_SAMPLES", 1)
    scenario = load_scenario(resources.files("trapbudget.examples") / "harrier-rb87.toml")
    study = run_study(scenario, n_samples=16, rng=3, convergence=False)
    samples = study["samples"]
    assert samples.attrs["kept"] == "outputs"
    assert not any(name in samples for name in scenario.inputs)
    datasets = dict(study.datasets)
    out = write_report(
        tmp_path / "report",
        datasets=datasets,
        study=dict(study.record),
        result=study_json(datasets, dict(study.record)),
    )
    saved = load_dataset(out / "samples.nc")
    assert saved.attrs["moments"] == samples.attrs["moments"]
    assert "Output against its top drifts" not in (out / "report.md").read_text(encoding="utf-8")
