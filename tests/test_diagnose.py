"""Drift diagnosis (trapbudget.sensitivity.diagnose) on an analytic model with injected drifts."""

from __future__ import annotations

import itertools
import math
from types import SimpleNamespace
from typing import ClassVar

import numpy as np
import pytest
from scipy import stats

from trapbudget.models import InputSpec, ModelError, OutputSpec
from trapbudget.sensitivity.errors import DataError, ScenarioError
from trapbudget.sensitivity.lab.attribution import shapley_attribution
from trapbudget.sensitivity.lab.diagnose import diagnose
from trapbudget.sensitivity.lab.driftlog import read_log


class DriftModel:
    """N = 1e8 a (P/P0)^1.5 x^2/(1+x^2) exp((T - 295 K)/15 K) / (1 + k p / 0.1 s^-1)."""

    inputs: ClassVar[dict[str, InputSpec]] = {
        "beam_power": InputSpec("beam_power", "W", 4e-3, 0.0, 0.1, "power"),
        "detuning": InputSpec("detuning", "Hz", -12e6, -1e9, 0.0, "detuning"),
        "cell_temperature": InputSpec("cell_temperature", "K", 295.0, 250.0, 400.0, "cell"),
        "background_pressure": InputSpec("background_pressure", "Pa", 1e-7, 0.0, 1e-3, "p"),
        "loading_prefactor": InputSpec("loading_prefactor", "", 1.0, 0, 10, "a", constant=True),
    }
    outputs: ClassVar[dict[str, OutputSpec]] = {
        "atom_number": OutputSpec("atom_number", "", "atoms")
    }

    def evaluate(self, values):
        unknown = set(values) - set(self.inputs)
        if unknown:
            raise ModelError(f"unknown input {sorted(unknown)[0]!r}")
        v = {n: np.asarray(values.get(n, s.default), dtype=float) for n, s in self.inputs.items()}
        x = v["detuning"] / -10e6
        n = (
            1e8
            * v["loading_prefactor"]
            * (v["beam_power"] / 4e-3) ** 1.5
            * x**2
            / (1 + x**2)
            * np.exp((v["cell_temperature"] - 295.0) / 15.0)
            / (1 + 3e6 * v["background_pressure"] / 0.1)
        )
        return {"atom_number": n}


MAPPING = {
    "columns": {
        "room_temperature": {"input": "cell_temperature"},
        "photodiode": {"input": "beam_power", "scale": "2 mW/V"},
        "lock_error": {"input": "detuning", "offset": "nominal"},
        "ion_pump_current": {"input": "background_pressure", "scale": "1e-9 mbar/nA"},
    }
}


def scenario(**extra):
    fields = {
        "model": DriftModel(),
        "nominal": {"detuning": -12e6, "loading_prefactor": 1.0},
        "inputs": {"loading_prefactor": stats.norm(1.0, 0.02)},
        "correlation": None,
        "source": None,
        "diagnosis": MAPPING,
    }
    return SimpleNamespace(**{**fields, **extra})


def write_log(
    path,
    rng,
    *,
    days=7,
    per_day=24,
    fault_day=None,
    fault=0.85,
    noise=0.02,
    drift=True,
    extra_column=False,
):
    """A week of invented monitoring data, measured N from the model with noise."""
    model = DriftModel()
    t = np.arange(days * per_day) / per_day  # days
    day = np.floor(t).astype(int)
    room = 22.0 + (0.25 * day if drift else 0) + 0.3 * np.sin(2 * np.pi * t)  # degC
    lock = (0.35 * day if drift else 0) + rng.normal(0, 0.05, t.size)  # MHz, slipping
    pd = 2.0 + rng.normal(0, 0.004, t.size)  # V -> 4 mW
    pump = 1.0 + rng.normal(0, 0.01, t.size) + (0.01 * day if drift else 0)  # nA
    truth = model.evaluate(
        {
            "cell_temperature": room + 273.15,
            "detuning": -12e6 + lock * 1e6,
            "beam_power": pd * 2e-3,
            "background_pressure": pump * 1e-9 * 100,
        }
    )["atom_number"]
    measured = truth * (1 + rng.normal(0, noise, t.size))
    if fault_day is not None:
        measured[day == fault_day] *= fault
    start = np.datetime64("2026-11-23T00:00:00")
    stamps = start + np.round(t * 86400).astype("timedelta64[s]")
    header = (
        "timestamp,room_temperature [degC],photodiode [V],lock_error [MHz],"
        "ion_pump_current [nA],atom_number [1]"
    )
    if extra_column:
        header += ",lab_door [1]"
    lines = ["# label = invented week log", header]
    for i in range(t.size):
        row = (
            f"{stamps[i]},{room[i]:.4f},{pd[i]:.5f},{lock[i]:.4f},{pump[i]:.5f},{measured[i]:.6e}"
        )
        lines.append(row + (",1" if extra_column else ""))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


def brute_force_shapley(f, reference, point):
    """Shapley value by its definition: average marginal contribution over all orderings."""
    names = list(point)
    phi = dict.fromkeys(names, 0.0)
    orders = list(itertools.permutations(names))
    for order in orders:
        current = dict(reference)
        for name in order:
            before = f(current)
            current[name] = point[name]
            phi[name] += (f(current) - before) / len(orders)
    return phi


def test_shapley_sums_to_the_change_and_matches_the_definition():
    model = DriftModel()
    ref = {
        "beam_power": 4e-3,
        "detuning": -12e6,
        "cell_temperature": 295.0,
        "background_pressure": 1e-7,
    }
    point = {
        "beam_power": 3.1e-3,
        "detuning": -7e6,
        "cell_temperature": 299.0,
        "background_pressure": 3e-7,
    }
    phi, change, _ = shapley_attribution(
        model,
        reference=ref,
        points={k: np.array([v]) for k, v in point.items()},
        base={"loading_prefactor": 1.0},
        output="atom_number",
    )

    def f(values):
        return float(model.evaluate(values)["atom_number"])

    assert phi.sum() == pytest.approx(f(point) - f(ref), rel=1e-12)
    assert change[0] == pytest.approx(f(point) - f(ref), rel=1e-12)
    # Shapley 1953: the value is the mean marginal contribution over all k! orderings
    expected = brute_force_shapley(f, ref, point)
    np.testing.assert_allclose(phi[0], [expected[k] for k in point], rtol=1e-10)


def test_additive_model_attributes_each_channel_its_own_change():
    # Shapley value of an additive game: phi_i = f_i(x_i) - f_i(ref_i) (Shapley 1953, additivity)
    model = SimpleNamespace(
        inputs={n: InputSpec(n, "", 0.0, -10, 10, n) for n in ("a", "b", "c")},
        outputs={"y": OutputSpec("y", "", "sum")},
        evaluate=lambda v: {
            "y": 2 * np.asarray(v["a"]) + np.asarray(v["b"]) ** 2 - np.sin(v["c"])
        },
    )
    phi, _change, _ = shapley_attribution(
        model,
        reference={"a": 0.0, "b": 1.0, "c": 0.0},
        points={"a": np.array([1.0]), "b": np.array([3.0]), "c": np.array([0.5])},
        base={},
        output="y",
    )
    np.testing.assert_allclose(phi[0], [2.0, 8.0, -math.sin(0.5)], rtol=1e-12)


def test_week_with_drifts_and_an_unmonitored_fault(tmp_path):
    path = write_log(tmp_path / "week.csv", np.random.default_rng(1), fault_day=4)
    text = path.read_text(encoding="utf-8")
    diag = diagnose(scenario(), path, false_alarm_rate=0.01)
    assert path.read_text(encoding="utf-8") == text  # input never modified
    assert len(diag.days) == 7
    np.testing.assert_allclose(
        diag.attribution.sum(axis=1),
        diag.predicted_change,
        rtol=1e-10,
        atol=1e-6 * diag.reference_level,
    )
    assert list(np.flatnonzero(diag.flagged)) == [4]
    assert "something the log does not monitor" in " ".join(diag.messages)
    # the slipping lock (0.35 MHz/day towards resonance) outweighs the room-temperature
    # ramp (0.25 K/day with a 15 K scale), which outweighs the small pump drift
    names = [name for name, _ in diag.ranking]
    assert names[:3] == ["lock_error", "room_temperature", "ion_pump_current"]
    assert diag.variance_share.sum() == pytest.approx(1.0, rel=1e-12)


def test_clean_days_flagged_at_the_stated_false_alarm_rate(tmp_path):
    alpha, n_logs = 0.1, 40
    flags = []
    for seed in range(n_logs):
        path = write_log(
            tmp_path / f"clean{seed}.csv", np.random.default_rng(50 + seed), per_day=12
        )
        diag = diagnose(scenario(), path, false_alarm_rate=alpha)
        flags.extend(diag.flagged[~diag.reference_days])
    rate = np.mean(flags)
    # binomial standard error sqrt(a(1-a)/n); 4 of them, since days of one log share the
    # reference and are not independent
    assert abs(rate - alpha) < 4 * math.sqrt(alpha * (1 - alpha) / len(flags))


def test_columns_named_after_inputs_need_no_mapping(tmp_path):
    path = tmp_path / "direct.csv"
    path.write_text(
        "timestamp,cell_temperature [degC],atom_number [1],atom_number_uncertainty [1]\n"
        "2026-11-23T08:00:00,22.0,1.00e8,1e6\n2026-11-23T12:00:00,22.0,1.01e8,1e6\n"
        "2026-11-24T08:00:00,23.5,1.10e8,1e6\n2026-11-24T12:00:00,23.5,1.11e8,1e6\n",
        encoding="utf-8",
    )
    diag = diagnose(scenario(diagnosis=None, inputs={}), path)
    assert diag.channels == ("cell_temperature",)
    model = DriftModel()
    n = [float(model.evaluate({"cell_temperature": t})["atom_number"]) for t in (295.15, 296.65)]
    assert diag.predicted_change[1] == pytest.approx(n[1] - n[0], rel=1e-12)
    # given uncertainties: sigma of a mean of 2 entries minus another is 1e6 (u/sqrt(2) each)
    assert diag.remainder_sigma[1] == pytest.approx(1e6, rel=1e-12)


def test_nan_rows_and_unmapped_columns_are_stated(tmp_path):
    path = write_log(tmp_path / "week.csv", np.random.default_rng(2), extra_column=True)
    lines = path.read_text(encoding="utf-8").splitlines()
    cells = lines[5].split(",")
    cells[2] = "nan"
    lines[5] = ",".join(cells)
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    diag = diagnose(scenario(), path)
    assert diag.skipped_rows == 1
    assert diag.ignored_columns == ("lab_door",)
    joined = " ".join(diag.messages)
    assert "1 log rows with a missing value were skipped" in joined
    assert "not mapped to any model input (not used): lab_door" in joined


@pytest.mark.parametrize(
    ("edit", "match"),
    [
        (
            lambda t: t.replace("photodiode [V]", "photodiod [V]"),
            "no column 'photodiode'; did you mean 'photodiod'",
        ),
        (lambda t: t.replace("photodiode [V]", "photodiode [Vq]"), "'Vq' is not a unit"),
        (lambda t: t.replace("atom_number [1]", "atoms [1]"), "no measured column 'atom_number'"),
        (
            lambda t: t.replace("2026-11-23T01:00:00", "2026-11-23T23:59:00"),
            "timestamps go back in time",
        ),
        (lambda t: t.replace("2026-11-23T01:00:00", "23/11/2026 01:00"), "is not ISO 8601"),
        (lambda t: t.replace("timestamp,", "time,"), "no 'timestamp' column"),
    ],
)
def test_bad_logs_raise_one_line_errors(tmp_path, edit, match):
    path = write_log(tmp_path / "week.csv", np.random.default_rng(3))
    path.write_text(edit(path.read_text(encoding="utf-8")), encoding="utf-8")
    with pytest.raises(DataError, match=match) as info:
        diagnose(scenario(), path)
    assert "\n" not in str(info.value)


def test_bad_mapping_and_reference(tmp_path):
    path = write_log(tmp_path / "week.csv", np.random.default_rng(4))
    wrong = {"columns": {"photodiode": {"input": "beam_powr", "scale": "2 mW/V"}}}
    with pytest.raises(ScenarioError, match="did you mean 'beam_power'"):
        diagnose(scenario(), path, mapping=wrong)
    bad_scale = {"columns": {"photodiode": {"input": "beam_power", "scale": "2 mW/A"}}}
    with pytest.raises(DataError, match="check the units of scale and offset"):
        diagnose(scenario(), path, mapping=bad_scale)
    with pytest.raises(DataError, match="matches no day of the log"):
        diagnose(scenario(), path, reference="2025-01-01")
    assert read_log(path).label == "invented week log"


def test_dataset_has_day_and_channel_dims(tmp_path):
    path = write_log(tmp_path / "week.csv", np.random.default_rng(5), fault_day=3)
    ds = diagnose(scenario(), path, reference=("2026-11-23", "2026-11-24")).to_dataset()
    assert ds.sizes == {"entry": 168, "day": 7, "channel": 4}
    assert bool(ds["reference"][1]) and not bool(ds["flagged"][1])
    np.testing.assert_allclose(
        ds["attribution"].sum("channel"), ds["predicted_change"], rtol=1e-10, atol=1e-3
    )


def test_mapping_from_a_toml_file(tmp_path):
    path = write_log(tmp_path / "week.csv", np.random.default_rng(6), fault_day=2)
    mapping = tmp_path / "mapping.toml"
    mapping.write_text(
        "[diagnosis.columns]\n"
        'room_temperature = { input = "cell_temperature" }\n'
        'photodiode = { input = "beam_power", scale = "2 mW/V" }\n'
        'lock_error = { input = "detuning", offset = "nominal" }\n'
        'ion_pump_current = { input = "background_pressure", scale = "1e-9 mbar/nA" }\n',
        encoding="utf-8",
    )
    from_file = diagnose(scenario(diagnosis=None), path, mapping=mapping)
    from_table = diagnose(scenario(), path)
    np.testing.assert_array_equal(from_file.attribution, from_table.attribution)
    assert list(np.flatnonzero(from_file.flagged)) == [2]
    with pytest.raises(DataError, match="the mapping file does not exist; check the path"):
        diagnose(scenario(), path, mapping=tmp_path / "absent.toml")


def clean_log(rng, *, days, per_day, noise=1.5e6):
    """Clean log of DriftModel: monitored drifts, uneven within-day jitter, additive noise.

    Half of the entries jitter 16x more than the others in detuning and power, so the
    model at a day's mean settings differs from the mean of its entries' predictions
    (the curvature of x^2 / (1 + x^2) and P^1.5). The true loading prefactor is drawn
    from the scenario's N(1, 0.02), so the calibration term is real.
    """
    from trapbudget.sensitivity.lab.driftlog import LogTable

    n = days * per_day
    day = np.repeat(np.arange(days), per_day)
    wide = rng.random(n) < 0.5
    jitter = np.where(wide, 1.0, 1 / 16)
    detuning = -12e6 + 0.3e6 * day + rng.normal(0, 1.6e6, n) * jitter
    power = 4e-3 * (1 + 0.01 * day) * (1 + rng.normal(0, 0.1, n) * jitter)
    temperature = 295.0 + 0.2 * day + rng.normal(0, 0.3, n)
    pressure = 1e-7 * (1 + 0.02 * day) + np.zeros(n)
    prefactor = rng.normal(1.0, 0.02)
    truth = DriftModel().evaluate(
        {
            "detuning": detuning,
            "beam_power": power,
            "cell_temperature": temperature,
            "background_pressure": pressure,
            "loading_prefactor": np.full(n, prefactor),
        }
    )["atom_number"]
    start = np.datetime64("2026-11-23T00:00:00")
    minutes = (day * 1440 + 60 + np.tile(np.arange(per_day), days) * 60).astype("timedelta64[m]")
    return LogTable(
        timestamps=(start + minutes).astype("datetime64[s]"),
        columns={
            "detuning": detuning,
            "beam_power": power,
            "cell_temperature": temperature,
            "background_pressure": pressure,
            "atom_number": truth + rng.normal(0, noise, n),
        },
        written_units={
            "detuning": "Hz",
            "beam_power": "W",
            "cell_temperature": "K",
            "background_pressure": "Pa",
            "atom_number": "",
        },
    )


@pytest.mark.parametrize("per_day", [2, 3, 12])
def test_false_alarm_rate_on_clean_nonlinear_logs(per_day):
    # 2000 independent clean logs of a reference day and one tested day: 2000 independent
    # day-tests (days of one log share the reference noise, which would correlate them),
    # binomial SE sqrt(0.05 0.95 / 2000) = 0.49 points <= 0.5; the rate must lie within
    # 1.5 points (about 3 SE) of the stated 5 %.
    alpha, n_logs = 0.05, 2000
    rng = np.random.default_rng(1000 + per_day)
    sc = scenario(diagnosis={})
    flags = []
    for _ in range(n_logs):
        diag = diagnose(sc, clean_log(rng, days=2, per_day=per_day), false_alarm_rate=alpha)
        flags.extend(diag.flagged_per_day[~diag.reference_days])
        # The attribution, averaged like the prediction, still sums to the predicted change.
        np.testing.assert_allclose(
            diag.attribution.sum(axis=1), diag.predicted_change, rtol=1e-9, atol=1e-3
        )
    assert len(flags) == n_logs and math.sqrt(alpha * (1 - alpha) / len(flags)) <= 0.005
    assert abs(np.mean(flags) - alpha) <= 0.015, np.mean(flags)


def test_holm_controls_false_alarms_over_a_whole_log():
    # Holm 1979: probability of any false alarm over the log at most alpha, whatever the
    # dependence between days; 100 clean logs of 21 days, 12 entries a day. Bound: the
    # 99.9 % quantile of Binomial(100, 0.05) (scipy.stats).
    alpha, n_logs = 0.05, 100
    rng = np.random.default_rng(5)
    sc = scenario(diagnosis={})
    any_holm, any_day = 0, 0
    for _ in range(n_logs):
        diag = diagnose(sc, clean_log(rng, days=21, per_day=12), control="holm")
        any_holm += bool(diag.flagged_holm.any())
        any_day += bool(diag.flagged_per_day.any())
        np.testing.assert_array_equal(diag.flagged, diag.flagged_holm)
        assert not (diag.flagged_holm & ~diag.flagged_per_day).any()
        assert diag.to_dataset().attrs["control"] == "holm"
    assert any_holm <= stats.binom.ppf(0.999, n_logs, alpha), any_holm
    assert any_day > any_holm  # the per-day rule flags some clean log far more often


def test_holm_and_fdr_rules_against_their_definitions():
    # Holm 1979 and Benjamini & Hochberg 1995 on a hand-made p-value list (from the
    # definitions: Holm rejects p_(k) <= a / (m - k + 1) while it holds; BH rejects up to
    # the largest k with p_(k) <= a k / m); scipy.stats.false_discovery_control as oracle.
    from trapbudget.sensitivity.lab.significance import benjamini_hochberg, holm

    p = np.array([0.001, 0.013, 0.02, 0.04, 0.3, 0.9])
    tested = np.ones(p.size, dtype=bool)
    np.testing.assert_array_equal(holm(p, tested, 0.05), [1, 0, 0, 0, 0, 0])
    expected = stats.false_discovery_control(p) <= 0.05
    np.testing.assert_array_equal(benjamini_hochberg(p, tested, 0.05), expected)
    assert benjamini_hochberg(p, tested, 0.05).sum() == 3
