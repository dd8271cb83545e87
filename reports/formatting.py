"""Number and quantity formatting shared by the terminal tables and the reports."""

from __future__ import annotations

import math

from trapbudget.sensitivity.scenario.units import display_unit, format_percent, ureg
from trapbudget.sensitivity.scenario.units import format_quantity as engine_format_quantity

__all__ = [
    "display_scale",
    "format_index",
    "format_number",
    "format_percent",
    "format_quantity",
    "main_index",
    "output_unit",
    "units_of",
]


def format_number(value: float, *, digits: int = 3) -> str:
    """``value`` with ``digits`` significant digits, scientific outside 1e-3..1e5."""
    value = float(value)
    if math.isnan(value):
        return "nan"
    if math.isinf(value):
        return "inf" if value > 0 else "-inf"
    if value == 0:
        return "0"
    magnitude = abs(value)
    if 1e-3 <= magnitude < 1e5:
        decimals = max(0, digits - 1 - math.floor(math.log10(magnitude)))
        return f"{value:.{decimals}f}"
    return f"{value:.{digits - 1}e}"


def format_index(value: float) -> str:
    """A sensitivity index to three decimals (indices are fractions of a variance)."""
    value = float(value)
    if math.isnan(value):
        return "nan"
    text = f"{value:.3f}"
    return "0.000" if text == "-0.000" else text


def format_quantity(value: float, unit: str, *, digits: int = 3) -> str:
    """A value in SI ``unit`` as readable text in its display unit (``0.004 W`` -> ``4 mW``).

    The display units are the engine's
    (:data:`trapbudget.sensitivity.scenario.units.DISPLAY_UNITS`),
    so the reports show the same units as the rest of the tool.
    """
    unit = unit or ""
    try:
        value = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(value):
        return f"{format_number(value)} {unit}".strip()
    return engine_format_quantity(value, unit, digits=digits)


def units_of(ds, name: str) -> str:
    """The units of variable ``name`` in ``ds``: its own attrs, else ``attrs['units_<name>']``."""
    if name in ds.variables and "units" in ds[name].attrs:
        return str(ds[name].attrs["units"])
    return str(ds.attrs.get(f"units_{name}", ""))


def display_scale(unit: str, typical: float) -> tuple[float, str]:
    """Factor and label to show SI ``unit`` values of size ``typical`` on a plot axis.

    Returns ``(factor, label)`` with ``displayed = value * factor``.
    """
    unit = unit or ""
    magnitude = abs(float(typical)) if math.isfinite(float(typical)) else 0.0
    display = display_unit(unit, magnitude)
    if display == unit:
        return 1.0, unit.replace("**", "^")
    factor = float(ureg.Quantity(1.0, unit).to(display).magnitude)
    return factor, display.replace("**", "^")


def output_unit(name: str, *datasets) -> str:
    """The units of output ``name`` from the first Dataset that knows them.

    Looks at the variable's attrs, ``attrs['units_<name>']`` of the Dataset and
    of its ``output`` coordinate.
    """
    for ds in datasets:
        if ds is None:
            continue
        unit = units_of(ds, name)
        if unit:
            return unit
        if "output" in ds.coords:
            unit = str(ds["output"].attrs.get(f"units_{name}", ""))
            if unit:
                return unit
    return ""


def main_index(budget) -> tuple[str, str]:
    """The budget variable that ranks the inputs and its label.

    The budget's ``headline`` attr when it names a variable (``shapley_effect`` for
    correlated inputs, ``total_order`` for independent ones); else ``total_order`` for
    Sobol' budgets and ``delta`` (moment-independent) for given-data budgets.
    """
    import numpy as np

    headline = str(budget.attrs.get("headline", ""))
    if headline == "shapley_effect" and "shapley_effect" in budget:
        return "shapley_effect", "Shapley effect"
    if "total_order" in budget and np.isfinite(np.asarray(budget["total_order"].values)).any():
        return "total_order", "total order"
    if "delta" in budget:
        return "delta", "delta (moment-independent)"
    return "first_order", "first order"
