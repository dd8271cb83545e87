"""Kill trials and concurrent writers on one report folder (run by hand).

    python benchmarks/kill_trials.py --trials 40

Runs ``trapbudget rank --out DIR`` on the invented demo scenario, then, trial after
trial, starts it again and kills it (SIGKILL or SIGINT) after a random delay spread
over a whole run, and finally starts two writers at once. After every trial it
classifies DIR: "as it was" (the previous report), "new" (a complete newer report) or
"broken" (missing, or without its files). Prints the counts and what was left beside
DIR after the next clean run.
"""

from __future__ import annotations

import argparse
import collections
import random
import signal
import subprocess
import sys
import tempfile
import time
from importlib import resources
from pathlib import Path

NEEDED = ("study.json", "report.html", "report.md", "budget.nc", "summary.nc")


def state(out: Path, before: bytes) -> str:
    if not out.is_dir() or not all((out / n).exists() for n in NEEDED):
        return "broken"
    return "as it was" if (out / "study.json").read_bytes() == before else "new"


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--trials", type=int, default=40)
    parser.add_argument("--seed", type=int, default=1)
    args = parser.parse_args()
    rnd = random.Random(args.seed)
    with tempfile.TemporaryDirectory() as tmp:
        folder = Path(tmp)
        scenario = folder / "s.toml"
        source = resources.files("trapbudget.examples") / "harrier-rb87.toml"
        scenario.write_bytes(source.read_bytes())
        out = folder / "report"
        argv = [sys.executable, "-m", "trapbudget.cli", "rank", str(scenario)]
        argv += ["--samples", "64", "--no-convergence", "--quiet", "--out", str(out)]
        start = time.perf_counter()
        subprocess.run(argv, check=True, capture_output=True)
        duration = time.perf_counter() - start
        counts: collections.Counter[str] = collections.Counter()
        for i in range(args.trials):
            seed_argv = [*argv, "--seed", str(i)]
            before = (out / "study.json").read_bytes()
            sig = rnd.choice([signal.SIGKILL, signal.SIGKILL, signal.SIGINT])
            child = subprocess.Popen(
                seed_argv, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
            )
            time.sleep(rnd.uniform(0.0, 1.1 * duration))
            child.send_signal(sig)
            child.wait()
            counts[f"{sig.name}: {state(out, before)}"] += 1
        # two writers at once: one complete report, a clear message to the other
        before = (out / "study.json").read_bytes()
        writers = [
            subprocess.Popen([*argv, "--seed", str(100 + k)], stderr=subprocess.PIPE, text=True)
            for k in range(2)
        ]
        results = [(w.wait(), w.stderr.read().strip()) for w in writers]
        counts[f"two writers: {state(out, before)}"] += 1
        leftovers_before = sorted(p.name for p in folder.iterdir() if p.name != "s.toml")
        subprocess.run(argv, check=True, capture_output=True)
        leftovers_after = sorted(p.name for p in folder.iterdir() if p.name != "s.toml")
    print(f"one run: {duration:.1f} s; {args.trials} kill trials")
    for key, value in sorted(counts.items()):
        print(f"  {key:28s} {value}")
    for code, err in results:
        print(f"  writer exit {code}: {err[-160:] or '(ok)'}")
    print(f"beside the folder after the trials: {leftovers_before}")
    print(f"beside the folder after one clean run: {leftovers_after}")


if __name__ == "__main__":
    main()
