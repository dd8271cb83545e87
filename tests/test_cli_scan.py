"""``trapbudget scan`` from the command line: curves and maps of the demo trap, bad usage."""

from __future__ import annotations

import json
import re
from importlib import resources
from pathlib import Path

import numpy as np
import pytest

from trapbudget.cli.main import main

# Rb-87 D2 natural linewidth Gamma / 2 pi = 6.0666 MHz (Steck, "Rubidium 87 D Line Data",
# rev. 2.2, table 3).
GAMMA_RB87_HZ = 6.0666e6


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("demo-files")
    name = "harrier-rb87.toml"
    (folder / name).write_bytes((resources.files("trapbudget.examples") / name).read_bytes())
    return folder


def _run(capsys, argv) -> tuple[int, str, str]:
    code = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_detuning_scan_peaks_where_published_vapor_cell_scans_do(capsys, demo, tmp_path):
    # Published vapor-cell MOT scans with centimetre beams show a broad maximum of the atom
    # number near -1.5 to -3 Gamma (Lindquist, Stephens & Wieman, PRA 46, 4082 (1992);
    # Gibble, Kasapi & Chu, Opt. Lett. 17, 526 (1992)); the window below is that range
    # widened by half a linewidth each side for the grid step.
    argv = ["scan", demo / "harrier-rb87.toml", "detuning", "--range", "-36MHz", "-1MHz"]
    argv += ["--points", "36", "--samples", "256", "--json", "--out", tmp_path / "scan"]
    code, out, _ = _run(capsys, argv)
    assert code == 0
    result = json.loads(out)
    assert result["kind"] == "scan" and result["swept"] == ["detuning"]
    grid = np.array(result["grid"]["detuning"])
    assert grid.size == 36 and grid[0] == pytest.approx(-36e6) and grid[-1] == pytest.approx(-1e6)
    atoms = result["outputs"]["atom_number"]
    median = np.array(atoms["median"], dtype=float)
    low, high = np.array(atoms["low"], dtype=float), np.array(atoms["high"], dtype=float)
    assert np.all(low <= median) and np.all(median <= high)
    peak = grid[np.nanargmax(median)] / GAMMA_RB87_HZ
    assert -3.5 <= peak <= -1.0, peak
    # the curve falls on both sides of its maximum: far red and near resonance hold fewer atoms
    assert median[0] < 0.5 * np.nanmax(median) and median[-1] < 0.5 * np.nanmax(median)
    report = (tmp_path / "scan" / "report.html").read_text(encoding="utf-8")
    assert "Scan of detuning" in report
    assert len(list((tmp_path / "scan" / "figures").glob("scan-*.png"))) == 4
    assert json.loads((tmp_path / "scan" / "result.json").read_text())["kind"] == "scan"


def test_two_settings_give_a_map(capsys, demo, tmp_path):
    argv = ["scan", demo / "harrier-rb87.toml", "detuning", "gradient", "--points", "5"]
    argv += ["--samples", "64", "--output", "atom_number", "--json", "--out", tmp_path / "m"]
    code, out, _ = _run(capsys, argv)
    assert code == 0
    result = json.loads(out)
    assert result["swept"] == ["detuning", "gradient"]
    assert list(result["outputs"]) == ["atom_number"]
    assert np.array(result["outputs"]["atom_number"]["median"], dtype=float).shape == (5, 5)


def test_scan_prints_a_table_per_output(capsys, demo, tmp_path):
    argv = ["scan", demo / "harrier-rb87.toml", "beam_waist", "--points", "5", "--samples", "32"]
    code, out, _ = _run(capsys, [*argv, "--out", tmp_path / "t"])
    assert code == 0
    assert "beam_waist (mm)" in out and "95 % band" in out
    assert max(len(line) for line in out.splitlines()) <= 80


def _one_line(text: str) -> str:
    return " ".join(text.split())


@pytest.mark.parametrize(
    ("extra", "message"),
    [
        (["detuning", "--range", "-5MHz", "-30MHz"], r"LOW must be below HIGH"),
        (["detuning", "--range", "-5 furlong", "1MHz"], r"--range"),
        (["detuning", "--range", "-5MHz"], r"--range: expected 2 arguments"),
        (["detuning", "--points", "1"], r"--points: '1' must lie between 2 and 1001"),
        (["detuning", "--samples", "many"], r"--samples: 'many' is not an integer"),
        (["detuning", "--range2", "1mm", "2mm"], r"--range2 needs a second setting"),
        (["detuning", "detuning"], r"detuning is given twice"),
        (["beam_waist", "--range", "1mm", "20m"], r"leaves the valid range of beam_waist"),
        (["detuning", "--output", "atom_numbr"], r"no output 'atom_numbr'; outputs are atom_num"),
        (["detuning", "--points", "1001", "--samples", "1048576"], r"lower --points or --samples"),
    ],
)
def test_bad_scan_usage_is_one_line_naming_the_option(capsys, demo, tmp_path, extra, message):
    argv = ["scan", demo / "harrier-rb87.toml", *extra, "--out", tmp_path / "o", "--quiet"]
    code, _, err = _run(capsys, argv)
    assert code == 2, err
    assert len(err.strip().splitlines()) == 1, err
    assert re.search(message, _one_line(err)), err
    assert not (tmp_path / "o").exists()


def test_an_unknown_setting_names_the_scenario_and_a_close_match(capsys, demo, tmp_path):
    argv = ["scan", demo / "harrier-rb87.toml", "detunning", "--out", tmp_path / "o", "--quiet"]
    code, _, err = _run(capsys, argv)
    assert code == 1
    assert "harrier-rb87.toml" in err and "did you mean 'detuning'" in err
    assert not (tmp_path / "o").exists()
