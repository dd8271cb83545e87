"""Fuzzed scenarios and data files: every outcome is exit 0, or exit 1/2 with one stderr line.

Hypothesis mutates the invented demo files (values swapped for other TOML values or
hostile strings, lines dropped or duplicated, bytes flipped) and runs the command line
in-process. Bounded to a few seconds here; ``benchmarks/fuzz_inputs.py`` runs the same
strategies for as long as one likes.
"""

from __future__ import annotations

import contextlib
import io
from importlib import resources
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from trapbudget.cli.main import main

#: Values a careless or hostile user might write where a quantity or a name belongs.
HOSTILE = [
    '"6 mW/0"',
    '"6 (mW"',
    '"\\u0000"',
    '"6 dB degC/s"',
    '"nan mW"',
    '"inf"',
    '"-1e400 K"',
    '"1e-320 %"',
    '"4e-08 %"',
    '"0"',
    '"%"',
    '"mW"',
    '"12 MHz"',
    '"22 degC"',
    '"../../etc/passwd"',
    '"[x](javascript:alert(1))"',
    '"# heading\\n"',
    "[]",
    "{}",
    "[1, 2]",
    '["a", {}]',
    "true",
    "-0.0",
    "1e308",
    "nan",
    "2",
    "4096",
]


def _demo_text(name: str) -> str:
    return (resources.files("trapbudget.examples") / name).read_text(encoding="utf-8")


def mutate(text: str, data: st.DataObject) -> str:
    lines = text.splitlines()
    for _ in range(data.draw(st.integers(1, 3), label="mutations")):
        i = data.draw(st.integers(0, len(lines) - 1), label="line")
        kind = data.draw(st.sampled_from(["value", "drop", "duplicate", "key"]), label="kind")
        line = lines[i]
        if kind == "value" and "=" in line:
            key = line.split("=", 1)[0]
            lines[i] = f"{key}= {data.draw(st.sampled_from(HOSTILE), label='value')}"
        elif kind == "drop":
            del lines[i]
        elif kind == "duplicate":
            lines.insert(i, line)
        elif kind == "key" and "=" in line:
            lines[i] = "x" + line
        if not lines:
            lines = [""]
    return "\n".join(lines) + "\n"


def outcome(argv: list[str]) -> tuple[int, str]:
    err = io.StringIO()
    with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
        code = main(argv)
    return code, err.getvalue()


def check(code: int, err: str) -> None:
    assert "Traceback" not in err
    if code:
        lines = [line for line in err.splitlines() if line.strip()]
        assert code in (1, 2), (code, err)
        assert len(lines) == 1, err


@pytest.fixture(scope="module")
def folder(tmp_path_factory) -> Path:
    return tmp_path_factory.mktemp("fuzz")


FUZZ = settings(
    max_examples=40,
    deadline=None,
    derandomize=True,
    suppress_health_check=[HealthCheck.function_scoped_fixture, HealthCheck.too_slow],
)


@pytest.mark.filterwarnings("ignore::trapbudget.sensitivity.ModelValidityWarning")
@FUZZ
@given(data=st.data())
def test_fuzzed_scenarios(folder, data):
    path = folder / "fuzzed.toml"
    path.write_text(mutate(_demo_text("harrier-rb87.toml"), data), encoding="utf-8")
    check(*outcome(["predict", str(path), "--quiet"]))


@FUZZ
@given(data=st.data())
def test_fuzzed_data_files(folder, data):
    scenario = folder / "scenario.toml"
    scenario.write_text(_demo_text("harrier-rb87.toml"), encoding="utf-8")
    path = folder / "fuzzed.csv"
    text = mutate(_demo_text("harrier-detuning-scan.csv").replace(",", " = ", 0), data)
    raw = bytearray(text.encode("utf-8"))
    for _ in range(data.draw(st.integers(0, 2), label="flips")):
        j = data.draw(st.integers(0, len(raw) - 1), label="byte")
        raw[j] = data.draw(st.integers(0, 255), label="to")
    path.write_bytes(bytes(raw))
    argv = ["calibrate", str(scenario), str(path), "--free", "loading_prefactor"]
    check(*outcome([*argv, "--out", str(folder / "out"), "--quiet"]))
