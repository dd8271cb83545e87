"""Long fuzz run of the command line on mutated demo scenarios and data files (run by hand).

    python benchmarks/fuzz_inputs.py --seconds 600

Each run mutates one invented demo file (values replaced by hostile TOML values,
lines dropped, duplicated or given a wrong key, bytes flipped in data files), runs one
subcommand in-process and classifies the outcome: exit 0, a clean one-line error (exit
1 or 2), or a crash (a traceback, or an error message of several lines). Prints the
counts, the distinct clean messages (by their first words) and every crash's input.
"""

from __future__ import annotations

import argparse
import collections
import contextlib
import io
import random
import tempfile
import time
import traceback
import warnings
from importlib import resources
from pathlib import Path

from trapbudget.cli.main import main

HOSTILE = [
    '"6 mW/0"', '"6 (mW"', '"\\u0000"', '"6 dB degC/s"', '"nan mW"', '"inf"', '"-1e400 K"',
    '"1e-320 %"', '"4e-08 %"', '"0"', '"%"', '"mW"', '"12 MHz"', '"22 degC"', '"-5 K"',
    '"../../etc/passwd"', '"[x](javascript:alert(1))"', '"# heading\\n"', "[]", "{}",
    "[1, 2]", '["a", {}]', "true", "-0.0", "1e308", "nan", "2", "4096", '"1e9 Pa"',
    '"0.5 %"', '"300 %"', '"1 rad/s"', '"12 G/cm"', '"rectangular"', '"arcsine"',
    '"expanded"', '["0 mW", "1 mW"]', '["1 mW", "0 mW"]', "0.999", "1.0000001", "-1",
]  # fmt: skip

SCENARIOS = (
    "harrier-rb87.toml",
    "harrier-upgrade.toml",
    "harrier-cs133.toml",
    "harrier-rb87-2dmot.toml",
    "harrier-sr88-blue.toml",
    "harrier-sr88-red.toml",
)
DATA = ("harrier-detuning-scan.csv", "harrier-loading-curves.csv", "harrier-time-of-flight.csv")


def mutate_text(text: str, rnd: random.Random) -> str:
    lines = text.splitlines()
    for _ in range(rnd.randint(1, 4)):
        if not lines:
            break
        i = rnd.randrange(len(lines))
        kind = rnd.choice(["value", "value", "drop", "duplicate", "key"])
        if kind == "value" and "=" in lines[i]:
            lines[i] = lines[i].split("=", 1)[0] + "= " + rnd.choice(HOSTILE)
        elif kind == "drop":
            del lines[i]
        elif kind == "duplicate":
            lines.insert(i, lines[i])
        elif kind == "key" and "=" in lines[i]:
            lines[i] = "x" + lines[i]
    return "\n".join(lines) + "\n"


def run(argv: list[str]) -> tuple[str, str]:
    err = io.StringIO()
    try:
        with (
            contextlib.redirect_stderr(err),
            contextlib.redirect_stdout(io.StringIO()),
            warnings.catch_warnings(),
        ):
            warnings.simplefilter("ignore")
            code = main(argv)
    except BaseException:  # a crash: exactly what the fuzzer looks for
        return "crash", traceback.format_exc(limit=3)
    lines = [line for line in err.getvalue().splitlines() if line.strip()]
    if code == 0:
        return "ok", ""
    if code in (1, 2) and len(lines) == 1 and "Traceback" not in lines[0]:
        return f"exit {code}", " ".join(lines[0].split(":")[0:1] + lines[0].split(": ")[-1:])[:60]
    return "crash", err.getvalue()


def main_loop(seconds: float, seed: int) -> None:
    rnd = random.Random(seed)
    package = resources.files("trapbudget.examples")
    outcomes: collections.Counter[str] = collections.Counter()
    messages: collections.Counter[str] = collections.Counter()
    crashes = []
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        for name in SCENARIOS + DATA:
            (folder / name).write_bytes((package / name).read_bytes())
        stop = time.monotonic() + seconds
        while time.monotonic() < stop:
            if rnd.random() < 0.6:
                source = rnd.choice(SCENARIOS)
                path = folder / "fuzzed.toml"
                path.write_text(mutate_text((folder / source).read_text(), rnd))
                argv = ["predict", str(path), "--quiet"]
                roll = rnd.random()
                if roll < 0.15:
                    argv = ["rank", str(path), "--samples", "32", "--no-convergence", "--quiet"]
                    argv += ["--out", str(folder / "out")]
                elif roll < 0.25:
                    argv = ["scan", str(path), rnd.choice(["detuning", "beam_power", "x"])]
                    argv += ["--points", "5", "--samples", "32", "--out", str(folder / "scan")]
                    argv += ["--quiet"]
            else:
                source = rnd.choice(DATA)
                raw = bytearray(mutate_text((folder / source).read_text(), rnd).encode())
                for _ in range(rnd.randint(0, 3)):
                    raw[rnd.randrange(len(raw))] = rnd.randrange(256)
                path = folder / "fuzzed.csv"
                path.write_bytes(bytes(raw))
                argv = ["calibrate", str(folder / SCENARIOS[0]), str(path), "--free"]
                argv += ["loading_prefactor", "--out", str(folder / "cal"), "--quiet"]
            kind, message = run(argv)
            outcomes[kind] += 1
            if kind == "crash":
                crashes.append((argv[0], path.read_bytes()[:4000], message))
            elif message:
                messages[message] += 1
    total = sum(outcomes.values())
    print(f"runs: {total}  " + "  ".join(f"{k}: {v}" for k, v in sorted(outcomes.items())))
    print(f"distinct clean error messages: {len(messages)}")
    for text, count in messages.most_common(15):
        print(f"  {count:5d}  {text}")
    print(f"crashes: {len(crashes)}")
    for command, content, message in crashes[:10]:
        print("-" * 60, command)
        print(message)
        print(content.decode("utf-8", "replace")[:1500])


if __name__ == "__main__":
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--seconds", type=float, default=60.0)
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args()
    main_loop(args.seconds, args.seed)
