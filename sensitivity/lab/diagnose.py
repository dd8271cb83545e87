"""Diagnosing day-to-day drift of the atom number from a monitoring log.

Log format
----------
A comma-separated file; ``#`` lines before the header are metadata
(``# label = ...``). The header has a ``timestamp`` column (ISO 8601, e.g.
``2026-11-23T08:00:00``; rows must be in time order) and monitored channels
written ``name [unit]`` (beam-power photodiode, lock error or wavemeter
reading, coil current, cell and room temperature, ion-pump current, ...), plus
the measured output (``atom_number [1]``, optionally
``atom_number_uncertainty [1]``).

Mapping columns to model inputs
-------------------------------
A column named after a model input is that input (units converted). Other
columns are mapped in a ``[diagnosis]`` table: the ``mapping=`` argument (a
mapping, or a TOML file holding the table), else the scenario's::

    [diagnosis]
    output = "atom_number"          # model output compared (default atom_number)
    measured = "atom_number"        # log column holding its measurement
    [diagnosis.columns.room_temperature]
    input = "cell_temperature"      # input = column (converted)
    [diagnosis.columns.cooling_photodiode]
    input = "beam_power"
    scale = "2.5 mW/V"              # input = offset + scale * column
    offset = "0 mW"
    [diagnosis.columns.lock_error]
    input = "detuning"
    offset = "nominal"              # input = scenario nominal + scale * column

A column that maps to no input is not used; it is listed in
``Diagnosis.ignored_columns``. Rows with a missing value in a used column are
skipped and counted. The log file is only read, never modified."""

from __future__ import annotations

import math
import os
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, Literal

import numpy as np
import xarray as xr
from scipy import stats

from trapbudget.sensitivity.errors import DataError, ScenarioError
from trapbudget.sensitivity.executors import Workers, running_on
from trapbudget.sensitivity.lab.attribution import shapley_attribution
from trapbudget.sensitivity.lab.datafiles import convert
from trapbudget.sensitivity.lab.driftlog import (
    UNMONITORED_HINT,
    LogTable,
    _channel_maps,
    _input_values,
    _mapping_from,
    read_log,
)
from trapbudget.sensitivity.lab.significance import benjamini_hochberg, holm, remainder_test
from trapbudget.sensitivity.scenario.core import Scenario

__all__ = ["CONTROLS", "Control", "Diagnosis", "diagnose"]

#: How ``flagged`` controls false alarms: per day, family-wise (Holm) or the FDR.
Control = Literal["per-day", "holm", "fdr"]
CONTROLS = ("per-day", "holm", "fdr")


@dataclass(frozen=True)
class Diagnosis:
    """Result of :func:`diagnose` (see :meth:`to_dataset` for the arrays).

    Attributes
    ----------
    channels : tuple of str
        Log columns used, in log order; ``inputs`` the model input of each.
    days : ndarray of datetime64[D]
    reference_days : ndarray of bool
    measured_change, predicted_change, remainder, remainder_sigma, z : ndarray (day)
        Daily mean measured minus reference, model change, their difference,
        its allowed standard deviation and the ratio.
    attribution : ndarray (day, channel)
        Exact Shapley shares of the predicted change; rows sum to
        ``predicted_change``.
    flagged : ndarray of bool (day)
        The verdict of ``control``; ``flagged_per_day`` (each day at the
        stated rate), ``flagged_holm`` (family-wise over the log) and
        ``flagged_fdr`` (Benjamini-Hochberg) beside it.
    p_value, degrees_of_freedom : ndarray (day)
        Two-sided tail of the remainder (Student t) and its effective degrees
        of freedom (inf with given uncertainties); 1 on reference days.
    control : str
        "per-day", "holm" or "fdr".
    variance_share : ndarray (channel)
        Share of each channel in the mean square attribution over the days.
    messages : tuple of str
        Plain statements for the report and the terminal.
    """

    channels: tuple[str, ...]
    inputs: tuple[str, ...]
    output: str
    units: str
    timestamps: np.ndarray
    measured: np.ndarray
    predicted: np.ndarray
    days: np.ndarray
    entries_per_day: np.ndarray
    reference_days: np.ndarray
    reference_level: float
    measured_change: np.ndarray
    predicted_change: np.ndarray
    attribution: np.ndarray
    remainder: np.ndarray
    remainder_sigma: np.ndarray
    z: np.ndarray
    flagged: np.ndarray
    variance_share: np.ndarray
    false_alarm_rate: float
    threshold: float
    skipped_rows: int
    ignored_columns: tuple[str, ...]
    messages: tuple[str, ...] = ()
    channel_means: np.ndarray = field(default_factory=lambda: np.zeros((0, 0)))

    def __repr__(self) -> str:
        flagged = [str(d)[:10] for d, f in zip(self.days, self.flagged, strict=False) if f]
        return (
            f"Diagnosis({self.output}, {len(self.days)} days, channels={list(self.channels)}, "
            f"flagged={flagged}, false_alarm_rate={self.false_alarm_rate:g})"
        )

    def _repr_html_(self) -> str:
        import html

        return f"<pre>{html.escape(repr(self))}</pre>"

    p_value: np.ndarray = field(default_factory=lambda: np.zeros(0))
    degrees_of_freedom: np.ndarray = field(default_factory=lambda: np.zeros(0))
    flagged_per_day: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=bool))
    flagged_holm: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=bool))
    flagged_fdr: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=bool))
    control: str = "per-day"

    @property
    def ranking(self) -> list[tuple[str, float]]:
        """Channels by variance share, largest first."""
        order = np.argsort(-self.variance_share)
        return [(self.channels[i], float(self.variance_share[i])) for i in order]

    def to_dataset(self) -> xr.Dataset:
        """Dims ``entry`` (log rows kept), ``day``, ``channel``."""
        ds = xr.Dataset(
            {
                "measured": ("entry", self.measured, {"units": self.units}),
                "predicted": ("entry", self.predicted, {"units": self.units}),
                "day_mean_inputs": (("day", "channel"), self.channel_means),
                "entries": ("day", self.entries_per_day),
                "reference": ("day", self.reference_days),
                "measured_change": ("day", self.measured_change, {"units": self.units}),
                "predicted_change": ("day", self.predicted_change, {"units": self.units}),
                "attribution": (("day", "channel"), self.attribution, {"units": self.units}),
                "remainder": ("day", self.remainder, {"units": self.units}),
                "remainder_sigma": ("day", self.remainder_sigma, {"units": self.units}),
                "z": ("day", self.z),
                "flagged": ("day", self.flagged),
                "flagged_per_day": ("day", self.flagged_per_day),
                "flagged_holm": ("day", self.flagged_holm),
                "flagged_fdr": ("day", self.flagged_fdr),
                "p_value": ("day", self.p_value),
                "degrees_of_freedom": ("day", self.degrees_of_freedom),
                "variance_share": ("channel", self.variance_share),
            },
            coords={
                "time": ("entry", self.timestamps.astype("datetime64[ns]")),
                "day": self.days.astype("datetime64[ns]"),
                "channel": list(self.channels),
                "input": ("channel", list(self.inputs)),
            },
            attrs={
                "output": self.output,
                "reference_level": self.reference_level,
                "false_alarm_rate": self.false_alarm_rate,
                "control": self.control,
                "threshold": self.threshold,
                "skipped_rows": self.skipped_rows,
                "ignored_columns": list(self.ignored_columns),
                "messages": list(self.messages),
            },
        )
        return ds


def _reference_mask(days: np.ndarray, reference: Any, where: str) -> np.ndarray:
    if reference in (None, "first-day"):
        return days == days[0]
    if isinstance(reference, str):
        start = end = reference
    elif isinstance(reference, Sequence) and len(reference) == 2:
        start, end = reference
    else:
        raise DataError(
            f"reference {reference!r} must be 'first-day', a date or a (start, end) pair of dates",
            path=where,
        )
    try:
        lo, hi = np.datetime64(str(start), "D"), np.datetime64(str(end), "D")
    except ValueError:
        raise DataError(
            f"reference {reference!r} is not a date; write 'YYYY-MM-DD'", path=where
        ) from None
    mask = (days >= lo) & (days <= hi)
    if not mask.any():
        raise DataError(
            f"reference {reference!r} matches no day of the log ({days[0]} to {days[-1]})",
            path=where,
        )
    return mask


def _constants_covariance(scenario: Any, model: Any) -> tuple[list[str], np.ndarray]:
    """Names and covariance of the uncertain model constants of the scenario."""
    inputs = getattr(scenario, "inputs", {}) or {}
    names = [n for n in inputs if n in model.inputs and model.inputs[n].constant]
    if not names:
        return [], np.zeros((0, 0))
    std = np.array([float(inputs[n].std()) for n in names])
    corr = np.eye(len(names))
    full = getattr(scenario, "correlation", None)
    if full is not None:
        order = list(inputs)
        idx = [order.index(n) for n in names]
        corr = np.asarray(full)[np.ix_(idx, idx)]
    return names, corr * np.outer(std, std)


def diagnose(
    scenario: Scenario,
    log: str | os.PathLike[str] | LogTable,
    *,
    reference: Any = "first-day",
    false_alarm_rate: float = 0.01,
    mapping: Mapping[str, Any] | str | os.PathLike[str] | None = None,
    unexplained_noise: float = 0.0,
    control: Control = "per-day",
    executor: Any = None,
    workers: Workers = None,
) -> Diagnosis:
    """Attribute day-to-day changes of the atom number to the monitored channels.

    Parameters
    ----------
    scenario : Scenario
        The (calibrated) scenario: its model, nominal values and the
        uncertainty of its constants; ``[diagnosis]`` maps log columns.
    log : path or LogTable
        The monitoring log (format in the module docstring).
    reference : "first-day", date string or (start, end) dates
        Reference period the changes are taken against.
    false_alarm_rate : float
        Probability that a day with no unmonitored change is flagged
        (two-sided, per day).
    mapping : mapping or path, optional
        The ``[diagnosis]`` table (or a TOML file holding it), overriding the
        scenario's.
    unexplained_noise : float
        Relative day-to-day scatter of the output expected even with nothing
        changing (added in quadrature to the allowed remainder); 0 by default.
    control : {"per-day", "holm", "fdr"}, default "per-day"
        Which verdict ``flagged`` holds: each day at ``false_alarm_rate``
        (per-day rate), Holm's step-down rule (probability of any false
        alarm over the whole log at most ``false_alarm_rate``) or
        Benjamini-Hochberg (expected share of false alarms among the flagged
        days at most ``false_alarm_rate``). All three are in the result
        (``flagged_per_day``, ``flagged_holm``, ``flagged_fdr``).
    executor, workers : optional
        Where the model runs, as for :func:`~trapbudget.sensitivity.propagate`.

    Returns
    -------
    Diagnosis

    Notes
    -----
    The model predicts the output at every log entry (other inputs at the
    scenario's nominal values); a day's prediction is the mean of its
    entries' predictions, as its measurement is the mean of its entries. The
    predicted change (day mean minus reference-period mean) is split over the
    channels by averaging, the same way, each entry's exact Shapley
    attribution (:func:`shapley_attribution`) against one common point (the
    reference period's mean settings); the shares sum to the change to
    rounding. The remainder
    ``r = (mean measured - reference mean measured) - predicted change`` is
    compared with its standard deviation from (i) measurement noise: the
    given uncertainties, else the pooled within-day scatter of
    measured - predicted, through the day's and the reference's means;
    (ii) calibration: first-order propagation of the covariance of the
    scenario's uncertain constants through the predicted change;
    (iii) ``unexplained_noise``. With the scatter estimated from the log,
    ``r / sigma`` follows Student's t with the Welch-Satterthwaite degrees of
    freedom ``nu (sigma^2 / s_noise^2)^2``, nu the pooled degrees of freedom
    (Satterthwaite 1946); ``p_value`` is its two-sided tail and ``z`` the
    normal score with the same tail, so a day is flagged at the per-day rate
    when ``|z| > z_(1 - alpha/2)``, i.e. ``p < alpha``. The channels are ranked by the share
    of the mean square attribution, ``sum_d phi_dc^2 / sum_dc phi_dc^2``
    (sums to 1; unlike a covariance split it stays meaningful when two drifts
    cancel in the total).

    References
    ----------
    F. E. Satterthwaite, Biometrics Bull. 2, 110 (1946); S. Holm, Scand. J.
    Stat. 6, 65 (1979); Y. Benjamini, Y. Hochberg, J. R. Stat. Soc. B 57, 289
    (1995); JCGM 100:2008, G.4 (effective degrees of freedom).
    """
    with running_on(executor, workers):
        if not 0 < false_alarm_rate < 1:
            raise DataError(f"false_alarm_rate {false_alarm_rate!r} must lie in (0, 1)")
        if control not in CONTROLS:
            raise DataError(f"control {control!r} is not known; use one of {', '.join(CONTROLS)}")
        table = log if isinstance(log, LogTable) else read_log(log)
        model = scenario.model
        where = str(getattr(scenario, "source", None) or "scenario")
        config = _mapping_from(scenario, mapping)
        output = config.get("output", "atom_number")
        if output not in model.outputs:
            raise ScenarioError(
                f"output {output!r} is not a model output", path=where, key="diagnosis.output"
            )
        measured_name = config.get("measured", output)
        if measured_name not in table.columns:
            raise DataError(
                f"the log has no measured column {measured_name!r}; add '{measured_name} [1]' "
                "or set [diagnosis] measured",
                path=table.where,
            )
        maps, ignored = _channel_maps(table, model, config, measured_name, where)
        if not maps:
            raise DataError(
                "no log column maps to a model input; name columns after inputs or add "
                "[diagnosis.columns]",
                path=table.where,
            )
        nominal = dict(getattr(scenario, "nominal", {}) or {})
        inputs = {m.column: _input_values(table, m, model, nominal) for m in maps}
        measured = convert(
            table.columns[measured_name],
            table.written_units[measured_name],
            target=model.outputs[output].unit,
            where=f"{table.where}: {measured_name}",
        )
        u_name = f"{measured_name}_uncertainty"
        given_u = (
            convert(
                table.columns[u_name],
                table.written_units[u_name],
                target=model.outputs[output].unit,
                where=f"{table.where}: {u_name}",
            )
            if u_name in table.columns
            else None
        )
        needed = [*inputs.values(), measured] + ([given_u] if given_u is not None else [])
        keep = np.all(np.isfinite(np.column_stack(needed)), axis=1)
        skipped = int(np.count_nonzero(~keep))
        if not keep.any():
            columns = [*inputs, measured_name] + ([u_name] if given_u is not None else [])
            values = [*inputs.values(), measured] + ([given_u] if given_u is not None else [])
            empty = [c for c, v in zip(columns, values, strict=True) if not np.isfinite(v).any()]
            named = ", ".join(repr(c) for c in (empty or columns))
            raise DataError(
                f"every log row misses a value in {named}; fill the column in or unmap it",
                path=table.where,
            )
        stamps = table.timestamps[keep]
        measured = measured[keep]
        given_u = given_u[keep] if given_u is not None else None
        inputs = {c: v[keep] for c, v in inputs.items()}
        input_of = {m.column: m.input for m in maps}
        base = {
            name: float(nominal.get(name, spec.default))
            for name, spec in model.inputs.items()
            if name not in input_of.values()
        }

        day_of = stamps.astype("datetime64[D]")
        days, day_index, counts = np.unique(day_of, return_inverse=True, return_counts=True)
        ref = _reference_mask(days, reference, where)
        ref_rows = ref[day_index]

        def day_mean(x: np.ndarray) -> np.ndarray:
            return np.bincount(day_index, weights=x, minlength=days.size) / counts

        def change(x: np.ndarray) -> np.ndarray:
            """Day mean minus reference-period mean of a per-entry quantity (last axis entries)."""
            return day_mean(x) - float(np.mean(x[ref_rows]))

        channel_means = np.column_stack([day_mean(inputs[c]) for c in inputs])
        ref_point = {input_of[c]: float(np.mean(inputs[c][ref_rows])) for c in inputs}
        entry_points = {input_of[c]: inputs[c] for c in inputs}
        # The measurement of a day is the mean over its entries, so the prediction is the mean
        # of the per-entry predictions (not the model at the day's mean settings, which differs
        # by the curvature times the within-day jitter). Each entry's change from one common
        # point is attributed exactly; day and reference means of those shares sum to the
        # predicted change.
        entry_shares, entry_change, at_reference = shapley_attribution(
            model, reference=ref_point, points=entry_points, base=base, output=output
        )
        predicted = np.asarray(entry_change + float(at_reference), dtype=float)
        attribution = np.column_stack([change(entry_shares[:, j]) for j in range(len(inputs))])
        predicted_change = change(predicted)
        measured_day = day_mean(measured)
        measured_change = measured_day - float(np.mean(measured[ref_rows]))
        remainder = measured_change - predicted_change

        # (i) measurement noise of the day means
        dof_noise = math.inf
        if given_u is not None:
            var_day = np.bincount(day_index, weights=given_u**2, minlength=days.size) / counts**2
            var_ref = float(np.sum(given_u[ref_rows] ** 2)) / ref_rows.sum() ** 2
            noise_note = "the given measurement uncertainties"
        else:
            resid = measured - predicted
            mean_resid = day_mean(resid)
            ss = np.bincount(
                day_index, weights=(resid - mean_resid[day_index]) ** 2, minlength=days.size
            )
            dof = counts - 1
            if dof.sum() == 0:
                raise DataError(
                    "one entry per day and no uncertainty column: the measurement noise cannot be "
                    f"estimated; add '{u_name}' or more entries per day",
                    path=table.where,
                )
            dof_noise = float(dof.sum())
            pooled = float(ss.sum() / dof_noise)
            var_day = pooled / counts
            var_ref = pooled / ref_rows.sum()
            noise_note = (
                f"the pooled within-day scatter of measured - predicted ({dof_noise:.0f} "
                "degrees of freedom, Student t)"
            )
        var_meas = var_day + var_ref
        # (ii) calibration uncertainty of the predicted change
        var_cal = _calibration_variance(scenario, model, base, entry_points, change, output)
        # (iii) stated unexplained day-to-day scatter
        level = float(at_reference)
        var_extra = (unexplained_noise * level) ** 2 * (1.0 + 1.0 / max(int(ref.sum()), 1))
        var_total = var_meas + var_cal + var_extra
        sigma = np.sqrt(var_total)
        t_stat, dof_day, p_value = remainder_test(remainder, var_meas, var_total, dof_noise)
        p_value = np.where(ref, 1.0, p_value)
        # z on the normal scale with the same p-value: |z| > z_(1 - alpha/2) exactly if p < alpha.
        z = np.sign(t_stat) * stats.norm.isf(np.clip(p_value / 2, 1e-300, 0.5))
        threshold = float(stats.norm.isf(false_alarm_rate / 2))
        flagged_day = (p_value < false_alarm_rate) & ~ref
        flagged_holm = holm(p_value, ~ref, false_alarm_rate)
        flagged_fdr = benjamini_hochberg(p_value, ~ref, false_alarm_rate)
        flagged = {"per-day": flagged_day, "holm": flagged_holm, "fdr": flagged_fdr}[control]

        square = np.sum(attribution**2, axis=0)
        share = square / square.sum() if square.sum() > 0 else np.zeros(len(inputs))

        channels = tuple(inputs)
        messages = _messages(
            days,
            ref,
            flagged,
            measured_change,
            predicted_change,
            remainder,
            z,
            attribution,
            channels,
            level,
            false_alarm_rate,
            noise_note + f"; verdicts: {_CONTROL_NOTE[control]}",
            skipped,
            ignored,
            share,
        )
        return Diagnosis(
            channels=channels,
            inputs=tuple(input_of[c] for c in channels),
            output=output,
            units=model.outputs[output].unit,
            timestamps=stamps,
            measured=measured,
            predicted=predicted,
            days=days,
            entries_per_day=counts,
            reference_days=ref,
            reference_level=level,
            measured_change=measured_change,
            predicted_change=predicted_change,
            attribution=attribution,
            remainder=remainder,
            remainder_sigma=sigma,
            z=z,
            flagged=flagged,
            variance_share=share,
            false_alarm_rate=false_alarm_rate,
            threshold=threshold,
            skipped_rows=skipped,
            ignored_columns=tuple(ignored),
            messages=tuple(messages),
            channel_means=channel_means,
            p_value=p_value,
            degrees_of_freedom=np.where(ref, math.nan, dof_day),
            flagged_per_day=flagged_day,
            flagged_holm=flagged_holm,
            flagged_fdr=flagged_fdr,
            control=control,
        )


def _calibration_variance(
    scenario: Scenario,
    model: Any,
    base: Mapping[str, float],
    entry_points: Mapping[str, np.ndarray],
    change: Any,
    output: str,
) -> np.ndarray:
    """First-order variance of each day's predicted change from the constants' covariance.

    ``change`` maps per-entry predictions to day-minus-reference changes, so the
    derivative is that of the same averaged change the remainder uses.
    """
    names, cov = _constants_covariance(scenario, model)
    n_days = len(change(np.zeros(len(next(iter(entry_points.values()))))))
    if not names:
        return np.zeros(n_days)
    grads = np.empty((n_days, len(names)))
    for j, name in enumerate(names):
        centre = float(base.get(name, model.inputs[name].default))
        h = 1e-4 * (math.sqrt(cov[j, j]) or abs(centre) or 1.0)
        changes = []
        for step in (h, -h):
            values = model.evaluate({**base, name: centre + step, **entry_points})[output]
            n_entries = len(next(iter(entry_points.values())))
            changes.append(change(np.broadcast_to(np.asarray(values, dtype=float), (n_entries,))))
        grads[:, j] = (changes[0] - changes[1]) / (2 * h)
    return np.einsum("di,ij,dj->d", grads, cov, grads)


_CONTROL_NOTE = {
    "per-day": "each day at the stated false-alarm rate",
    "holm": "Holm's rule, the stated rate for any false alarm over the whole log",
    "fdr": "Benjamini-Hochberg, the stated rate as the share of false alarms among flags",
}


def _messages(
    days,
    ref,
    flagged,
    measured_change,
    predicted_change,
    remainder,
    z,
    attribution,
    channels,
    level,
    alpha,
    noise_note,
    skipped,
    ignored,
    share,
) -> list[str]:
    out: list[str] = []
    ranking = np.argsort(-share)
    top = ", ".join(f"{channels[i]} ({share[i]:.0%})" for i in ranking[:3])
    out.append(f"Day-to-day change of the predicted output is driven by: {top}.")
    for d in np.flatnonzero(flagged):
        largest = channels[int(np.argmax(np.abs(attribution[d])))]
        out.append(
            f"{days[d]}: measured change {measured_change[d] / level:+.1%}, predicted "
            f"{predicted_change[d] / level:+.1%} (largest channel {largest}); the remainder "
            f"{remainder[d] / level:+.1%} (z = {z[d]:+.1f}) exceeds what measurement noise and "
            f"calibration allow at a false-alarm rate of {alpha:.2g} per day: it points at "
            f"{UNMONITORED_HINT}."
        )
    if not flagged.any():
        out.append(
            f"No day's change exceeds what the monitored channels, measurement noise and "
            f"calibration explain (false-alarm rate {alpha:.2g} per day)."
        )
    out.append(
        f"Measurement noise from {noise_note}; reference days: "
        f"{', '.join(str(d) for d in days[ref])}."
    )
    if skipped:
        out.append(f"{skipped} log rows with a missing value were skipped.")
    if ignored:
        out.append(f"Log columns not mapped to any model input (not used): {', '.join(ignored)}.")
    return out
