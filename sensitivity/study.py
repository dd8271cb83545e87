"""A whole study of a scenario: what ``trapbudget rank`` runs, callable from Python.

:func:`run_study` propagates the scenario's tolerances by Monte Carlo,
summarizes the outputs, checks the linear (GUM) propagation against the Monte
Carlo result, ranks the inputs by global sensitivity indices and checks the
requirements. It returns a :class:`Study`, which holds every result Dataset
and the record of what was studied, and saves them with :meth:`Study.save`::

    from trapbudget.sensitivity import load_scenario, run_study
    study = run_study(load_scenario("harrier-rb87.toml"), rng=20261201)
    study["budget"]            # the ranked error budget (xarray.Dataset)
    study.save("my-study")     # NetCDF files and study.json
"""

from __future__ import annotations

import html
import os
from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from trapbudget.sensitivity.compliance import check_requirements
from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.executors import Workers, running_on
from trapbudget.sensitivity.io import atomic_write_json, save_dataset
from trapbudget.sensitivity.linear import compare_linear_monte_carlo, linear_propagation
from trapbudget.sensitivity.propagation import propagate, propagate_adaptive
from trapbudget.sensitivity.protocol import validity_flags
from trapbudget.sensitivity.ranking import rank
from trapbudget.sensitivity.scenario.core import Scenario
from trapbudget.sensitivity.scenario.settings import RunOptions
from trapbudget.sensitivity.scenario.units import format_quantity
from trapbudget.sensitivity.study_record import describe_study
from trapbudget.sensitivity.summary import summarize

__all__ = ["Progress", "Study", "run_study"]

#: ``progress(stage, done, total)``: called as each stage of a study advances.
Progress = Callable[[str, int, int], None]

#: The stages of a study, in order, as passed to ``progress``.
STAGES: tuple[str, ...] = ("Monte Carlo", "Sensitivity indices")


@dataclass(frozen=True, eq=False)
class Study:
    """The results of :func:`run_study`.

    Attributes
    ----------
    datasets : dict name -> xarray.Dataset
        ``samples``, ``summary``, ``linear``, ``linear_check``, ``budget`` and,
        when the scenario has requirements, ``requirements``.
    record : dict
        What was studied (JSON-serialisable): scenario, seed, sample sizes,
        inputs and tolerances, requirements, the model's assumptions
        (see :func:`~trapbudget.sensitivity.study_record.describe_study`).
    """

    datasets: Mapping[str, xr.Dataset]
    record: Mapping[str, Any]

    def __getitem__(self, name: str) -> xr.Dataset:
        return self.datasets[name]

    def __iter__(self) -> Iterator[str]:
        return iter(self.datasets)

    @property
    def seed(self) -> int | None:
        """The seed the study ran with (repeat it with ``rng=seed``)."""
        return self.record.get("seed")

    def save(self, folder: str | os.PathLike[str]) -> Path:
        """Write each Dataset as ``<name>.nc`` and the record as ``study.json`` into ``folder``.

        Every file is written atomically; the folder is created when missing.
        For a full report (HTML, Markdown, figures) use
        :func:`trapbudget.reports.write_report`.
        """
        folder = Path(folder)
        folder.mkdir(parents=True, exist_ok=True)
        for name, ds in self.datasets.items():
            save_dataset(ds, folder / f"{name}.nc")
        atomic_write_json(folder / "study.json", dict(self.record))
        return folder

    def _headline(self) -> list[tuple[str, str, str]]:
        summary = self.datasets.get("summary")
        budget = self.datasets.get("budget")
        rows = []  # type: ignore[var-annotated]
        if summary is None:
            return rows
        for output in summary["output"].values:
            unit = str(summary.attrs.get(f"units_{output}", ""))
            mean = float(summary["mean"].sel(output=output))
            std = float(summary["std"].sel(output=output))
            top = ""
            if budget is not None and output in budget["output"].values:
                ranks = budget["rank"].sel(output=output)
                top = str(ranks["input"].values[int(np.argmin(ranks.values))])
            rows.append(
                (str(output), f"{format_quantity(mean, unit)} ± {format_quantity(std, unit)}", top)
            )
        return rows

    def __repr__(self) -> str:
        names = ", ".join(self.datasets)
        return (
            f"Study({self.record.get('title', '')!r}, seed={self.seed}, "
            f"n_samples={self.record.get('n_samples')}, datasets=[{names}])"
        )

    def _repr_html_(self) -> str:
        rows = "".join(
            f"<tr><td>{html.escape(o)}</td><td>{html.escape(v)}</td><td>{html.escape(t)}</td></tr>"
            for o, v, t in self._headline()
        )
        title = html.escape(str(self.record.get("title", "")))
        return (
            f"<p><b>Study</b>: {title} (seed {self.seed}, "
            f"N = {self.record.get('n_samples')})</p>"
            "<table><tr><th>output</th><th>mean ± std</th><th>largest drift</th></tr>"
            f"{rows}</table>"
        )


def _stage(progress: Progress | None, stage: str) -> Callable[[int, int], None] | None:
    if progress is None:
        return None

    def report(done: int, total: int) -> None:
        progress(stage, done, total)

    return report


def unrankable_outputs(
    samples: xr.Dataset, summary: xr.Dataset, outputs: Sequence[str], model: Any = None
) -> dict[str, str]:
    """Outputs a ranking cannot speak of, each with the reason in words.

    An output undefined in (almost) every run (a temperature where no atom is trapped)
    or the same in every run (zero atoms at a blue detuning) has no variance to share
    out among the inputs; the study says so instead of printing a table of nan.
    """
    counts = samples.attrs.get("validity_counts", {}) or {}
    flags, advisory = validity_flags(model) if model is not None else (None, 0)
    advisory_names = {f.name for f in flags if int(f) & advisory} if flags else set()
    causes = ", ".join(
        name for name, count in dict(counts).items() if count and name not in advisory_names
    )
    because = f" (model validity: {causes})" if causes else ""
    reasons: dict[str, str] = {}
    for name in outputs:
        row = summary.sel(output=name)
        n_finite = int(row["n_finite"])
        std = float(row["std"])
        if n_finite < 2:
            reasons[name] = f"undefined in every run{because}"
        elif not std > 1e-12 * abs(float(row["mean"])):  # zero but for rounding
            unit = str(summary.attrs.get(f"units_{name}", ""))
            value = (
                format_quantity(float(row["mean"]), unit) if unit else f"{float(row['mean']):.3g}"
            )
            reasons[name] = f"the same in every run ({value}){because}"
    return reasons


def run_study(
    scenario: Scenario,
    *,
    n_samples: int | None = None,
    rng: int | None = None,
    convergence: bool = True,
    max_samples: int | None = None,
    second_order: bool | None = None,
    progress: Progress | None = None,
    executor: Any = None,
    workers: Workers = None,
) -> Study:
    """Run the whole study of ``scenario``: what ``trapbudget rank`` runs.

    Parameters
    ----------
    scenario : Scenario
        From :func:`~trapbudget.sensitivity.load_scenario` or
        :meth:`Scenario.from_dict`.
    n_samples : int, optional
        Base size N per replicate of the index design (default: the
        scenario's ``settings.n_samples``); see :func:`rank` for the run count.
        The Monte Carlo of the distributions, coverage intervals and
        requirement probabilities does not depend on it: it runs the JCGM 101
        adaptive procedure (:func:`propagate_adaptive`, batches of 10^4, 2^14
        on Sobol', up to ``settings.max_samples``) to
        ``settings.significant_digits``; ``samples.attrs`` record the
        ``numerical_tolerance`` and the ``achieved_tolerance``. Requirement
        probabilities come from independent random draws (as many as the
        Monte Carlo used), with Clopper-Pearson intervals.
    rng : int, optional
        Seed (default: the scenario's ``settings.seed``; without one a seed is
        drawn and recorded, so the study can be repeated). One seed gives two
        independent streams, one for the Monte Carlo and one for the index
        design.
    convergence : bool, default True
        Double N until the indices settle (see :func:`rank`).
    max_samples : int, optional
        The largest base size the convergence loop may reach.
    second_order : bool, optional
        Pairwise interaction indices (default: the scenario's setting).
    progress : callable(stage, done, total), optional
        Called as each stage advances (stages in :data:`STAGES`).
    executor, workers : optional
        Where the model runs, as for :func:`~trapbudget.sensitivity.propagate`.

    Returns
    -------
    Study
    """
    with running_on(executor, workers):
        options: RunOptions = scenario.settings.resolve(n_samples=n_samples, rng=rng)
        outputs = list(scenario.outputs)
        # Child streams by index: the first two are those of earlier versions.
        mc_seed, rank_seed, draw_seed = np.random.SeedSequence(options.seed).spawn(3)
        linear = linear_propagation(
            scenario.model,
            scenario.inputs,
            nominal=scenario.nominal,
            correlation=scenario.correlation,
            outputs=outputs,
        )
        # The Monte Carlo is sized by its own rule (JCGM 101 clause 7.9), not by the index
        # design's base size: batches of 10^4 (2^14 on Sobol', each batch an independent
        # scramble) until 2 s/sqrt(h) of y, u(y) and both interval ends is below the tolerance.
        samples = propagate_adaptive(
            scenario.model,
            scenario.inputs,
            confidence_level=options.confidence_level,
            significant_digits=scenario.settings.significant_digits,
            max_samples=scenario.settings.max_samples,
            method=options.method,  # type: ignore[arg-type]
            correlation=scenario.correlation,
            rng=np.random.default_rng(mc_seed),
            outputs=outputs,
            progress=_stage(progress, STAGES[0]),
            nominal=scenario.nominal,
            chunk_size=options.chunk_size,
        )
        summary = summarize(samples, outputs=outputs, confidence_level=options.confidence_level)
        unranked = unrankable_outputs(samples, summary, outputs, scenario.model)
        ranked = [name for name in outputs if name not in unranked]
        if not ranked:
            listed = "; ".join(f"{name}: {why}" for name, why in unranked.items())
            raise ScenarioError(
                f"no output varies across the runs, so there is nothing to rank ({listed}); "
                "check the nominal values ('trapbudget predict' says what the model gives there)",
                path=scenario.source,
                key="inputs",
            )
        budget = rank(
            scenario.model,
            scenario.inputs,
            n_samples=options.n_samples,
            outputs=ranked,
            second_order=scenario.settings.second_order if second_order is None else second_order,
            correlation=scenario.correlation,
            nominal=scenario.nominal,
            rng=np.random.default_rng(rank_seed),
            confidence_level=options.confidence_level,
            n_bootstrap=options.n_bootstrap,
            chunk_size=options.chunk_size,
            groups=scenario.groups or None,
            convergence=convergence,
            max_samples=max_samples,
            progress=_stage(progress, STAGES[1]),
        )
        budget.attrs["unranked_outputs"] = list(unranked)
        budget.attrs["unranked_reasons"] = list(unranked.values())
        datasets: dict[str, xr.Dataset] = {
            "samples": samples,
            "summary": summary,
            "linear": linear,
            "linear_check": compare_linear_monte_carlo(
                linear, summary, significant_digits=scenario.settings.significant_digits
            ),
            "budget": budget,
        }
        if scenario.requirements:
            # Binomial intervals need independent draws: on a QMC design the requirements are
            # checked on as many fresh random draws as the Monte Carlo used.
            draws = samples
            if options.method != "random":
                draws = propagate(
                    scenario.model,
                    scenario.inputs,
                    n_samples=int(samples.sizes["sample"]),
                    method="random",
                    correlation=scenario.correlation,
                    rng=np.random.default_rng(draw_seed),
                    outputs=outputs,
                    nominal=scenario.nominal,
                    chunk_size=options.chunk_size,
                )
            datasets["requirements"] = check_requirements(draws, scenario.requirements)
        record = describe_study(
            scenario, seed=options.seed, n_samples=options.n_samples, datasets=datasets
        )
        return Study(datasets=datasets, record=record)
