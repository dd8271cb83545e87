"""The catalogue of bad input: every class gets one line on stderr naming the file, the key
(or option) and the fix, exit 1 for bad input and 2 for bad usage, and no traceback.

The scenario cases mutate the invented demo scenario (examples/harrier-rb87.toml); the
command runs in-process through ``trapbudget.cli.main.main``.
"""

from __future__ import annotations

import re
from importlib import resources
from pathlib import Path

import pytest

from trapbudget.cli.main import main

DEMO_FILES = (
    "harrier-rb87.toml",
    "harrier-cs133.toml",
    "harrier-upgrade.toml",
    "harrier-detuning-scan.csv",
    "harrier-week-log.csv",
    "harrier-log-mapping.toml",
)


@pytest.fixture(scope="module")
def demo(tmp_path_factory) -> Path:
    folder = tmp_path_factory.mktemp("demo")
    package = resources.files("trapbudget.examples")
    for name in DEMO_FILES:
        (folder / name).write_bytes((package / name).read_bytes())
    return folder


def run(capsys, argv) -> tuple[int, str]:
    code = main([str(a) for a in argv])
    err = capsys.readouterr().err
    return code, err


def one_line(err: str) -> str:
    lines = [line for line in err.splitlines() if line.strip()]
    assert len(lines) == 1, err
    assert "Traceback" not in err
    return lines[0]


def mutate(demo: Path, tmp_path: Path, old: str, new: str, *, count: int = 1) -> Path:
    text = (demo / "harrier-rb87.toml").read_text(encoding="utf-8")
    assert old in text, old
    path = tmp_path / "mutated.toml"
    path.write_text(text.replace(old, new, count), encoding="utf-8")
    return path


# (old text in the demo scenario, new text, what the one line must say)
SCENARIO_CASES = {
    "division by zero in a unit": (
        'nominal = "6 mW"',
        'nominal = "6 mW/0"',
        r"inputs\.beam_power\.nominal: '6 mW/0': 'mW/0' is not a unit",
    ),
    "unbalanced parenthesis": (
        'nominal = "6 mW"',
        'nominal = "6 (mW"',
        r"inputs\.beam_power\.nominal: '\(mW' is not a unit",
    ),
    "NUL character in a tolerance": (
        'tolerance = "0.3 mm"',
        'tolerance = "0.3 \\u0000mm"',
        r"inputs\.beam_waist\.tolerance: .*is not a unit",
    ),
    "decibel offset unit": (
        'nominal = "6 mW"',
        'nominal = "6 dB degC/s"',
        r"inputs\.beam_power\.nominal: '6 dB degC/s'.* is not a unit",
    ),
    "requirement output is a list": (
        'output = "atom_number"\nat_least',
        "output = []\nat_least",
        r"requirements\[0\]\.output: output must be a string",
    ),
    "correlation names a table": (
        'inputs = ["beam_power", "repump_power"]',
        'inputs = ["beam_power", {}]',
        r"correlations\[0\]\.inputs: inputs must be two input names",
    ),
    "model is a table": (
        'model = "VaporCellMOT"',
        "model = {}",
        r"scenario\.model: must be a string, got dict",
    ),
    "duplicate requirement labels": (
        'label = "cycle time budget (invented)"',
        'label = "enough atoms for the interferometer (invented)"',
        r"requirements\[1\]\.label: label .* is also that of requirements\[0\]",
    ),
    "sample size beyond memory": (
        "n_samples = 512",
        f"n_samples = {2**40}",
        r"settings\.n_samples: n_samples = 1099511627776 would need about .* use n_samples = \d+",
    ),
}


@pytest.mark.parametrize("case", sorted(SCENARIO_CASES))
def test_scenario_values(capsys, demo, tmp_path, case):
    old, new, message = SCENARIO_CASES[case]
    path = mutate(demo, tmp_path, old, new)
    code, err = run(capsys, ["rank", path, "--out", tmp_path / "out", "--quiet"])
    line = one_line(err)
    assert code == 1
    assert str(path) in line
    assert re.search(message, line), line
    assert not (tmp_path / "out").exists()  # refused before any work


def test_an_empty_scenario_is_refused(capsys, tmp_path):
    path = tmp_path / "empty.toml"
    path.write_text("")
    code, err = run(capsys, ["predict", path])
    assert code == 1
    assert re.search(
        r"empty\.toml: the scenario is empty, so there is nothing to study", one_line(err)
    )


def test_a_byte_order_mark_is_accepted(capsys, demo, tmp_path):
    path = tmp_path / "bom.toml"
    path.write_bytes(b"\xef\xbb\xbf" + (demo / "harrier-rb87.toml").read_bytes())
    code, err = run(capsys, ["predict", path, "--quiet"])
    assert code == 0, err


@pytest.mark.parametrize(
    ("content", "message"),
    [
        ("binary", r"is binary, not text; give a text file \(UTF-8\)"),
        ("latin-1", r"is not UTF-8 text \(byte 0xb0 at offset \d+.*save the file as UTF-8"),
    ],
)
def test_data_files_that_are_not_utf8(capsys, demo, tmp_path, content, message):
    path = tmp_path / "data.csv"
    if content == "binary":
        path.write_bytes(bytes(range(256)))
    else:  # a spreadsheet export in Latin-1 with a degree sign in the header
        text = (demo / "harrier-detuning-scan.csv").read_text(encoding="utf-8")
        path.write_bytes(text.replace("detuning [MHz]", "T [°C],detuning [MHz]").encode("latin-1"))
    argv = ["calibrate", demo / "harrier-rb87.toml", path, "--free", "loading_prefactor"]
    code, err = run(capsys, [*argv, "--out", tmp_path / "out"])
    assert code == 1
    line = one_line(err)
    assert str(path) in line and re.search(message, line), line
    code, err = run(
        capsys, ["diagnose", demo / "harrier-rb87.toml", path, "--out", tmp_path / "d"]
    )
    assert code == 1 and re.search(message, one_line(err))


def test_a_scenario_in_latin1_names_the_fix(capsys, demo, tmp_path):
    path = tmp_path / "latin.toml"
    text = (demo / "harrier-rb87.toml").read_text(encoding="utf-8")
    path.write_bytes(text.replace("(invented)", "(invented, 22 °C)", 1).encode("latin-1"))
    code, err = run(capsys, ["predict", path])
    assert code == 1 and "save the file as UTF-8" in one_line(err)


@pytest.mark.parametrize(
    ("out", "message"),
    [
        ("/proc/no/such/folder", r"--out /proc/no/such/folder: cannot create a folder in /proc"),
        ("{tmp}/file.txt/sub", r"--out .*file\.txt/sub: .*file\.txt is a file"),
        ("{tmp}/not-a-report", r"--out .*not-a-report: exists and is not a trapbudget report"),
    ],
)
def test_unusable_out_is_bad_usage_before_any_work(capsys, demo, tmp_path, out, message):
    (tmp_path / "file.txt").write_text("x")
    (tmp_path / "not-a-report").mkdir()
    (tmp_path / "not-a-report" / "notes.txt").write_text("keep me")
    out = out.format(tmp=tmp_path)
    argv = ["rank", demo / "harrier-rb87.toml", "--samples", "64", "--no-convergence"]
    code, err = run(capsys, [*argv, "--out", out, "--quiet"])
    assert code == 2
    assert re.search(message, one_line(err)), err
    assert (tmp_path / "not-a-report" / "notes.txt").read_text() == "keep me"


@pytest.mark.parametrize(
    ("argv", "message"),
    [
        (["rank", "{s}", "--samples", str(2**24)], r"--samples 16777216 would need about"),
        (["rank", "{s}", "--samples", str(2**40)], r"use --samples \d+ or less"),
        (["compare", "{u}", "--samples", str(2**26)], r"--samples 67108864 would need about"),
        (["diagnose", "{s}", "{log}", "--false-alarm-rate", "2"], r"--false-alarm-rate: '2'"),
        (["diagnose", "{s}", "{log}", "--false-alarm-rate", "nan"], r"'nan' is not a finite"),
        (["diagnose", "{s}", "{log}", "--reference", "2026-13-45"], r"--reference: '2026-13-45'"),
        (["compare", "{s}", "{u}", "--cost", "nan"], r"argument --cost: 'nan' is not a finite"),
        (["compare", "{s}", "{u}", "--cost", "-5"], r"argument --cost: '-5' is negative"),
    ],
)
def test_bad_options_are_usage_errors_naming_the_option(capsys, demo, tmp_path, argv, message):
    names = {
        "s": demo / "harrier-rb87.toml",
        "u": demo / "harrier-upgrade.toml",
        "log": demo / "harrier-week-log.csv",
    }
    argv = [a.format(**names) for a in argv]
    code, err = run(capsys, [*argv, "--out", tmp_path / "out", "--quiet"])
    assert code == 2
    assert re.search(message, one_line(err)), err
    assert not (tmp_path / "out").exists()


def test_an_upgrade_with_a_misspelt_unit_is_named_at_load(capsys, demo, tmp_path):
    text = (demo / "harrier-upgrade.toml").read_text(encoding="utf-8")
    written = 'changes = { beam_power = { tolerance = "0.3 %" } }'
    assert written in text, "the demo upgrade file tightens the beam power"
    path = tmp_path / "upgrade.toml"
    misspelt = 'changes = { beam_power = { tolerance = "0.1 mQ" } }'
    path.write_text(text.replace(written, misspelt, 1), encoding="utf-8")
    code, err = run(capsys, ["predict", path])
    assert code == 1
    assert re.search(r"upgrades\[\d+\]\.changes\.\w+\.tolerance: .*'mQ'", one_line(err)), err


def test_a_system_file_as_data_is_not_printed(capsys, demo, tmp_path):
    path = tmp_path / "passwd.csv"
    path.write_text("root:x:0:0:root:/root:/bin/bash,daemon:x:1:1:daemon:/usr/sbin\n")
    argv = ["calibrate", demo / "harrier-rb87.toml", path, "--free", "loading_prefactor"]
    code, err = run(capsys, [*argv, "--out", tmp_path / "out"])
    line = one_line(err)
    assert code == 1 and "/root:/bin/bash" not in line and "daemon" not in line


def test_a_tampered_report_folder_cannot_write_outside_it(capsys, demo, tmp_path):
    # The output names of a saved budget become figure file names: '../..' must stay inside.
    from trapbudget.sensitivity import load_dataset, save_dataset

    out = tmp_path / "deep" / "report"
    argv = ["rank", demo / "harrier-rb87.toml", "--samples", "64", "--no-convergence"]
    assert run(capsys, [*argv, "--out", out, "--quiet"])[0] == 0
    for name in ("budget", "summary"):
        ds = load_dataset(out / f"{name}.nc")
        outputs = [str(o) for o in ds["output"].values]
        ds = ds.assign_coords(output=["../../../escaped", *outputs[1:]])
        save_dataset(ds, out / f"{name}.nc")
    before = set(tmp_path.rglob("*"))
    code, err = run(capsys, ["report", out, "--quiet"])
    created = {p for p in set(tmp_path.rglob("*")) - before if out not in p.parents and p != out}
    assert created == set(), created
    assert code in (0, 1, 2)
    if code:
        one_line(err)


def test_a_scenario_named_like_a_result_file_cannot_clobber_it(capsys, demo, tmp_path):
    path = tmp_path / "study.json"
    path.write_bytes((demo / "harrier-rb87.toml").read_bytes())
    out = tmp_path / "out"
    argv = ["rank", path, "--samples", "64", "--no-convergence", "--out", out, "--quiet"]
    assert run(capsys, argv)[0] == 0
    assert (out / "input" / "study.json").is_file()
    code, err = run(capsys, ["report", out, "--quiet"])
    assert code == 0, err


@pytest.mark.parametrize(
    ("old", "new", "message"),
    [
        (
            "[diagnosis]\n",
            "[diagnosis]\nbogus = 1\n",
            r"mapping\.toml: diagnosis\.bogus: unknown key",
        ),
        (
            'scale = "3 mW/V"',
            'scale = "3 mQ/V"',
            r"mapping\.toml: diagnosis\.columns\.cooling_photodiode"
            r"\.scale: '3 mQ/V' is not a quantity",
        ),
        (
            'input = "beam_power"',
            'input = "beam_powr"',
            r"mapping\.toml: diagnosis\.columns\."
            r"cooling_photodiode\.input: input 'beam_powr' is not a model input; did you mean",
        ),
        (
            "[diagnosis.columns.cooling_photodiode]\n",
            "[diagnosis.columns.cooling_photodiode]\ngain = 2\n",
            r"diagnosis\.columns\.cooling_photodiode\.gain: unknown key 'gain'",
        ),
    ],
)
def test_mapping_errors_name_the_mapping_file(capsys, demo, tmp_path, old, new, message):
    text = (demo / "harrier-log-mapping.toml").read_text(encoding="utf-8")
    assert old in text
    mapping = tmp_path / "mapping.toml"
    mapping.write_text(text.replace(old, new, 1), encoding="utf-8")
    argv = ["diagnose", demo / "harrier-rb87.toml", demo / "harrier-week-log.csv"]
    code, err = run(capsys, [*argv, "--mapping", mapping, "--out", tmp_path / "out"])
    assert code == 1
    assert re.search(message, one_line(err)), err


def test_skipped_data_rows_are_counted_and_said(capsys, demo, tmp_path):
    lines = (demo / "harrier-detuning-scan.csv").read_text(encoding="utf-8").splitlines()
    first = next(i for i, line in enumerate(lines) if line and line[0] in "-0123456789")
    lines[first] = lines[first].split(",")[0] + ",nan"
    lines[first + 1] = lines[first + 1].split(",")[0] + ","
    path = tmp_path / "gaps.csv"
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    argv = ["calibrate", demo / "harrier-rb87.toml", path, "--free", "loading_prefactor"]
    code, err = run(capsys, [*argv, "--out", tmp_path / "out", "--json"])
    assert code == 0
    assert "DataWarning: gaps.csv: 2 row(s) skipped (a needed value is empty or NaN)" in err


def test_a_scenario_without_tolerances_has_nothing_to_rank(capsys, tmp_path):
    path = tmp_path / "fixed.toml"
    path.write_text(
        '[scenario]\ntitle = "all fixed (invented)"\nspecies = "Rb87"\n'
        '[inputs.beam_power]\nnominal = "6 mW"\n',
        encoding="utf-8",
    )
    code, err = run(capsys, ["rank", path, "--out", tmp_path / "out"])
    assert code == 1
    assert re.search(r"fixed\.toml: inputs: no input has a tolerance", one_line(err))
    assert run(capsys, ["predict", path, "--quiet"])[0] == 0


def test_compare_of_two_species_is_refused_naming_the_after_file(capsys, demo, tmp_path):
    # a before/after comparison is one apparatus changed; two species share no random
    # numbers worth pairing (common practice: each is studied on its own)
    argv = ["compare", demo / "harrier-rb87.toml", demo / "harrier-cs133.toml"]
    code, err = run(capsys, [*argv, "--out", tmp_path / "out", "--quiet"])
    assert code == 1
    line = one_line(err)
    assert "harrier-cs133.toml: scenario.species" in line and "Cs133" in line and "Rb87" in line
    assert "trapbudget rank" in line
    assert not (tmp_path / "out").exists()
