"""The bottom line of a study: per requirement met or not, per output what dominates, what next.

Built from the result Datasets and the study record only, so that the terminal,
the report and the ``--json`` result carry the same sentences (``conclusion``)
and the same facts behind them (``findings``).

A finding is a plain record with a ``kind``:

- ``"requirement"``: ``requirement`` (its label), ``output``, ``requirement_kind``,
  ``limit``, ``met``; for a probability requirement ``probability`` with its
  interval ``interval`` [low, high] and ``probability_required``; for a spread
  requirement ``estimate`` (relative standard deviation) with its ``interval``.
- ``"driver"``: ``output``, ``input``, ``share`` (the budget's headline index: the
  Shapley effect with correlated inputs, else the total-order Sobol' index,
  a fraction of the output's variance), ``index`` (which one) and ``rank``.
- ``"validity"``: ``flagged`` and ``total`` Monte Carlo samples outside the model's
  validity.
- ``"unranked"``: ``output`` and ``reason``: an output with no variance to share out
  (undefined or the same in every run, e.g. no trap at a blue detuning).
- ``"next"``: ``command``, the command line to run next, and ``why``.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import xarray as xr

from trapbudget.reports.blocks import Section, Text
from trapbudget.reports.formatting import format_percent, format_quantity, main_index, output_unit

__all__ = ["MIN_DRIVER_SHARE", "bottom_line", "bottom_line_section", "conclusion_text"]

#: Drivers below this share of the variance are not named (unless they are the largest).
MIN_DRIVER_SHARE = 0.05
#: At most this many drivers are named per output.
MAX_DRIVERS = 3


def _float(value: Any) -> float | None:
    try:
        x = float(np.asarray(value))
    except (TypeError, ValueError):
        return None
    return x if math.isfinite(x) else None


def _requirement_findings(reqs: xr.Dataset) -> list[dict[str, Any]]:
    found = []
    for label in reqs["requirement"].values:
        row = reqs.sel(requirement=label)
        kind = str(row["kind"].values)
        item: dict[str, Any] = {
            "kind": "requirement",
            "requirement": str(row["label"].values) if "label" in row else str(label),
            "output": str(row["output"].values),
            "requirement_kind": kind,
            "limit_low": _float(row["limit_low"]) if "limit_low" in row else None,
            "limit_high": _float(row["limit_high"]) if "limit_high" in row else None,
            "limit_units": str(row["limit_units"].values) if "limit_units" in row else "",
            "met": bool(row["met"].values),
        }
        if kind == "relative_spread_at_most":
            item["estimate"] = _float(row["estimate"])
            item["interval"] = [_float(row["estimate_low"]), _float(row["estimate_high"])]
        else:
            item["probability"] = _float(row["probability"])
            item["probability_required"] = _float(row["probability_required"])
            item["interval"] = [_float(row["probability_low"]), _float(row["probability_high"])]
        found.append(item)
    return found


def _driver_findings(budget: xr.Dataset) -> list[dict[str, Any]]:
    key, label = main_index(budget)
    found = []
    for output in [str(o) for o in budget["output"].values]:
        row = budget.sel(output=output)
        share = np.asarray(row[key].values, dtype=float)
        order = np.argsort(-np.nan_to_num(share, nan=-np.inf), kind="stable")
        noise = (
            np.asarray(row["below_noise_floor"].values, dtype=bool)
            if "below_noise_floor" in row
            else np.zeros(share.shape, dtype=bool)
        )
        named = 0
        for i in order:
            value = float(share[i])
            if not math.isfinite(value) or named >= MAX_DRIVERS:
                break
            if named and (value < MIN_DRIVER_SHARE or noise[i]):
                break
            found.append(
                {
                    "kind": "driver",
                    "output": output,
                    "input": str(budget["input"].values[i]),
                    "share": value,
                    "index": key,
                    "index_label": label,
                    "rank": named + 1,
                }
            )
            named += 1
    return found


def _limit_text(item: Mapping[str, Any]) -> str:
    kind, unit = item["requirement_kind"], item.get("limit_units", "")
    low, high = _float(item.get("limit_low")), _float(item.get("limit_high"))
    low, high = (math.nan if v is None else v for v in (low, high))
    if kind == "at_least":
        return f"at least {format_quantity(low, unit)}"
    if kind == "at_most":
        return f"at most {format_quantity(high, unit)}"
    return f"between {format_quantity(low, unit)} and {format_quantity(high, unit)}"


def _span(low: float | None, high: float | None, level: str, digits: int) -> str:
    if low is None or high is None:
        return ""
    # enough digits that both ends differ where they do (99.98 % to 100 %, not 100 to 100)
    while (
        digits < 6
        and low < high
        and format_percent(low, digits=digits) == format_percent(high, digits=digits)
    ):
        digits += 1
    return (
        f"{level} interval {format_percent(low, digits=digits)}"
        f" to {format_percent(high, digits=digits)}; "
    )


def _requirement_sentence(item: Mapping[str, Any], level: str) -> str:
    verdict = "MET" if item["met"] else "MISSED"
    head = f"{verdict}: {item['requirement']}: "
    low, high = item["interval"]
    if item["requirement_kind"] == "relative_spread_at_most":
        est = item.get("estimate")
        asked = f"asked: at most {format_percent(item['limit_high'], digits=1)}"
        if est is None:
            return f"{head}relative spread of {item['output']} not estimated ({asked})."
        return (
            f"{head}relative spread of {item['output']} {format_percent(est, digits=2)} "
            f"({_span(low, high, level, 2)}{asked})."
        )
    p, required = item.get("probability"), item.get("probability_required")
    asked = f"asked: {format_percent(required, digits=0)}" if required else "asked"
    what = f"{item['output']} {_limit_text(item)}"
    if p is None:
        return f"{head}{what}: no valid sample to estimate it ({asked})."
    return (
        f"{head}{what} with probability {format_percent(p, digits=1)} "
        f"({_span(low, high, level, 2)}{asked})."
    )


def _driver_sentence(output: str, drivers: Sequence[Mapping[str, Any]], head: str) -> str:
    named = ", ".join(f"{d['input']} {format_percent(d['share'], digits=0)}" for d in drivers)
    label = drivers[0]["index_label"]
    return f"{head} is driven by {named} ({label}: share of its variance)."


def _output_head(output: str, summary: xr.Dataset | None, datasets) -> str:
    if summary is None or output not in [str(o) for o in summary["output"].values]:
        return output
    row = summary.sel(output=output)
    unit = output_unit(output, summary, datasets.get("samples"), datasets.get("budget"))
    mean, std = _float(row["mean"]), _float(row["std"])
    if mean is None or std is None:
        return output
    return f"{output} ({format_quantity(mean, unit)} +- {format_quantity(std, unit)})"


def bottom_line(
    datasets: Mapping[str, xr.Dataset], study: Mapping[str, Any]
) -> tuple[list[dict[str, Any]], list[str]]:
    """The findings (structured facts) and the conclusion (sentences) of a study.

    Parameters
    ----------
    datasets : mapping
        The study's Datasets (``summary``, ``budget`` and, where present,
        ``requirements`` and ``samples``).
    study : mapping
        The study record (``scenario_file``, ``confidence_level``).

    Returns
    -------
    (findings, conclusion)
        ``findings``: list of records (see the module docstring);
        ``conclusion``: list of sentences, requirements first, then the drivers of
        each output, then what to do next.
    """
    findings: list[dict[str, Any]] = []
    sentences: list[str] = []
    level = format_percent(float(study.get("confidence_level", 0.95) or 0.95), digits=0)
    reqs = datasets.get("requirements")
    req_found = (
        _requirement_findings(reqs) if reqs is not None and "requirement" in reqs.dims else []
    )
    findings += req_found
    sentences += [_requirement_sentence(item, level) for item in req_found]

    budget, summary = datasets.get("budget"), datasets.get("summary")
    drivers = _driver_findings(budget) if budget is not None and "output" in budget.dims else []
    findings += drivers
    by_output: dict[str, list[dict[str, Any]]] = {}
    for d in drivers:
        by_output.setdefault(d["output"], []).append(d)
    for output, items in by_output.items():
        sentences.append(_driver_sentence(output, items, _output_head(output, summary, datasets)))

    if budget is not None:
        names = list(budget.attrs.get("unranked_outputs", []) or [])
        reasons = list(budget.attrs.get("unranked_reasons", []) or [])
        for output, reason in zip(names, reasons, strict=False):
            findings.append({"kind": "unranked", "output": str(output), "reason": str(reason)})
            sentences.append(f"{output} is not ranked: {reason}.")

    samples = datasets.get("samples")
    fraction = _float(samples.attrs.get("invalid_fraction", 0.0)) if samples is not None else None
    if samples is not None and fraction:
        total = int(samples.sizes.get("sample", 0))
        flagged = round(fraction * total)
        findings.append({"kind": "validity", "flagged": flagged, "total": total})
        sentences.append(
            f"CAUTION: {flagged} of {total} Monte Carlo samples fall outside the model's "
            "validity (see the validity section); their outputs are the model's honest limits."
        )

    scenario_file = str(study.get("scenario_file") or "SCENARIO.toml")
    missed = [item for item in req_found if not item["met"]]
    if fraction is not None and fraction >= 0.5:
        command = f"trapbudget predict {scenario_file}"
        why = (
            "to see what the model gives at the nominal point and why: most runs fall "
            "outside the model's validity, so no tolerance is worth setting yet"
        )
    elif missed:
        worst = missed[0]
        lever = by_output.get(worst["output"], [])
        why = f"to find the tolerances that meet '{worst['requirement']}' at least cost"
        if lever:
            why += (
                f"; the largest lever on {worst['output']} is {lever[0]['input']} "
                f"({format_percent(lever[0]['share'], digits=0)} of its variance)"
            )
        command = f"trapbudget spec {scenario_file}"
    elif req_found:
        command = f"trapbudget spec {scenario_file}"
        why = "every requirement is met; to see which tolerances could be relaxed"
    else:
        command = f"trapbudget scan {scenario_file} {drivers[0]['input']}" if drivers else ""
        why = (
            "no requirement is set (add a [requirements.<name>] table to test one); to see "
            "how the outputs follow the largest drift"
        )
    if command:
        findings.append({"kind": "next", "command": command, "why": why})
        sentences.append(f"NEXT: run '{command}' {why}.")
    return findings, sentences


def conclusion_text(datasets: Mapping[str, xr.Dataset], study: Mapping[str, Any]) -> list[str]:
    """The sentences of :func:`bottom_line` only."""
    return bottom_line(datasets, study)[1]


def bottom_line_section(
    datasets: Mapping[str, xr.Dataset], study: Mapping[str, Any]
) -> Section | None:
    """The report's first section: the sentences of :func:`bottom_line`."""
    if datasets.get("budget") is None and datasets.get("requirements") is None:
        return None
    sentences = conclusion_text(datasets, study)
    if not sentences:
        return None
    blocks: list[Any] = [
        Text(s, "caution" if s.startswith(("MISSED", "CAUTION")) else "p") for s in sentences
    ]
    return Section("Bottom line", blocks)
