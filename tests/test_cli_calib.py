"""`trapbudget calibrate` and `trapbudget diagnose` on the invented demo data, in-process."""

from __future__ import annotations

import json
import shutil
from importlib import resources
from pathlib import Path

import pytest

from trapbudget.cli.main import main
from trapbudget.examples import make_demo_data
from trapbudget.sensitivity.scenario.reader import load_scenario

FREE = (
    "loading_prefactor,vapor_loss_coefficient,background_loss_coefficient,"
    "sub_doppler_coefficient,detector_efficiency"
)
CALIBRATION_FILES = (
    "harrier-loading-curves.csv",
    "harrier-detuning-scan.csv",
    "harrier-time-of-flight.csv",
)


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    """The shipped demo files, copied to a scratch folder."""
    folder = tmp_path_factory.mktemp("demo")
    package = resources.files("trapbudget.examples")
    for name in (
        "harrier-rb87.toml",
        "harrier-log-mapping.toml",
        "harrier-week-log.csv",
        *CALIBRATION_FILES,
    ):
        with resources.as_file(package / name) as source:
            shutil.copyfile(source, folder / name)
    return folder


def run_json(capsys, argv: list[str]) -> dict:
    code = main(argv)
    captured = capsys.readouterr()
    assert code == 0, captured.err
    return json.loads(captured.out)


@pytest.fixture(scope="module")
def calibrated(demo, tmp_path_factory):
    out = tmp_path_factory.mktemp("calibration") / "report"
    argv = [
        "calibrate",
        str(demo / "harrier-rb87.toml"),
        *[str(demo / n) for n in CALIBRATION_FILES],
        "--free",
        FREE,
        "--out",
        str(out),
        "--json",
    ]
    return argv, out


def test_calibrate_recovers_the_constants_the_demo_was_made_with(capsys, calibrated):
    argv, out = calibrated
    result = run_json(capsys, argv)
    constants = result["constants"]
    for name, true in make_demo_data.TRUE_CONSTANTS.items():
        entry = constants[name]
        assert entry["fitted"]
        # 4 standard uncertainties (normal tail 6e-5); the demo data are model + noise
        assert abs(entry["value"] - true) < 4 * entry["uncertainty"], name
    # the background loss is negligible beside the vapor loss at this vapor density: the
    # data cannot determine it, and the output says so instead of quoting a number
    assert not constants["background_loss_coefficient"]["fitted"]
    assert any("background_loss_coefficient" in line for line in result["flat_directions"])
    assert (out / "report.html").is_file() and (out / "calibration.nc").is_file()
    html = (out / "report.html").read_text(encoding="utf-8")
    assert "Calibration to measurements" in html and "laser-safety officer" in html
    # a calibration draws no samples: its subtitle says what it is, without "seed None"
    assert "Calibration of a Rb87 VaporCellMOT study" in html
    assert "seed None" not in html and " 0 samples" not in html
    assert (out / "figures" / "calibration-fits.png").is_file()
    # the calibrated scenario is a scenario like any other
    calibrated_scenario = load_scenario(result["calibrated_scenario"])
    dist = calibrated_scenario.inputs["loading_prefactor"]
    assert float(dist.mean()) == pytest.approx(constants["loading_prefactor"]["value"], rel=1e-9)
    assert float(dist.std()) == pytest.approx(
        constants["loading_prefactor"]["uncertainty"], rel=1e-9
    )


def test_fit_curves_pass_through_the_model_at_the_measured_settings(capsys, calibrated):
    # The curves are the model itself: on the detuning scan every other setting is the same
    # for all rows, so the fitted curve at the ends of its grid equals the model's
    # prediction for the observations taken there (same inputs, same constants)
    import numpy as np
    import xarray as xr

    argv, out = calibrated
    run_json(capsys, argv)
    ds = xr.load_dataset(out / "calibration.nc")
    scans = np.flatnonzero(ds["curve_axis"].values == "detuning")
    assert scans.size >= 2
    k = int(ds["curve_output"].values.tolist().index("atom_number"))
    assert ds["curve_axis"].values[k] == "detuning"
    rows = np.flatnonzero(ds["observation_curve"].values == k)
    x = ds["observation_x"].values[rows]
    curve = ds.isel(curve=k)
    for end, pick in ((0, np.argmin(x)), (-1, np.argmax(x))):
        assert float(curve["curve_x"][end]) == x[pick]
        assert float(curve["curve_fitted"][end]) == pytest.approx(
            float(ds["predicted"].values[rows][pick]), rel=1e-9
        )
    # start and fitted constants give different curves (the fit moved the constants)
    assert not np.allclose(curve["curve_start"], curve["curve_fitted"])
    # the raw traces: 3 loading curves and 2 expansions, each with the calibrated model; the
    # demo data are the model plus noise of the stated size, so the model must run through
    # each trace with a reduced chi-square of order one (below 3 for 12 to 40 points)
    assert list(ds["trace_kind"].values).count("loading-curve") == 3
    assert list(ds["trace_kind"].values).count("time-of-flight") == 2
    assert (out / "figures" / "calibration-traces.png").is_file()
    for k in range(ds.sizes["trace"]):
        trace = ds.isel(trace=k)
        t = trace["trace_time"].values
        keep = np.isfinite(t)
        model = np.interp(t[keep], trace["trace_grid_time"].values, trace["trace_model"].values)
        z = (trace["trace_measured"].values[keep] - model) / trace["trace_uncertainty"].values[
            keep
        ]
        assert np.mean(z**2) < 3.0, (str(trace["trace_label"].values), np.mean(z**2))


def test_calibrate_is_reproducible(capsys, calibrated, tmp_path):
    argv, _ = calibrated
    first = run_json(capsys, argv)
    again = run_json(capsys, [*argv[:-3], "--out", str(tmp_path / "again"), "--json"])
    for result in (first, again):
        result.pop("report")
        result.pop("calibrated_scenario")
    assert first == again


def test_diagnose_flags_the_injected_fault_day(capsys, demo, calibrated, tmp_path):
    argv, out = calibrated
    if not (out / "harrier-rb87-calibrated.toml").is_file():
        run_json(capsys, argv)
    result = run_json(
        capsys,
        [
            "diagnose",
            str(out / "harrier-rb87-calibrated.toml"),
            str(demo / "harrier-week-log.csv"),
            "--mapping",
            str(demo / "harrier-log-mapping.toml"),
            "--out",
            str(tmp_path / "d"),
            "--json",
        ],
    )
    assert result["flagged_days"] == ["2026-11-27"]  # make_demo_data.FAULT_DAY = 4
    assert make_demo_data.FAULT_DAY == 4
    assert result["ranking"][0]["channel"] == "lock_error"  # the slipping lock
    assert result["ignored_columns"] == ["lab_humidity"]
    for day in result["days"]:
        total = sum(day["attribution"].values())
        assert total == pytest.approx(day["predicted_change"], rel=1e-9, abs=1e-3)
    assert (tmp_path / "d" / "figures" / "drift-attribution.png").is_file()
    markdown = (tmp_path / "d" / "report.md").read_text(encoding="utf-8")
    assert "## Day-to-day drift" in markdown and "FLAGGED" in markdown
    assert "laser-safety officer" in markdown


@pytest.mark.parametrize(
    ("argv", "match"),
    [
        (
            [
                "calibrate",
                "{demo}/harrier-rb87.toml",
                "{demo}/absent.csv",
                "--free",
                "loading_prefactor",
            ],
            "DataError: .*absent.csv: the data file does not exist",
        ),
        (
            [
                "diagnose",
                "{demo}/harrier-rb87.toml",
                "{demo}/harrier-week-log.csv",
                "--mapping",
                "{demo}/absent.toml",
            ],
            "DataError: .*the mapping file does not exist",
        ),
    ],
)
def test_bad_input_is_one_line_and_exit_1(capsys, demo, argv, match, tmp_path):
    import re

    argv = [a.format(demo=demo) for a in argv] + ["--out", str(tmp_path / "x")]
    assert main(argv) == 1
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "Traceback" not in err
    assert re.search(match, err)


@pytest.mark.parametrize(
    ("extra", "match"),
    [
        (
            ["--free", "loading_prefator"],
            r"--free 'loading_prefator' is not a model input; did "
            r"you mean 'loading_prefactor'\?",
        ),
        ([], r"no constants to fit; give --free A,B"),
        (
            ["--free", "beam_power"],
            r"'beam_power' is a setting of the apparatus, not a model "
            r"constant.*--allow-settings",
        ),
    ],
)
def test_free_is_checked_as_an_option(capsys, demo, tmp_path, extra, match):
    import re

    argv = ["calibrate", f"{demo}/harrier-rb87.toml", f"{demo}/harrier-detuning-scan.csv"]
    code = main([*argv, *extra, "--out", str(tmp_path / "x")])
    err = capsys.readouterr().err.strip()
    assert "\n" not in err and "Traceback" not in err
    assert re.search(match, err), err
    assert code == (1 if "setting" in match else 2)
    assert not (tmp_path / "x").exists()


def test_demo_data_regenerate_identically(tmp_path):
    # the shipped files are exactly what make_demo_data writes (fixed seed)
    written = make_demo_data.main(tmp_path)
    package = resources.files("trapbudget.examples")
    for path in written:
        assert path.read_bytes() == (package / path.name).read_bytes(), path.name
    text = (tmp_path / "harrier-week-log.csv").read_text(encoding="utf-8")
    assert text.startswith("# INVENTED DEMO DATA")
