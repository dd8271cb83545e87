"""Number and quantity formatting shared by the terminal tables and the reports."""

from __future__ import annotations

import math

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

# Display units for SI units when the engine's units module offers none:
# (SI unit, display unit, factor SI -> display).
_FALLBACK_DISPLAY: dict[str, tuple[str, float]] = {
    "W": ("mW", 1e3),
    "m": ("mm", 1e3),
    "Hz": ("MHz", 1e-6),
    "T/m": ("G/cm", 100.0),
    "T": ("G", 1e4),
    "Pa": ("mbar", 1e-2),
    "m/s": ("m/s", 1.0),
    "1/m**3": ("1/cm^3", 1e-6),
    "1/m^3": ("1/cm^3", 1e-6),
}


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
    return "nan" if math.isnan(value) else f"{value:.3f}"


def format_percent(fraction: float, *, digits: int = 1) -> str:
    """A fraction as a percentage, e.g. 0.1234 -> '12.3 %'."""
    fraction = float(fraction)
    if math.isnan(fraction):
        return "nan"
    return f"{100 * fraction:.{digits}f} %"


def _fallback_quantity(value: float, unit: str, digits: int) -> str:
    if unit == "K":
        magnitude = abs(value)
        if 0 < magnitude < 1e-3:
            return f"{format_number(value * 1e6, digits=digits)} uK"
        if 0 < magnitude < 1:
            return f"{format_number(value * 1e3, digits=digits)} mK"
        return f"{format_number(value, digits=digits)} K"
    if unit == "s":
        magnitude = abs(value)
        if 0 < magnitude < 1:
            return f"{format_number(value * 1e3, digits=digits)} ms"
        return f"{format_number(value, digits=digits)} s"
    display, factor = _FALLBACK_DISPLAY.get(unit, (unit, 1.0))
    text = format_number(value * factor, digits=digits)
    return f"{text} {display}".strip()


def format_quantity(value: float, unit: str, *, digits: int = 3) -> str:
    """A value in SI ``unit`` as readable text with a display unit (``0.004 W`` -> ``4.00 mW``).

    Uses ``trapbudget.sensitivity.scenario.units.format_quantity`` when it exists, so the
    reports show the same display units as the rest of the tool.
    """
    unit = unit or ""
    try:
        value = float(value)
    except (TypeError, ValueError):
        return str(value)
    if not math.isfinite(value):
        return f"{format_number(value)} {unit}".strip()
    try:
        from trapbudget.sensitivity.scenario.units import format_quantity as engine_format
    except ImportError:
        engine_format = None
    if engine_format is not None:
        try:
            return engine_format(value, unit, digits=digits)
        except Exception:  # an engine unit it cannot display: fall back to ours
            pass
    return _fallback_quantity(value, unit, digits)


def units_of(ds, name: str) -> str:
    """The units of variable ``name`` in ``ds``: its own attrs, else ``attrs['units_<name>']``."""
    if name in ds.variables and "units" in ds[name].attrs:
        return str(ds[name].attrs["units"])
    return str(ds.attrs.get(f"units_{name}", ""))


_SCALES: dict[str, tuple[str, float]] = {**_FALLBACK_DISPLAY, "1/s": ("1/s", 1.0)}


def display_scale(unit: str, typical: float) -> tuple[float, str]:
    """Factor and label to show SI ``unit`` values of size ``typical`` on a plot axis.

    Returns ``(factor, label)`` with ``displayed = value * factor``.
    """
    unit = unit or ""
    magnitude = abs(float(typical)) if math.isfinite(float(typical)) else 0.0
    if unit == "K":
        if 0 < magnitude < 1e-3:
            return 1e6, "uK"
        if 0 < magnitude < 1:
            return 1e3, "mK"
        return 1.0, "K"
    if unit == "s":
        return (1e3, "ms") if 0 < magnitude < 1 else (1.0, "s")
    try:
        from trapbudget.sensitivity.scenario.units import DISPLAY_UNITS, ureg

        display = DISPLAY_UNITS.get(unit)
        if display and display != "auto":
            factor = float(ureg.Quantity(1.0, unit).to(display).magnitude)
            return factor, display.replace("**", "^")
    except Exception:  # no engine units module, or a unit it cannot convert: ours
        pass
    display, factor = _SCALES.get(unit, (unit, 1.0))
    return factor, display


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

    ``total_order`` for Sobol' budgets; ``delta`` (moment-independent) for
    budgets of correlated inputs, whose total-order indices are undefined.
    """
    import numpy as np

    if "total_order" in budget and np.isfinite(np.asarray(budget["total_order"].values)).any():
        return "total_order", "total order"
    if "delta" in budget:
        return "delta", "delta (moment-independent)"
    return "first_order", "first order"
