"""Memory guard: refuse, before any work, a run whose samples would not fit in memory.

The engine holds every sample of a run as float64 (inputs and outputs), plus the
copies its estimators make. :func:`check_memory` estimates that from the design size
and refuses with the estimate and the largest size that fits, instead of letting numpy
fail half-way with a traceback.
"""

from __future__ import annotations

import os
from pathlib import Path

from trapbudget.sensitivity.errors import ScenarioError

__all__ = ["available_memory", "check_memory", "memory_needed"]

#: Bytes per stored value and the factor for the estimators' working copies
#: (chunks, the transformed design, bootstrap or replicate arrays), measured on the trap.
_BYTES = 8
_WORKING_COPIES = {"propagate": 3.0, "rank": 4.0}
#: Share of the machine's memory a run may plan to use.
_SHARE = 0.6


def available_memory() -> int:
    """Bytes of memory this process may plan on: a share of RAM, or of a cgroup limit."""
    try:
        total = os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES")
    except (ValueError, OSError, AttributeError):  # pragma: no cover - not POSIX
        total = 8 * 2**30
    for limit_file in ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"):
        try:
            text = Path(limit_file).read_text(encoding="ascii").strip()
        except OSError:
            continue
        if text.isdigit():
            total = min(total, int(text))
    return int(_SHARE * total)


def memory_needed(
    kind: str,
    n_samples: int,
    n_inputs: int,
    n_outputs: int,
    *,
    second_order: bool = False,
    copies: int = 1,
) -> int:
    """Estimated peak bytes of a ``propagate`` or ``rank`` run of base size ``n_samples``.

    ``rank`` evaluates N (d + 2) rows (N (2 d + 2) with second order), d the number of
    uncertain inputs plus the dummy input. ``copies`` scenarios evaluated on one design
    (a comparison of several upgrades) multiply it. ``"propagate-outputs"`` is a
    summary-only Monte Carlo (``propagate(keep="outputs")``): float32 outputs, int32
    validity and the float64 sorted copy of one output that the summary makes.
    """
    if kind == "propagate-outputs":
        return int(copies * n_samples * (4 * n_outputs + 4 + 16))
    width = n_inputs + n_outputs + 1
    if kind == "rank":
        d = n_inputs + 1
        rows = n_samples * ((2 * d + 2) if second_order else (d + 2))
    else:
        rows = n_samples
    return int(rows * copies * width * _BYTES * _WORKING_COPIES.get(kind, 3.0))


def check_memory(
    kind: str,
    n_samples: int,
    n_inputs: int,
    n_outputs: int,
    *,
    second_order: bool = False,
    copies: int = 1,
    key: str = "settings.n_samples",
    power_of_two: bool = True,
    spelled: str = "n_samples = {}",
) -> None:
    """Raise ScenarioError when the run would not fit, naming the largest size that does.

    ``spelled`` writes a size the way the user gives it (``"--samples {}"`` on the
    command line).
    """
    need = memory_needed(
        kind, n_samples, n_inputs, n_outputs, second_order=second_order, copies=copies
    )
    have = available_memory()
    if need <= have:
        return
    per_sample = need / max(n_samples, 1)
    largest = max(int(have / per_sample), 2)
    if power_of_two:
        largest = 1 << (largest.bit_length() - 1)
    raise ScenarioError(
        f"{spelled.format(n_samples)} would need about {need / 2**30:.1f} GiB for {kind}, "
        f"more than the {have / 2**30:.1f} GiB this machine offers; use "
        f"{spelled.format(largest)} or less",
        key=key,
    )
