"""Write models/capture_table_data.py: the aligned-trap loading table of the capture model.

Run by hand after changing the capture physics (about ten minutes on one core)::

    python benchmarks/make_capture_table.py

It evaluates :func:`trapbudget.models.capture.build_table` (straight-line capture
speeds over the symmetric line quadrature, at every node of
:data:`trapbudget.models.capture.TABLE_GRID`) and stores the result as compressed
text in a Python module, so that it installs with the package.
"""

from __future__ import annotations

import os

os.environ.setdefault("NUMBA_NUM_THREADS", "1")

import sys
import time
from pathlib import Path

from trapbudget.models import capture

TARGET = Path(__file__).resolve().parents[1] / "models" / "capture_table_data.py"


def main() -> None:
    start = time.perf_counter()

    def progress(done: int, total: int) -> None:
        sys.stderr.write(f"\r{done}/{total} nodes, {time.perf_counter() - start:6.0f} s")

    table = capture.build_table(progress)
    write(table)
    sys.stderr.write(f"\nwrote {TARGET} in {time.perf_counter() - start:.0f} s\n")


def write(table) -> None:
    """Store the table as the generated module."""
    text, bounds = capture.encode_table(table)
    lines = [text[i : i + 88] for i in range(0, len(text), 88)]
    body = "\n".join(f'    "{line}"' for line in lines)
    grid = "\n".join(
        f'    ("{name}", {lo!r}, {hi!r}, {n}, {off!r}),'
        for name, lo, hi, n, off in capture.TABLE_GRID
    )
    TARGET.write_text(
        '"""Aligned-trap loading table of the capture model (generated; do not edit).\n\n'
        "Written by benchmarks/make_capture_table.py from trapbudget.models.capture.build_table:\n"
        "m4^(1/4) and m6 / m4^1.5 (m_n the mean of (vc k / Gamma)^n) on TABLE_GRID, as\n"
        '16-bit codes of the logarithms, zlib-compressed, base64.\n"""\n\n'
        f"GRID = (\n{grid}\n)\n"
        f"BOUNDS = {bounds!r}\n\n"
        f"TABLE = (\n{body}\n)\n"
    )


if __name__ == "__main__":
    main()
