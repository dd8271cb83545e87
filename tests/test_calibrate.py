"""Model calibration (trapbudget.sensitivity.calibrate) on an analytic model, known constants."""

from __future__ import annotations

import dataclasses
import math
from types import SimpleNamespace
from typing import ClassVar

import numpy as np
import pytest

from trapbudget.sensitivity.errors import CalibrationWarning

try:
    import tomllib
except ImportError:  # Python 3.10
    import tomli as tomllib
from scipy import optimize, stats

from trapbudget.models import InputSpec, ModelError, OutputSpec
from trapbudget.sensitivity.errors import DataError, ScenarioError
from trapbudget.sensitivity.lab.calibrate import calibrate
from trapbudget.sensitivity.lab.observations import Observations


class LoadingModel:
    """Analytic stand-in with the structure of a MOT: N = R tau, F = eta N.

    R = a * R0 * (P/P0) * x^2/(1 + x^2) with x = detuning/D0;
    1/tau = k * p + g0.  Constants a (loading_prefactor), k
    (background_loss_coefficient), eta (detector_efficiency).
    """

    inputs: ClassVar[dict[str, InputSpec]] = {
        "beam_power": InputSpec("beam_power", "W", 4e-3, 0.0, 0.1, "power per beam"),
        "detuning": InputSpec("detuning", "Hz", -12e6, -1e9, 0.0, "detuning"),
        "background_pressure": InputSpec("background_pressure", "Pa", 1e-7, 0.0, 1e-3, "p"),
        "loading_prefactor": InputSpec(
            "loading_prefactor", "", 1.0, 0.0, 100.0, "loading prefactor", constant=True
        ),
        "background_loss_coefficient": InputSpec(
            "background_loss_coefficient", "1/(Pa*s)", 3e6, 0.0, 1e9, "loss", constant=True
        ),
        "detector_efficiency": InputSpec(
            "detector_efficiency", "", 0.5, 0.0, 1.0, "efficiency", constant=True
        ),
    }
    outputs: ClassVar[dict[str, OutputSpec]] = {
        "atom_number": OutputSpec("atom_number", "", "atoms"),
        "loading_time": OutputSpec("loading_time", "s", "loading time"),
        "fluorescence": OutputSpec("fluorescence", "1/s", "detected photons"),
    }

    def evaluate(self, values):
        unknown = set(values) - set(self.inputs)
        if unknown:
            raise ModelError(f"unknown input {sorted(unknown)[0]!r}")
        v = {n: np.asarray(values.get(n, s.default), dtype=float) for n, s in self.inputs.items()}
        x = v["detuning"] / -10e6
        rate = v["loading_prefactor"] * 1e8 * (v["beam_power"] / 4e-3) * x**2 / (1 + x**2)
        tau = 1.0 / (v["background_loss_coefficient"] * v["background_pressure"] + 0.1)
        number = rate * tau
        return {
            "atom_number": number,
            "loading_time": tau,
            "fluorescence": v["detector_efficiency"] * 1e3 * number,
        }


TRUE = {"loading_prefactor": 0.8, "background_loss_coefficient": 5e6, "detector_efficiency": 0.3}


def scenario(**extra) -> SimpleNamespace:
    fields = {
        "model": LoadingModel(),
        "nominal": {"beam_power": 4e-3, "detuning": -12e6, "background_pressure": 1e-7},
        "calibration": {"free": ["loading_prefactor", "background_loss_coefficient"]},
        "species": None,
        "source": None,
        "title": "invented test apparatus",
    }
    return SimpleNamespace(**{**fields, **extra})


def synthetic(rng, *, relative_noise=0.03, outputs=("atom_number", "loading_time")):
    """Scan detuning and pressure; measure the listed outputs with known relative noise."""
    detuning = np.repeat(np.linspace(-20e6, -6e6, 6), 2)
    pressure = np.tile([0.5e-7, 2e-7], 6)
    model = LoadingModel()
    truth = model.evaluate({"detuning": detuning, "background_pressure": pressure, **TRUE})
    parts = []
    for output in outputs:
        u = relative_noise * truth[output]
        parts.append(
            Observations(
                output=np.full(detuning.size, output),
                value=truth[output] + rng.normal(0, u),
                uncertainty=u,
                settings={"detuning": detuning, "background_pressure": pressure},
                source=np.array([f"synthetic {output} {i}" for i in range(detuning.size)]),
            )
        )
    return Observations.concatenate(parts)


def test_noise_free_data_return_the_true_constants():
    obs = synthetic(np.random.default_rng(0), relative_noise=1e-12)
    obs = Observations(obs.output, obs.value, obs.uncertainty * 1e10, obs.settings, obs.source)
    cal = calibrate(scenario(), obs)
    assert cal.fitted == ("loading_prefactor", "background_loss_coefficient")
    assert cal.values["loading_prefactor"] == pytest.approx(0.8, rel=1e-8)
    assert cal.values["background_loss_coefficient"] == pytest.approx(5e6, rel=1e-8)
    assert cal.chi2 == pytest.approx(0.0, abs=1e-10)


def test_recovers_constants_within_reported_uncertainty():
    cal = calibrate(scenario(), synthetic(np.random.default_rng(1)))
    for name in cal.fitted:
        # 4 standard uncertainties: a false failure has probability 6e-5 (normal tail)
        assert abs(cal.values[name] - TRUE[name]) < 4 * cal.uncertainties[name]
    assert cal.dof == 24 - 2
    assert not cal.flat_directions


def test_matches_curve_fit_on_the_same_problem():
    obs = synthetic(np.random.default_rng(2))
    cal = calibrate(scenario(), obs, covariance_scaling="never")
    model = LoadingModel()

    # scipy.optimize.curve_fit (absolute_sigma=True) on the same weighted problem
    def f(_x, a, k):
        out = model.evaluate(
            {**obs.settings, "loading_prefactor": a, "background_loss_coefficient": k}
        )
        return np.where(obs.output == "atom_number", out["atom_number"], out["loading_time"])

    popt, pcov = optimize.curve_fit(
        f,
        np.zeros(len(obs)),
        obs.value,
        p0=[1.0, 3e6],
        sigma=obs.uncertainty,
        absolute_sigma=True,
    )
    np.testing.assert_allclose(
        [cal.values["loading_prefactor"], cal.values["background_loss_coefficient"]],
        popt,
        rtol=1e-6,
    )
    np.testing.assert_allclose(cal.covariance, pcov, rtol=1e-3)


@pytest.mark.filterwarnings("ignore::trapbudget.sensitivity.errors.CalibrationWarning")
def test_coverage_and_covariance_match_the_scatter_of_refits():
    n_seeds = 150
    fits, inside = [], []
    last = None
    for seed in range(n_seeds):
        cal = calibrate(
            scenario(), synthetic(np.random.default_rng(100 + seed)), covariance_scaling="never"
        )
        values = np.array([cal.values[n] for n in cal.fitted])
        truth = np.array([TRUE[n] for n in cal.fitted])
        fits.append(values)
        inside.append(np.abs(values - truth) <= np.sqrt(np.diag(cal.covariance)))
        last = cal
    inside = np.array(inside)
    # one standard uncertainty covers 68.27 % (normal); binomial tolerance 3 sqrt(p(1-p)/n)
    p = stats.norm.cdf(1) - stats.norm.cdf(-1)
    tolerance = 3 * math.sqrt(p * (1 - p) / n_seeds)
    for column in inside.T:
        assert abs(column.mean() - p) < tolerance
    # the reported standard deviations against the scatter of refits: the sample std of n
    # normal values has relative standard error 1/sqrt(2(n-1)); allow 3 of them (+2 % bias)
    scatter = np.std(np.array(fits), axis=0, ddof=1)
    reported = np.sqrt(np.diag(last.covariance))
    np.testing.assert_allclose(scatter, reported, rtol=3 / math.sqrt(2 * (n_seeds - 1)) + 0.02)
    sample_corr = np.corrcoef(np.array(fits).T)[0, 1]
    # Fisher z: standard error 1/sqrt(n - 3)
    assert abs(np.arctanh(sample_corr) - np.arctanh(last.correlation[0, 1])) < 3 / math.sqrt(
        n_seeds - 3
    )


def test_product_of_constants_is_reported_as_a_flat_direction():
    # fluorescence alone sees only loading_prefactor * detector_efficiency
    obs = synthetic(np.random.default_rng(3), outputs=("fluorescence",))
    free = ["loading_prefactor", "detector_efficiency", "background_loss_coefficient"]
    cal = calibrate(scenario(), obs, free=free)
    assert len(cal.flat_directions) == 1
    flat = cal.flat_directions[0]
    assert set(flat.relative_change) == {"loading_prefactor", "detector_efficiency"}
    ratio = flat.relative_change["loading_prefactor"] / flat.relative_change["detector_efficiency"]
    assert ratio == pytest.approx(-1.0, rel=1e-3)  # d ln(a eta) = 0 (exact for a product)
    assert len(cal.fitted) == 2 and len(cal.held) == 1
    assert cal.values["background_loss_coefficient"] == pytest.approx(5e6, rel=0.1)
    product = cal.values["loading_prefactor"] * cal.values["detector_efficiency"]
    assert product == pytest.approx(0.8 * 0.3, rel=0.05)
    assert "combination" in flat.describe()


def test_constant_without_influence_is_held_not_fitted():
    obs = synthetic(np.random.default_rng(4), outputs=("loading_time",))
    cal = calibrate(scenario(), obs)  # loading_time does not depend on loading_prefactor
    assert cal.held == ("loading_prefactor",)
    assert cal.values["loading_prefactor"] == 1.0
    assert "do not constrain loading_prefactor" in cal.flat_directions[0].describe()


class TwoLossModel(LoadingModel):
    """LoadingModel with a second loss rate that adds to the first: 1/tau = k p + c + 0.1."""

    inputs: ClassVar[dict[str, InputSpec]] = {
        **LoadingModel.inputs,
        "vapor_loss_coefficient": InputSpec(
            "vapor_loss_coefficient", "1/s", 5e-4, 0.0, 1e3, "second loss", constant=True
        ),
    }

    def evaluate(self, values):
        values = dict(values)
        default = {n: spec.default for n, spec in self.inputs.items()}
        extra = np.asarray(values.pop("vapor_loss_coefficient", default["vapor_loss_coefficient"]))
        out = LoadingModel.evaluate(self, values)
        k = np.asarray(
            values.get("background_loss_coefficient", default["background_loss_coefficient"])
        )
        p = np.asarray(values.get("background_pressure", default["background_pressure"]))
        tau = 1.0 / (k * p + extra + 0.1)
        ratio = tau / out["loading_time"]
        return {
            "atom_number": out["atom_number"] * ratio,
            "loading_time": tau,
            "fluorescence": out["fluorescence"] * ratio,
        }


@pytest.mark.parametrize(
    ("k", "c", "held"),
    [(5e6, 5e-4, "vapor_loss_coefficient"), (5e3, 0.5, "background_loss_coefficient")],
)
def test_of_two_rates_that_add_the_one_the_data_barely_see_is_held(k, c, held):
    # The two loss constants enter only through their sum at one pressure: their Jacobian
    # columns are parallel, and for two normalised columns the flat singular vector is
    # exactly (1, -1)/sqrt(2), so only the relative change along it tells them apart. The
    # rate 1000x smaller than the other moves 1000x more and is held; the other is fitted.
    # (Picking by the normalised vector left it to rounding: numpy 2.2 / scipy 1.15 held the
    # wrong one of the Rb-87 demo's vapor and background losses.)
    rng = np.random.default_rng(6)
    obs = synthetic(rng, outputs=("loading_time",))
    one_pressure = {**obs.settings, "background_pressure": np.full(len(obs), 1e-7)}
    truth_values = {**one_pressure, **TRUE, "background_loss_coefficient": k}
    truth = TwoLossModel().evaluate({**truth_values, "vapor_loss_coefficient": c})
    u = 0.03 * truth["loading_time"]
    obs = Observations(
        obs.output, truth["loading_time"] + rng.normal(0, u), u, one_pressure, obs.source
    )
    free = ["background_loss_coefficient", "vapor_loss_coefficient"]
    start = {"background_loss_coefficient": k, "vapor_loss_coefficient": c}
    model = TwoLossModel()
    model.inputs = {
        name: dataclasses.replace(spec, default=start.get(name, spec.default))
        for name, spec in TwoLossModel.inputs.items()
    }
    cal = calibrate(scenario(model=model), obs, free=free)
    assert cal.held == (held,)
    (fitted,) = cal.fitted
    # the sum k p + c (0.5005 /s) is what the loading times determine: 3 % each, 12 points
    assert cal.values[fitted] == pytest.approx(start[fitted], rel=0.05)


def test_robust_loss_resists_an_outlier():
    obs = synthetic(np.random.default_rng(5))
    value = obs.value.copy()
    value[0] *= 3.0  # one wild point (30 sigma)
    bad = Observations(obs.output, value, obs.uncertainty, obs.settings, obs.source)
    # the 30-sigma point is a misfit no model explains: both fits say so
    with pytest.warns(CalibrationWarning, match=r"does not describe these data"):
        plain = calibrate(scenario(), bad)
    with pytest.warns(CalibrationWarning, match=r"does not describe these data"):
        robust = calibrate(scenario(), bad, robust=True)
    err_plain = abs(plain.values["loading_prefactor"] / 0.8 - 1)
    err_robust = abs(robust.values["loading_prefactor"] / 0.8 - 1)
    assert err_robust < err_plain / 3


def test_unknown_uncertainties_are_set_by_the_scatter():
    obs = synthetic(np.random.default_rng(6))
    blind = Observations(
        obs.output, obs.value, np.full(len(obs), np.nan), obs.settings, obs.source
    )
    cal = calibrate(scenario(), blind)
    assert cal.covariance_scaled
    # residual scatter of equal relative weights recovers the injected 3 % noise (chi2 with
    # 22 dof: relative standard error of the estimated sigma 1/sqrt(44), 3 of them)
    relative = np.std((cal.observations.value - cal.predicted) / cal.predicted, ddof=2)
    assert relative == pytest.approx(0.03, rel=3 / math.sqrt(44))


def test_calibrated_scenario_round_trips_as_toml(tmp_path):
    source = tmp_path / "lab.toml"
    source.write_text(
        '[scenario]\ntitle = "invented lab"\nmodel = "linear"\n'
        '[inputs.beam_power]\nnominal = "4 mW"\ntolerance = "2 %"\n'
        '[calibration]\nfree = ["loading_prefactor", "background_loss_coefficient"]\n',
        encoding="utf-8",
    )
    cal = calibrate(scenario(source=source), synthetic(np.random.default_rng(7)))
    out = cal.write_scenario(tmp_path / "lab-calibrated.toml")
    data = tomllib.loads(out.read_text(encoding="utf-8"))
    assert data["scenario"]["title"] == "invented lab"
    assert data["inputs"]["beam_power"] == {"nominal": "4 mW", "tolerance": "2 %"}
    entry = data["inputs"]["background_loss_coefficient"]
    value, unit = entry["nominal"].split(" ", 1)
    assert float(value) == pytest.approx(cal.values["background_loss_coefficient"], rel=1e-9)
    assert unit == "1/(Pa*s)"
    assert entry["shape"] == "normal" and entry["meaning"] == "standard"
    assert data["inputs"]["loading_prefactor"]["tolerance"] == pytest.approx(
        cal.uncertainties["loading_prefactor"], rel=1e-9
    )
    (corr,) = data["correlations"]
    assert corr["coefficient"] == pytest.approx(cal.correlation[0, 1], abs=1e-6)
    assert source.read_text(encoding="utf-8").startswith("[scenario]")  # input untouched


def test_dataset_carries_fit_and_residuals():
    cal = calibrate(scenario(), synthetic(np.random.default_rng(8)))
    ds = cal.to_dataset()
    assert list(ds["constant"].values) == list(cal.free)
    assert ds.sizes["observation"] == 24
    np.testing.assert_allclose(ds["normalized_residual"], cal.normalized_residuals)
    assert ds.attrs["dof"] == 22


def test_errors_name_the_key_and_fix():
    obs = synthetic(np.random.default_rng(9))
    with pytest.raises(ScenarioError, match="did you mean 'loading_prefactor'"):
        calibrate(scenario(), obs, free=["loading_prefator"])
    with pytest.raises(ScenarioError, match=r"calibration.free: no constants to fit"):
        calibrate(SimpleNamespace(**{**vars(scenario()), "calibration": {}}), obs)
    few = Observations(
        obs.output[:1],
        obs.value[:1],
        obs.uncertainty[:1],
        {k: v[:1] for k, v in obs.settings.items()},
        obs.source[:1],
    )
    with pytest.raises(DataError, match="1 observations cannot determine 2 constants"):
        calibrate(scenario(), few)
    with pytest.raises(ScenarioError, match="covariance_scaling 'sometimes' is unknown"):
        calibrate(scenario(), obs, covariance_scaling="sometimes")
