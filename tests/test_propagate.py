"""Monte Carlo propagation and coverage intervals, against JCGM 101:2008 and scipy.stats."""

from __future__ import annotations

import enum
import math

import numpy as np
import pytest
from scipy import optimize, special, stats

from trapbudget.models.protocol import InputSpec, OutputSpec
from trapbudget.sensitivity.errors import ConvergenceWarning, ScenarioError
from trapbudget.sensitivity.io import load_dataset, save_dataset
from trapbudget.sensitivity.propagation import ModelValidityWarning, propagate, propagate_adaptive
from trapbudget.sensitivity.protocol import evaluate_in_chunks
from trapbudget.sensitivity.summary import coverage_interval, numerical_tolerance, summarize
from trapbudget.sensitivity.testfunctions import LinearModel

ADDITIVE = LinearModel([1.0, 1.0, 1.0, 1.0])  # JCGM 101:2008, 9.2: Y = X1 + X2 + X3 + X4
SQRT3 = math.sqrt(3.0)


def _quantile_se(p: float, density: float, n: int) -> float:
    """Standard error of a sample p-quantile, sqrt(p (1-p) / n) / f (Stuart & Ord, 10.10)."""
    return math.sqrt(p * (1 - p) / n) / density


def _irwin_hall_quantile(p: float, n: int = 4) -> float:
    """p-quantile of the sum of n U(0, 1) (Irwin-Hall CDF, Johnson, Kotz & Balakrishnan)."""

    def cdf(x: float) -> float:
        k = np.arange(0, math.floor(x) + 1)
        return float(np.sum((-1.0) ** k * special.comb(n, k) * (x - k) ** n) / math.factorial(n))

    return optimize.brentq(lambda x: cdf(x) - p, 0.0, float(n))


def _irwin_hall_density(x: float, n: int = 4) -> float:
    k = np.arange(0, math.floor(x) + 1)
    return float(
        np.sum((-1.0) ** k * special.comb(n, k) * (x - k) ** (n - 1)) / math.factorial(n - 1)
    )


def test_jcgm101_example_9_2_normal():
    n = 2**16
    inputs = {f"x{i}": stats.norm(0.0, 1.0) for i in range(1, 5)}
    summary = summarize(propagate(ADDITIVE, inputs, n_samples=n, method="random", rng=92))
    # JCGM 101:2008, 9.2.2: u(y) = 2.00, 95 % interval [-3.92, 3.92]
    se_u = 2.0 / math.sqrt(2 * n)  # std error of a normal sample std
    assert abs(float(summary["std"][0]) - 2.00) < 5 * se_u
    se_q = _quantile_se(0.975, stats.norm(0, 2).pdf(3.92), n)
    assert abs(float(summary["interval_high"][0]) - 3.92) < 5 * se_q + 0.005
    assert abs(float(summary["interval_low"][0]) + 3.92) < 5 * se_q + 0.005
    # and against the exact quantile of N(0, 2^2) (scipy.stats)
    assert abs(float(summary["interval_high"][0]) - stats.norm(0, 2).ppf(0.975)) < 5 * se_q


def test_jcgm101_example_9_2_rectangular():
    n = 2**16
    inputs = {f"x{i}": stats.uniform(-SQRT3, 2 * SQRT3) for i in range(1, 5)}
    summary = summarize(propagate(ADDITIVE, inputs, n_samples=n, method="sobol", rng=93))
    # exact: Y = 2 sqrt(3) (S - 2), S Irwin-Hall with n = 4
    exact_high = 2 * SQRT3 * (_irwin_hall_quantile(0.975) - 2)
    density = _irwin_hall_density(exact_high / (2 * SQRT3) + 2) / (2 * SQRT3)
    se_q = _quantile_se(0.975, density, n)
    # JCGM 101:2008, 9.2.3: MC interval +-3.88, u(y) = 2.00
    assert exact_high == pytest.approx(3.88, abs=0.005)
    assert abs(float(summary["interval_high"][0]) - exact_high) < 5 * se_q
    assert abs(float(summary["interval_low"][0]) + exact_high) < 5 * se_q
    # kurtosis of the sum of 4 uniforms is 3 - 1.2/4 = 2.7 -> se(s) = u sqrt((k-1)/(4n))
    assert abs(float(summary["std"][0]) - 2.00) < 5 * 2.0 * math.sqrt(1.7 / (4 * n))


@pytest.mark.parametrize(
    "dist", [stats.expon(scale=2.0), stats.gamma(3.0), stats.norm(1.0, 0.5)], ids=str
)
def test_coverage_intervals_vs_exact_quantiles(dist):
    n = 2**15
    y = dist.rvs(size=n, random_state=np.random.default_rng(4))
    low, high = coverage_interval(y, confidence_level=0.9)
    for p, end in ((0.05, low), (0.95, high)):  # exact quantiles from scipy.stats
        assert abs(end - dist.ppf(p)) < 5 * _quantile_se(p, dist.pdf(dist.ppf(p)), n)
    # shortest 90 % interval of the exact distribution: minimise ppf(a + 0.9) - ppf(a)
    res = optimize.minimize_scalar(
        lambda a: dist.ppf(a + 0.9) - dist.ppf(a), bounds=(1e-9, 0.1 - 1e-9), method="bounded"
    )
    slow, shigh = coverage_interval(y, confidence_level=0.9, shortest=True)
    exact_width = dist.ppf(res.x + 0.9) - dist.ppf(res.x)
    assert shigh - slow <= high - low + 1e-12
    width_se = _quantile_se(0.95, dist.pdf(dist.ppf(min(res.x + 0.9, 0.999))), n)
    assert abs((shigh - slow) - exact_width) < 10 * width_se


def test_coverage_interval_index_rule():
    # JCGM 101:2008, 7.7.2: M = 40, p = 0.95 -> q = 38, r = (M - q)/2 = 1: [y_(1), y_(39)]
    y = np.arange(1.0, 41.0)
    assert coverage_interval(y, confidence_level=0.95) == (1.0, 39.0)
    # M = 41 -> q = round(38.95) = 39, (M - q)/2 = 1: [y_(1), y_(40)]
    assert coverage_interval(np.arange(1.0, 42.0), confidence_level=0.95) == (1.0, 40.0)
    # shortest on a skewed sample starts at the dense end
    skew = np.concatenate([np.linspace(0, 1, 39), [100.0]])
    assert coverage_interval(skew, confidence_level=0.95, shortest=True) == (0.0, 1.0)


def test_numerical_tolerance():
    # rule of JCGM 101:2008, 7.9.2: u(y) = 1.02 with n_dig = 2 is 10 x 10^-1, delta = 0.5 x 10^-1
    assert numerical_tolerance(1.02, significant_digits=2) == pytest.approx(0.05)
    assert numerical_tolerance(0.0754, significant_digits=2) == pytest.approx(0.0005)
    assert numerical_tolerance(0.0996, significant_digits=2) == pytest.approx(0.005)


def test_adaptive_procedure_converges():
    inputs = {f"x{i}": stats.uniform(-SQRT3, 2 * SQRT3) for i in range(1, 5)}
    ds = propagate_adaptive(ADDITIVE, inputs, rng=7, significant_digits=2)
    assert ds.attrs["converged"] is True
    # JCGM 101:2008, 7.9.2: batches of max(ceil(100 / (1 - p)), 10^4) = 10^4 for p = 0.95
    assert ds.attrs["batch_size"] == 10_000 and ds.attrs["n_batches"] >= 2
    assert ds.sizes["sample"] == ds.attrs["n_batches"] * 10_000
    delta = ds.attrs["numerical_tolerance"]["y"]
    assert delta == pytest.approx(0.05)
    assert all(value < delta for value in ds.attrs["achieved_tolerance"]["y"])
    summary = summarize(ds)
    assert abs(float(summary["std"][0]) - 2.0) < delta
    assert abs(float(summary["interval_high"][0]) - 3.88) < 2 * delta


def test_adaptive_warns_when_not_converged():
    inputs = {"x1": stats.norm(0, 1), "x2": stats.norm(0, 1)}
    with pytest.warns(ConvergenceWarning, match=r"did not converge within max_samples=10000"):
        ds = propagate_adaptive(
            LinearModel([1.0, 1.0]), inputs, rng=1, significant_digits=4, max_samples=10_000
        )
    assert ds.attrs["converged"] is False


def test_dataset_schema_and_netcdf_round_trip(tmp_path):
    inputs = {"x1": stats.norm(1, 0.1), "x2": 2.0}
    ds = propagate(LinearModel([3.0, 1.0]), inputs, n_samples=256, rng=3)
    assert ds["x1"].attrs["role"] == "input" and ds["y"].attrs["role"] == "output"
    assert "x2" not in ds and ds.attrs["fixed_inputs"] == {"x2": 2.0}
    assert ds.attrs["method"] == "sobol" and ds.attrs["seed"] == 3
    assert ds.attrs["nominal_outputs"]["y"] == pytest.approx(5.0)
    # y = 3 x1 + x2 exactly, sample by sample
    np.testing.assert_allclose(ds["y"].values, 3 * ds["x1"].values + 2.0, rtol=1e-14)
    back = load_dataset(save_dataset(ds, tmp_path / "samples.nc"))
    assert back.attrs["fixed_inputs"] == {"x2": 2.0}
    np.testing.assert_array_equal(back["y"].values, ds["y"].values)
    summary = summarize(back)
    assert float(summary["nominal"].sel(output="y")) == pytest.approx(5.0)
    assert list(summary["output"].values) == ["y"]


def test_same_seed_same_numbers():
    inputs = {"x1": stats.norm(0, 1), "x2": stats.uniform()}
    a = propagate(LinearModel([1.0, 2.0]), inputs, n_samples=128, method="latin", rng=5)
    b = propagate(LinearModel([1.0, 2.0]), inputs, n_samples=128, method="latin", rng=5)
    np.testing.assert_array_equal(a["y"].values, b["y"].values)


def test_unknown_input_and_output():
    with pytest.raises(ScenarioError, match=r"has no input 'x9'"):
        propagate(LinearModel([1.0]), {"x9": stats.norm()}, n_samples=16)
    with pytest.raises(ScenarioError, match=r"has no output 'z'"):
        propagate(LinearModel([1.0]), {"x1": stats.norm()}, n_samples=16, outputs=["z"])


def test_plain_callable_model():
    def area(values):
        return {"area": values["width"] * values["height"]}

    inputs = {"width": stats.uniform(1, 1), "height": 3.0}
    ds = propagate(area, inputs, n_samples=1024, rng=2)
    # E[W] H = 1.5 * 3 for W ~ U(1, 2) (mean of a uniform)
    assert float(summarize(ds)["mean"][0]) == pytest.approx(4.5, abs=5 * 3 * (1 / 12) ** 0.5 / 32)


class _Flags(enum.IntFlag):
    OK = 0
    NEGATIVE = enum.auto()
    HUGE = enum.auto()


class _Checked:
    """y = x, flagged NEGATIVE below 0 and HUGE above 2."""

    validity_flags = _Flags

    def __init__(self):
        self.inputs = {"x": InputSpec("x", "", 0.0, -10, 10, "input")}
        self.outputs = {
            "y": OutputSpec("y", "", "output"),
            "validity": OutputSpec("validity", "", "mask"),
        }

    def evaluate(self, values):
        x = np.asarray(values.get("x", 0.0), dtype=float)
        mask = np.where(x < 0, int(_Flags.NEGATIVE), 0) | np.where(x > 2, int(_Flags.HUGE), 0)
        return {"y": np.where(x < 0, 0.0, x), "validity": mask.astype(np.int64)}


def test_validity_counts_and_warning():
    n = 4096
    with pytest.warns(
        ModelValidityWarning, match=r"% of 4096 samples fell outside the validity"
    ) as record:
        ds = propagate(_Checked(), {"x": stats.uniform(-1, 4)}, n_samples=n, rng=1)
    assert record[0].filename == __file__  # stacklevel points at the caller
    counts = ds.attrs["validity_counts"]
    # U(-1, 3): P(x < 0) = 1/4, P(x > 2) = 1/4 (uniform cdf); binomial std error sqrt(p(1-p)/n)
    for name in ("NEGATIVE", "HUGE"):
        assert abs(counts[name] / n - 0.25) < 5 * math.sqrt(0.25 * 0.75 / n)
    assert ds["validity"].attrs["role"] == "validity"
    assert "validity" not in summarize(ds)["output"].values


def test_evaluate_in_chunks_matches_one_call():
    columns = {"x1": np.linspace(0, 1, 101), "x2": np.linspace(1, 2, 101)}
    calls = []
    chunked = evaluate_in_chunks(
        LinearModel([2.0, -1.0]), columns, chunk_size=7, progress=lambda d, t: calls.append(d)
    )
    whole = LinearModel([2.0, -1.0]).evaluate(columns)
    np.testing.assert_array_equal(chunked["y"], whole["y"])
    assert calls[-1] == 101 and len(calls) == math.ceil(101 / 7)


def test_adaptive_with_sobol_batches_is_power_of_two():
    inputs = {"x1": stats.norm(0, 1), "x2": stats.norm(0, 1)}
    ds = propagate_adaptive(LinearModel([1.0, 1.0]), inputs, rng=3, method="sobol")
    assert ds.attrs["batch_size"] == 16384 and ds.attrs["converged"] is True
    # u(y) = sqrt(2) for the sum of two unit normals (sum of independent normals)
    assert (
        abs(float(summarize(ds)["std"][0]) - math.sqrt(2)) < ds.attrs["numerical_tolerance"]["y"]
    )


def test_model_errors_become_scenario_errors():
    def broken(values):
        from trapbudget.models.protocol import ModelError

        raise ModelError("unknown input 'q'")

    with pytest.raises(ScenarioError, match=r"model broken: unknown input 'q'"):
        propagate(broken, {"x": stats.norm()}, n_samples=8)


def test_all_inputs_fixed():
    ds = propagate(LinearModel([2.0]), {"x1": 3.0}, n_samples=4, method="random")
    np.testing.assert_array_equal(ds["y"].values, np.full(4, 6.0))
    assert float(summarize(ds)["std"][0]) == 0.0


def test_ishigami_closed_forms_and_moments():
    from trapbudget.sensitivity.testfunctions import Ishigami, ishigami_indices

    exact = ishigami_indices(7.0, 0.1)
    # Saltelli et al. 2008 (The Primer), a = 7, b = 0.1, as listed in references.md [F]
    np.testing.assert_allclose(exact["first_order"], [0.313905, 0.442411, 0.0], atol=1e-6)
    np.testing.assert_allclose(exact["total_order"], [0.557589, 0.442411, 0.243684], atol=1e-6)
    n = 2**16
    inputs = {f"x{i}": stats.uniform(-math.pi, 2 * math.pi) for i in (1, 2, 3)}
    y = propagate(Ishigami(), inputs, n_samples=n, method="random", rng=12)["y"].values
    # E[Y] = a / 2 (sin^2 averages to 1/2; the odd terms vanish)
    assert abs(y.mean() - 3.5) < 5 * math.sqrt(exact["variance"] / n)
    # sample variance standard error sqrt((m4 - V^2) / n), m4 estimated from the sample
    m4 = np.mean((y - y.mean()) ** 4)
    assert abs(y.var(ddof=1) - exact["variance"]) < 5 * math.sqrt(
        (m4 - exact["variance"] ** 2) / n
    )


def test_g_function_variance():
    from trapbudget.sensitivity.testfunctions import GFunction, g_function_indices

    a = [0.0, 1.0, 4.5, 9.0]
    exact = g_function_indices(a)
    # Saltelli et al. 2008: V = prod(1 + 1/(3 (1 + a_i)^2)) - 1
    assert exact["variance"] == pytest.approx(np.prod(1 + 1 / (3 * (1 + np.array(a)) ** 2)) - 1)
    assert exact["total_order"].sum() >= exact["first_order"].sum()
    n = 2**16
    inputs = {f"x{i}": stats.uniform() for i in range(1, 5)}
    y = propagate(GFunction(a), inputs, n_samples=n, method="random", rng=13)["y"].values
    assert abs(y.mean() - 1.0) < 5 * math.sqrt(exact["variance"] / n)  # each factor has mean 1
    m4 = np.mean((y - y.mean()) ** 4)
    assert abs(y.var(ddof=1) - exact["variance"]) < 5 * math.sqrt(
        (m4 - exact["variance"] ** 2) / n
    )


def test_trap_model_validity_flags_reported():
    from trapbudget.models.trap import VaporCellMOT

    n = 1024
    # detuning N(-1 MHz, 2 MHz): P(detuning >= 0) = norm.sf(0.5) (scipy.stats)
    inputs = {"detuning": stats.norm(-1e6, 2e6)}
    with pytest.warns(ModelValidityWarning, match=r"BLUE_DETUNING"):
        ds = propagate(VaporCellMOT(), inputs, n_samples=n, rng=2, outputs=["atom_number"])
    share = ds.attrs["validity_counts"]["BLUE_DETUNING"] / n
    assert abs(share - stats.norm.sf(0.5)) < 5 * math.sqrt(0.31 * 0.69 / n)
    blue = ds["detuning"].values >= 0
    assert np.all(ds["atom_number"].values[blue] == 0)  # honest limit: no atoms
