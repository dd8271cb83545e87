"""Start-up time of the command line, side by side with `python -c "import numpy"`.

Run by hand: ``python benchmarks/bench_startup.py [--repeat 15]``. Each command runs
``repeat`` times, interleaved so that machine load hits all alike; the script prints the
median wall time of each and its ratio to the numpy import. Target (house issue):
``trapbudget --version`` within 3x ``import numpy``; usage and input errors answer
without importing numba, matplotlib, xarray, SALib or scipy.stats.
"""

from __future__ import annotations

import argparse
import statistics
import subprocess
import sys
import tempfile
import time
from pathlib import Path

BAD_SCENARIO = """[scenario]
title = "a typo in an input name"
species = "Rb87"
[inputs.beam_powr]
nominal = "4 mW"
"""

HEAVY = ("numba", "matplotlib", "xarray", "SALib", "scipy.stats")


def commands(bad: Path) -> dict[str, list[str]]:
    py = sys.executable
    cli = [py, "-m", "trapbudget.cli"]
    return {
        "python -c 'import numpy'": [py, "-c", "import numpy"],
        "trapbudget --version": [*cli, "--version"],
        "trapbudget --help": [*cli, "--help"],
        "usage error (rank, no file)": [*cli, "rank"],
        "input error (misspelt input)": [*cli, "rank", str(bad)],
    }


def heavy_modules(argv: list[str]) -> list[str]:
    """The heavy modules a command line imports before it answers."""
    code = (
        "import sys\n"
        "from trapbudget.cli.main import main\n"
        f"try:\n    main({argv!r})\nexcept SystemExit:\n    pass\n"
        f"print('HEAVY:' + ','.join(m for m in {HEAVY!r} if m in sys.modules))"
    )
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True)
    line = [x for x in out.stdout.splitlines() if x.startswith("HEAVY:")][-1]
    return [m for m in line.removeprefix("HEAVY:").split(",") if m]


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--repeat", type=int, default=15)
    args = parser.parse_args()
    with tempfile.TemporaryDirectory() as folder:
        bad = Path(folder) / "bad.toml"
        bad.write_text(BAD_SCENARIO)
        runs = commands(bad)
        times: dict[str, list[float]] = {name: [] for name in runs}
        for _ in range(args.repeat):
            for name, argv in runs.items():
                start = time.perf_counter()
                subprocess.run(argv, capture_output=True)
                times[name].append(time.perf_counter() - start)
        base = statistics.median(times["python -c 'import numpy'"])
        print(f"{'command':34s} {'median (s)':>10s} {'x numpy':>8s}")
        for name, values in times.items():
            median = statistics.median(values)
            print(f"{name:34s} {median:10.3f} {median / base:8.2f}")
        for label, argv in (("--version", ["--version"]), ("input error", ["rank", str(bad)])):
            print(f"heavy modules imported by {label}: {heavy_modules(argv) or 'none'}")


if __name__ == "__main__":
    main()
