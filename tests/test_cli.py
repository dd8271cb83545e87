"""Tests of the command line (trapbudget.sensitivity.cli), run in-process through main()."""

from __future__ import annotations

import json
import math
from pathlib import Path

import numpy as np
import pytest

from trapbudget.cli.main import main

# Ishigami function, a = 7, b = 0.1, inputs uniform on [-pi, pi] (Ishigami & Homma 1990;
# closed-form indices in Saltelli et al. 2008, Global Sensitivity Analysis: The Primer).
ISHIGAMI = """
[scenario]
title = "{title}"
description = "Analytic test function, no apparatus."
model = "ishigami"

[inputs.x1]
nominal = "0"
tolerance = "3.141592653589793"
meaning = "half-width"
shape = "rectangular"

[inputs.x2]
nominal = "0"
tolerance = "3.141592653589793"
meaning = "half-width"
shape = "rectangular"

[inputs.x3]
nominal = "0"
tolerance = "3.141592653589793"
meaning = "half-width"
shape = "rectangular"

[settings]
n_samples = 1024
method = "sobol"
seed = 11
"""


def _ishigami_closed_form(a: float = 7.0, b: float = 0.1) -> tuple[np.ndarray, np.ndarray]:
    """First- and total-order indices of the Ishigami function (Saltelli et al. 2008, Primer)."""
    v1 = 0.5 * (1 + b * math.pi**4 / 5) ** 2
    v2 = a**2 / 8
    v13 = b**2 * math.pi**8 * (1 / 18 - 1 / 50)
    var = v1 + v2 + v13
    first = np.array([v1, v2, 0.0]) / var
    total = np.array([v1 + v13, v2, v13]) / var
    return first, total


@pytest.fixture
def ishigami_file(tmp_path: Path) -> Path:
    path = tmp_path / "ishigami.toml"
    path.write_text(ISHIGAMI.format(title="Ishigami check"), encoding="utf-8")
    return path


def _run(capsys, *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def _one_line_error(err: str, name: str) -> str:
    lines = err.strip().splitlines()
    assert len(lines) == 1, err
    assert lines[0].startswith(f"{name}: "), err
    assert "Traceback" not in err
    return lines[0]


def test_unknown_subcommand_is_a_usage_error(capsys):
    code, out, err = _run(capsys, "frobnicate")
    assert code == 2 and out == ""
    assert "invalid choice: 'frobnicate'" in _one_line_error(err, "UsageError")


def test_no_subcommand_lists_them(capsys):
    code, _, err = _run(capsys)
    assert code == 2
    assert "predict" in _one_line_error(err, "UsageError")


@pytest.mark.parametrize(("value", "hint"), [("1000", "use 1024"), ("abc", "not an integer")])
def test_bad_samples_is_a_usage_error(capsys, ishigami_file, value, hint):
    code, out, err = _run(capsys, "rank", str(ishigami_file), "--samples", value)
    assert code == 2 and out == ""
    assert hint in _one_line_error(err, "UsageError")


def test_missing_scenario_file(capsys, tmp_path):
    code, out, err = _run(capsys, "predict", str(tmp_path / "nowhere.toml"))
    assert code == 1 and out == ""
    line = _one_line_error(err, "ScenarioError")
    assert "nowhere.toml" in line and "does not exist" in line


def test_bad_unit_names_file_key_and_fix(capsys, tmp_path):
    text = ISHIGAMI.format(title="t").replace('nominal = "0"', 'nominal = "0 mQ"', 1)
    (tmp_path / "bad.toml").write_text(text, encoding="utf-8")
    code, out, err = _run(capsys, "predict", str(tmp_path / "bad.toml"))
    assert code == 1 and out == ""
    line = _one_line_error(err, "ScenarioError")
    assert "bad.toml" in line and "inputs.x1" in line and "mQ" in line


def test_unknown_input_suggests_a_close_name(capsys, tmp_path):
    text = ISHIGAMI.format(title="t").replace("[inputs.x3]", "[inputs.x33]")
    (tmp_path / "bad.toml").write_text(text, encoding="utf-8")
    code, out, err = _run(capsys, "rank", str(tmp_path / "bad.toml"), "--json")
    assert code == 1 and out == ""
    assert "x33" in _one_line_error(err, "ScenarioError")


def test_species_json_lists_rubidium_with_sources(capsys):
    code, out, _ = _run(capsys, "species", "--json")
    assert code == 0
    rows = {row["name"]: row for row in json.loads(out)}
    # Steck, Rubidium 87 D Line Data: D2 vacuum wavelength 780.241 nm.
    assert rows["Rb87"]["wavelength_nm"] == pytest.approx(780.241, abs=1e-3)
    assert rows["Rb87"]["sources"]


def test_species_table_fits_80_columns_and_rounds(capsys, monkeypatch):
    monkeypatch.setenv("COLUMNS", "80")
    code, out, _ = _run(capsys, "species")
    assert code == 0
    lines = out.splitlines()
    assert max(len(line.rstrip()) for line in lines) <= 80
    assert len(lines) < 30  # one line per species, not the sources folded into the table
    # Steck, Rubidium 87 D Line Data: 780.241 209 686 nm, rounded to 7 digits, never a float
    # printed in full
    assert "780.2412" in out and "780.2412096" not in out
    assert all(name in out for name in ("Rb87", "Cs133", "Sr88-689"))


def test_species_by_name_shows_its_sources(capsys, monkeypatch):
    monkeypatch.setenv("COLUMNS", "80")
    code, out, _ = _run(capsys, "species", "caesium-133")
    assert code == 0
    assert out.startswith("Cs133") and "Steck" in out and "Rb87" not in out
    code, out, _ = _run(capsys, "species", "Cs", "--json")
    # Steck, Cesium D Line Data: D2 vacuum wavelength 852.347 275 82 nm
    assert json.loads(out)["wavelength_nm"] == pytest.approx(852.3472758, abs=1e-6)
    code, out, err = _run(capsys, "species", "Xe")
    assert code == 2 and out == ""
    assert "'Xe'" in _one_line_error(err, "UsageError") and "Rb87" in err


def test_rank_json_matches_ishigami_closed_form(capsys, ishigami_file, tmp_path):
    code, out, err = _run(
        capsys,
        "rank",
        str(ishigami_file),
        "--json",
        "--no-convergence",
        "--out",
        str(tmp_path / "r"),
    )
    assert code == 0, err
    result = json.loads(out)
    ranked = result["outputs"]["y"]["ranked_inputs"]
    first, total = _ishigami_closed_form()
    by_name = {r["input"]: r for r in ranked}
    assert [r["input"] for r in ranked] == ["x1", "x2", "x3"]
    for i, name in enumerate(("x1", "x2", "x3")):
        # N = 1024 Saltelli design: the estimates sit within a few bootstrap widths.
        for key, exact in (("first_order", first[i]), ("total_order", total[i])):
            r = by_name[name]
            width = r[f"{key}_high"] - r[f"{key}_low"]
            assert abs(r[key] - exact) < max(width, 0.02), (name, key, r[key], exact)
    summary = result["outputs"]["y"]["summary"]
    # Ishigami mean a/2 = 3.5 (Saltelli et al. 2008, Primer); MC error ~ std/sqrt(n).
    assert summary["mean"] == pytest.approx(3.5, abs=5 * summary["std"] / math.sqrt(1024))


def test_same_seed_gives_the_same_json(capsys, ishigami_file, tmp_path):
    args = ["rank", str(ishigami_file), "--json", "--no-convergence", "--samples", "256"]
    _, first, _ = _run(capsys, *args, "--seed", "5", "--out", str(tmp_path / "a"))
    _, second, _ = _run(capsys, *args, "--seed", "5", "--out", str(tmp_path / "a"))
    _, other, _ = _run(capsys, *args, "--seed", "6", "--out", str(tmp_path / "a"))
    assert first == second
    assert first != other


def test_report_rerenders_the_same_tables(capsys, ishigami_file, tmp_path):
    out_dir = tmp_path / "rep"
    code, ranked, err = _run(
        capsys,
        "rank",
        str(ishigami_file),
        "--json",
        "--no-convergence",
        "--samples",
        "256",
        "--out",
        str(out_dir),
    )
    assert code == 0, err
    html = (out_dir / "report.html").read_text(encoding="utf-8")
    md = (out_dir / "report.md").read_text(encoding="utf-8")
    for name in (
        "samples.nc",
        "summary.nc",
        "budget.nc",
        "study.json",
        "result.json",
        "input/ishigami.toml",
        "figures",
    ):
        assert (out_dir / name).exists(), name
    code, rerendered, err = _run(capsys, "report", str(out_dir), "--json")
    assert code == 0, err
    assert json.loads(rerendered) == json.loads(ranked)
    assert (out_dir / "report.html").read_text(encoding="utf-8") == html
    assert (out_dir / "report.md").read_text(encoding="utf-8") == md
    code, _, err = _run(capsys, "rank", "--from", str(out_dir), "--quiet")
    assert code == 0, err


def test_max_samples_below_samples_is_a_usage_error(capsys, ishigami_file):
    code, _, err = _run(capsys, "rank", str(ishigami_file), "--max-samples", "256")
    assert code == 2
    assert "give at least 1024" in _one_line_error(err, "UsageError")


def test_report_of_a_folder_that_is_not_a_report(capsys, tmp_path):
    code, _, err = _run(capsys, "report", str(tmp_path))
    assert code == 2
    assert "not a trapbudget report folder" in _one_line_error(err, "UsageError")


def test_scenario_title_is_escaped_in_the_html(capsys, tmp_path):
    path = tmp_path / "xss.toml"
    path.write_text(ISHIGAMI.format(title="<script>alert(1)</script>"), encoding="utf-8")
    code, _, err = _run(
        capsys,
        "rank",
        str(path),
        "--quiet",
        "--no-convergence",
        "--samples",
        "64",
        "--out",
        str(tmp_path / "x"),
    )
    assert code == 0, err
    html = (tmp_path / "x" / "report.html").read_text(encoding="utf-8")
    assert "<script>" not in html and "&lt;script&gt;alert(1)&lt;/script&gt;" in html


def test_rank_prints_tables_and_the_report_path(capsys, ishigami_file, tmp_path):
    code, out, _ = _run(
        capsys,
        "rank",
        str(ishigami_file),
        "--no-convergence",
        "--samples",
        "64",
        "--out",
        str(tmp_path / "t"),
    )
    assert code == 0
    assert "x1" in out and "report.html" in out


def test_predict_json_is_the_gum_law_of_propagation(capsys, tmp_path):
    # JCGM 100:2008 eq. (10): u(y)^2 = sum c_i^2 u(x_i)^2 for independent inputs.
    path = tmp_path / "lin.toml"
    path.write_text(
        """
[scenario]
title = "linear"
model = "linear"
[scenario.options]
coefficients = [2.0, -3.0]
[inputs.x1]
nominal = "1"
tolerance = "0.1"
[inputs.x2]
nominal = "2"
tolerance = "0.2"
""",
        encoding="utf-8",
    )
    code, out, err = _run(capsys, "predict", str(path), "--json")
    assert code == 0, err
    entry = next(iter(json.loads(out)["outputs"].values()))
    assert entry["std_linear"] == pytest.approx(math.hypot(2 * 0.1, 3 * 0.2), rel=1e-6)
    assert entry["nominal"] == pytest.approx(2 * 1 - 3 * 2, rel=1e-9)
    assert [c["input"] for c in entry["contributions"]] == ["x2", "x1"]


# A small demo run: whether its convergence loop settles at this size is not the point here.
@pytest.mark.filterwarnings(
    "ignore::trapbudget.sensitivity.indices.budget.BudgetConvergenceWarning"
)
@pytest.mark.slow
def test_demo_writes_files_and_a_report(capsys, tmp_path):
    code, out, err = _run(capsys, "demo", "--out", str(tmp_path), "--samples", "128", "--json")
    assert code == 0, err
    result = json.loads(out)
    assert (tmp_path / "harrier-rb87.toml").is_file() and (tmp_path / "README.md").is_file()
    assert Path(result["report"], "report.html").is_file()
    assert "atom_number" in result["outputs"]
    assert "invented" in (tmp_path / "harrier-rb87.toml").read_text(encoding="utf-8").lower()


def test_second_species_demo_predicts_caesium(capsys):
    from importlib import resources

    path = resources.files("trapbudget.examples") / "harrier-cs133.toml"
    code, out, err = _run(capsys, "predict", str(path), "--json")
    assert code == 0, err
    result = json.loads(out)
    # Common practice: a few-mW, centimetre-beam vapor-cell MOT holds 1e6-1e10 atoms.
    assert 1e6 < result["outputs"]["atom_number"]["nominal"] < 1e10
    # Doppler limit of Cs-133, hbar Gamma / (2 k_B) = 125.61 uK (Steck, Cesium D Line Data);
    # the Doppler-only model cannot go below it.
    assert result["outputs"]["temperature"]["nominal"] > 125.6e-6


def test_every_demo_file_says_it_is_invented():
    from importlib import resources

    files = [f for f in resources.files("trapbudget.examples").iterdir() if f.is_file()]
    demo = [
        f
        for f in files
        if f.name.endswith((".toml", ".md")) and f.name.startswith(("harrier", "README"))
    ]
    assert len(demo) >= 3
    for item in demo:
        assert "invented" in item.read_text(encoding="utf-8").lower(), item.name


BLUE_EDGE = """
[scenario]
title = "Detuning across resonance (invented test case)"
species = "Rb87"
model = "VaporCellMOT"
[inputs.detuning]
nominal = "-1 MHz"
tolerance = "3 MHz"
meaning = "half-width"
shape = "rectangular"
[outputs]
names = ["atom_number"]
[settings]
n_samples = 64
seed = 3
"""


@pytest.mark.filterwarnings("default::UserWarning")
def test_model_validity_warning_is_one_line_and_counted(capsys, tmp_path):
    # Blue of resonance a red-detuning MOT cannot trap (common practice); the model flags it.
    path = tmp_path / "blue.toml"
    path.write_text(BLUE_EDGE, encoding="utf-8")
    code, out, err = _run(
        capsys, "rank", str(path), "--json", "--no-convergence", "--out", str(tmp_path / "b")
    )
    assert code == 0, err
    warning_lines = [line for line in err.splitlines() if "Warning: " in line]
    assert warning_lines and all("Traceback" not in line for line in err.splitlines())
    assert any("BLUE_DETUNING" in line for line in warning_lines), err
    counts = json.loads(out)["validity_counts"]
    # The Monte Carlo is sized by the JCGM 101 adaptive rule: count over what it drew.
    from trapbudget.sensitivity import load_dataset

    m = load_dataset(tmp_path / "b" / "samples.nc").sizes["sample"]
    # Detuning uniform on [-4, 2] MHz: 2/6 of the samples lie blue of resonance
    # (binomial standard error sqrt(p (1 - p) / m), four of them).
    assert counts["BLUE_DETUNING"] / m == pytest.approx(2 / 6, abs=4 * math.sqrt(2 / 9 / m))


def test_demo_keeps_edited_files_unless_forced(capsys, tmp_path):
    # A practitioner's edits to a demo scenario are never silently overwritten.
    argv = ["demo", "--out", str(tmp_path), "--quiet", "--samples", "64", "--max-samples", "64"]
    assert main(argv) == 0
    capsys.readouterr()
    scenario = tmp_path / "harrier-rb87.toml"
    scenario.write_text(scenario.read_text(encoding="utf-8") + "\n# my edit\n", encoding="utf-8")
    code = main(["demo", "--out", str(tmp_path), "--quiet", "--samples", "64"])
    err = capsys.readouterr().err.strip()
    assert code == 2 and "\n" not in err
    assert "is not the demo's own copy" in err and "--force" in err
    assert "# my edit" in scenario.read_text(encoding="utf-8")
    assert main([*argv, "--force"]) == 0
    assert "# my edit" not in scenario.read_text(encoding="utf-8")


def test_inputs_lists_every_input_of_the_model_with_unit_range_and_kind(capsys, tmp_path):
    from trapbudget.models import VaporCellMOT

    code, out, err = _run(capsys, "inputs", "VaporCellMOT", "--json")
    assert code == 0, err
    result = json.loads(out)
    model = VaporCellMOT()
    assert [r["name"] for r in result["inputs"]] == list(model.inputs)
    assert [o["name"] for o in result["outputs"]] == list(model.outputs)
    by_name = {r["name"]: r for r in result["inputs"]}
    assert by_name["beam_waist"]["unit"] == "m" and by_name["beam_waist"]["kind"] == "setting"
    assert by_name["loading_prefactor"]["kind"] == "constant"
    code, out, err = _run(capsys, "inputs", "VaporCelMOT")
    assert code == 2 and "did you mean 'VaporCellMOT'?" in err and len(err.splitlines()) == 1


def test_predict_at_blue_detuning_explains_instead_of_raw_warnings(capsys, tmp_path):
    # Blue of resonance a MOT does not trap (common practice): one line per reason, no
    # raw numpy RuntimeWarning.
    from importlib import resources

    text = (resources.files("trapbudget.examples") / "harrier-rb87.toml").read_text("utf-8")
    path = tmp_path / "blue.toml"
    path.write_text(text.replace('nominal = "-12 MHz"', 'nominal = "+12 MHz"', 1), "utf-8")
    code, out, err = _run(capsys, "predict", str(path), "--json")
    assert code == 0 and json.loads(out)
    assert "RuntimeWarning" not in err
    assert "ModelValidityWarning: the nominal point is outside the model's validity: " in err
    assert "BLUE_DETUNING" in err


def test_rank_at_blue_detuning_names_what_cannot_be_ranked(capsys, tmp_path, monkeypatch):
    # Blue of resonance a MOT does not trap (common practice): zero atoms and no temperature
    # in every run. rank says so per output, in the terminal and the JSON, with no table of
    # nan and no raw numpy RuntimeWarning; the loading time (vapor loss) is still ranked.
    from importlib import resources

    monkeypatch.setenv("COLUMNS", "80")
    text = (resources.files("trapbudget.examples") / "harrier-rb87.toml").read_text("utf-8")
    path = tmp_path / "blue.toml"
    path.write_text(text.replace('nominal = "-12 MHz"', 'nominal = "+12 MHz"', 1), "utf-8")
    argv = ["rank", str(path), "--samples", "64", "--no-convergence"]
    code, out, err = _run(capsys, *argv, "--out", str(tmp_path / "text"))
    assert code == 0, err
    assert "RuntimeWarning" not in err and "nan" not in out
    assert "atom_number: not ranked, the same in every run (0)" in out
    assert "temperature: not ranked, undefined in every run" in out
    assert "loading_time:" in out
    code, out, err = _run(capsys, *argv, "--json", "--out", str(tmp_path / "json"))
    result = json.loads(out)
    unranked = {f["output"]: f["reason"] for f in result["findings"] if f["kind"] == "unranked"}
    assert set(unranked) == {"atom_number", "temperature", "fluorescence"}
    assert all("BLUE_DETUNING" in why for why in unranked.values())
    nxt = [f for f in result["findings"] if f["kind"] == "next"]
    assert nxt and nxt[0]["command"].startswith("trapbudget predict")
