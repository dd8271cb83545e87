"""Command-line tests of ``trapbudget spec`` and ``trapbudget compare`` (in-process)."""

from __future__ import annotations

import json
import math
from importlib import resources
from pathlib import Path

import pytest
from scipy import stats

from trapbudget.cli.main import main

LINEAR = """\
[scenario]
title = "linear CLI test"
model = "linear"
currency = "EUR"
[scenario.options]
coefficients = {{ x1 = 2.0, x2 = -1.0, x3 = 0.5 }}
offset = 10.0

[inputs.x1]
nominal = 0.0
tolerance = 0.2
[inputs.x2]
nominal = 0.0
tolerance = 0.3
[inputs.x3]
nominal = 0.0
tolerance = {x3}

[outputs]
names = ["y"]

[settings]
n_samples = 4096
method = "sobol"
seed = 11

[[requirements]]
output = "y"
at_least = {limit}
probability = 0.95
label = "enough"

[costs.x1]
{x1_costs}

[costs.x2]
smooth = {{ tolerance = 0.3, cost = 200, exponent = 1 }}

[[upgrades]]
name = "halve x1"
cost = 1000
changes = {{ x1 = {{ tolerance = 0.1 }} }}

[[upgrades]]
name = "halve x2"
cost = 500
changes = {{ x2 = {{ tolerance = 0.15 }} }}
"""

TIERS = (
    'tiers = [ { name = "as built", tolerance = 0.2, cost = 0 }, '
    '{ name = "better", tolerance = 0.1, cost = 300 }, '
    '{ name = "best", tolerance = 0.05, cost = 900 } ]'
)


def _write(tmp_path: Path, name: str = "lin.toml", *, limit=9.0, x3=0.1, x1_costs=TIERS) -> Path:
    path = tmp_path / name
    path.write_text(LINEAR.format(limit=limit, x3=x3, x1_costs=x1_costs), encoding="utf-8")
    return path


def _run(capsys, argv):
    code = main([str(a) for a in argv])
    captured = capsys.readouterr()
    return code, captured.out, captured.err


def test_spec_json_is_feasible_reproducible_and_writes_a_report(tmp_path, capsys):
    path = _write(tmp_path)
    code, out, err = _run(capsys, ["spec", path, "--json", "--seed", 3, "--out", tmp_path / "a"])
    assert code == 0, err
    result = json.loads(out)
    assert result["feasible"] is True
    assert {r["input"] for r in result["inputs"]} == {"x1", "x2", "x3"}
    assert (tmp_path / "a" / "report.html").is_file()
    assert (tmp_path / "a" / "allocation.nc").is_file()
    # exact normal check of the claimed probability (scipy.stats.norm.sf), linear-Gaussian model
    u = {r["input"]: r["required_uncertainty"] for r in result["inputs"]}
    sd = math.sqrt((2.0 * u["x1"]) ** 2 + u["x2"] ** 2 + (0.5 * u["x3"]) ** 2)
    claimed = result["requirements"][0]
    assert claimed["probability"] == pytest.approx(
        stats.norm.sf(9.0, 10.0, sd), abs=4 * claimed["standard_error"] + 1 / 4096
    )
    code, again, _ = _run(capsys, ["spec", path, "--json", "--seed", 3, "--out", tmp_path / "b"])
    first, second = json.loads(out), json.loads(again)
    for result in (first, second):
        result.pop("report"), result.pop("spec_sheet")
    assert first == second


def test_spec_without_cost_tables_allocates_at_default_prices_and_writes_a_csv(tmp_path, capsys):
    text = LINEAR.format(limit=9.0, x3=0.1, x1_costs=TIERS)
    text = text[: text.index("[costs.x1]")] + text[text.index("[[upgrades]]") :]
    path = tmp_path / "nocost.toml"
    path.write_text(text, encoding="utf-8")
    code, out, err = _run(capsys, ["spec", path, "--json", "--out", tmp_path / "s"])
    assert code == 0, err
    result = json.loads(out)
    assert result["feasible"] is True and result["default_costs"] is True
    # every input is free at the default price t_present / t: nothing is "held as present"
    required = {r["input"]: r["required_tolerance"] for r in result["inputs"]}
    assert set(required) == {"x1", "x2", "x3"}
    # linear-Gaussian model: the allocated tolerances meet P(y >= 9) >= 0.95 within the
    # Monte Carlo error of the 4096-run check (exact normal tail, scipy.stats.norm.sf)
    sd = math.sqrt((2.0 * required["x1"]) ** 2 + required["x2"] ** 2 + (0.5 * required["x3"]) ** 2)
    assert stats.norm.sf(9.0, 10.0, sd) >= 0.95 - 4 * math.sqrt(0.05 * 0.95 / 4096)
    # the spec sheet beside the report, one row per input, values in the display unit
    import csv

    sheet = Path(result["spec_sheet"])
    assert sheet.parent == tmp_path / "s"
    rows = list(csv.DictReader(sheet.open(encoding="utf-8")))
    assert [r["input"] for r in rows] == ["x1", "x2", "x3"]
    assert list(rows[0]) == [
        "input",
        "unit",
        "nominal",
        "tolerance_now",
        "tolerance_specified",
        "meaning",
        "shape",
        "cost_relative",
        "set_by",
    ]
    for row in rows:
        assert float(row["tolerance_specified"]) == pytest.approx(required[row["input"]], rel=1e-5)
        assert row["meaning"] == "standard" and row["shape"] == "normal"
        # default price: present / specified tolerance
        assert float(row["cost_relative"]) == pytest.approx(
            float(row["tolerance_now"]) / float(row["tolerance_specified"]), rel=1e-4
        )
    assert {r["tolerance_now"] for r in rows} == {"0.2", "0.3", "0.1"}


def test_spec_infeasible_requirement_names_the_blocking_input(tmp_path, capsys):
    # x3 has no cost table and alone gives u(y) = 0.5 * 2 = 1 > (10 - 9) / 1.645
    path = _write(tmp_path, x3=2.0)
    code, _out, err = _run(capsys, ["spec", path, "--out", tmp_path / "r", "--quiet"])
    assert code == 1
    lines = err.strip().splitlines()
    assert len(lines) == 1
    assert lines[0].startswith("InfeasibleError: ")
    assert "'enough'" in lines[0] and "'x3'" in lines[0]
    assert "Traceback" not in err


def test_spec_requirement_failing_at_nominal(tmp_path, capsys):
    path = _write(tmp_path, limit=10.5)
    code, out, err = _run(capsys, ["spec", path, "--json", "--out", tmp_path / "r"])
    assert code == 1
    assert json.loads(out)["feasible"] is False
    assert "fails at the nominal point" in err


def test_spec_malformed_cost_table_is_one_line_error(tmp_path, capsys):
    path = _write(tmp_path, x1_costs='tiers = [ { name = "as built", tolerance = 0.2 } ]')
    code, out, err = _run(capsys, ["spec", path])
    assert code == 1
    assert out == ""
    lines = err.strip().splitlines()
    assert len(lines) == 1
    assert lines[0].startswith("ScenarioError: ")
    assert "costs.x1.tiers[0]" in lines[0]


def test_compare_upgrades_json_ranks_by_gain_per_cost(tmp_path, capsys):
    path = _write(tmp_path, limit=9.4)
    code, out, err = _run(
        capsys,
        [
            "compare",
            path,
            "--json",
            "--seed",
            2,
            "--repetition-rate",
            "0.5",
            "--out",
            tmp_path / "c",
        ],
    )
    assert code == 0, err
    result = json.loads(out)
    names = [c["name"] for c in result["changes"]]
    assert names == ["halve x1", "halve x2"]
    # exact normal probabilities (scipy.stats.norm.sf) decide the ranking

    def p(s1, s2):
        return stats.norm.sf(9.4, 10.0, math.sqrt((2 * s1) ** 2 + s2**2 + (0.5 * 0.1) ** 2))

    # Each upgrade's probability of meeting the requirement after the change matches the
    # closed form within four binomial standard errors of the 4096-sample design. (The two
    # gains per cost differ by 3 %, a statistical tie at this size, so no order is pinned.)
    exact = {"halve x1": p(0.1, 0.3), "halve x2": p(0.2, 0.15)}
    for change in result["changes"]:
        q = exact[change["name"]]
        got = change["requirements"][0]["probability_after"]
        assert got == pytest.approx(q, abs=4 * math.sqrt(q * (1 - q) / 4096))
    assert sorted(c["rank"] for c in result["changes"]) == [1, 2]
    req = result["changes"][0]["requirements"][0]
    # expected failing runs per day: (1 - P) * 0.5 Hz * 86400 s (arithmetic)
    assert req["failing_per_day_after"] == pytest.approx((1 - req["probability_after"]) * 43200)


def test_compare_before_after_files(tmp_path, capsys):
    before = _write(tmp_path, "before.toml")
    after = _write(tmp_path, "after.toml", x3=0.05)
    code, out, err = _run(
        capsys, ["compare", before, after, "--json", "--cost", "250", "--out", tmp_path / "d"]
    )
    assert code == 0, err
    change = json.loads(out)["changes"][0]
    assert change["cost"] == 250
    # variance removed b3^2 (u^2 - u'^2) = 0.25 * (0.01 - 0.0025) (linear model, references.md)
    removed = change["outputs"][0]["variance_removed"]
    total = 4 * 0.04 + 0.09 + 0.25 * 0.01
    assert removed == pytest.approx(0.25 * 0.0075, abs=5 * math.sqrt(2 / 4096) * total)


def test_compare_unknown_upgrade_suggests_a_name(tmp_path, capsys):
    path = _write(tmp_path)
    code, _out, err = _run(capsys, ["compare", path, "--upgrade", "halve x11"])
    assert code == 1
    assert "no upgrade named 'halve x11'; did you mean 'halve x1'?" in err


def test_compare_usage_errors_exit_2(tmp_path, capsys):
    path = _write(tmp_path)
    code, _, err = _run(capsys, ["compare", path, path, "--upgrade", "halve x1"])
    assert code == 2
    assert "give AFTER or --upgrade, not both" in err
    code, _, err = _run(capsys, ["compare", path, "--repetition-rate", "-1"])
    assert code == 2
    assert "must be a positive rate" in err


def test_spec_on_the_invented_upgrade_example(tmp_path, capsys):
    example = resources.files("trapbudget.examples") / "harrier-upgrade.toml"
    code, out, err = _run(
        capsys,
        ["spec", Path(str(example)), "--json", "--samples", "1024", "--out", tmp_path / "h"],
    )
    assert code == 0, err
    result = json.loads(out)
    assert result["feasible"] is True and result["currency"] == "EUR"
    assert all(r["met"] for r in result["requirements"])
    md = (tmp_path / "h" / "report.md").read_text(encoding="utf-8")
    assert "| Input | Present | Required | Headroom | Tier | Cost | Set by |" in md
    assert "laser-safety officer" in md


def test_compare_report_escapes_names(tmp_path, capsys):
    # autoescape (Jinja2): an upgrade named like markup must render as text
    text = (
        _write(tmp_path)
        .read_text(encoding="utf-8")
        .replace('name = "halve x2"', 'name = "<script>alert(1)</script>"')
    )
    path = tmp_path / "escape.toml"
    path.write_text(text, encoding="utf-8")
    code, _, err = _run(capsys, ["compare", path, "--quiet", "--out", tmp_path / "e"])
    assert code == 0, err
    html = (tmp_path / "e" / "report.html").read_text(encoding="utf-8")
    assert "&lt;script&gt;alert(1)&lt;/script&gt;" in html
    assert "<script>alert(1)</script>" not in html
