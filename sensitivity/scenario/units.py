"""The one unit registry, and conversion of written quantities to SI floats.

Scenario and data files carry a unit on every value; this module turns them
into plain SI floats once, at the boundary, and formats SI floats back into a
readable unit for reports.

Conventions
-----------
- ``G`` and ``gauss`` are the SI-defined gauss, 1 G = 1e-4 T (pint's default
  gauss belongs to the Gaussian CGS system and does not convert to tesla).
- ``%`` and ``ppm`` are dimensionless (0.01 and 1e-6).
- Temperatures written in ``degC`` (or ``degF``) are absolute temperatures when
  they are values (``"22 degC"`` is 295.15 K) and differences when they are
  tolerances (``"0.1 degC"`` as a tolerance is 0.1 K). A relative tolerance
  (``"2 %"``) on a temperature written in an offset unit is ambiguous and is
  rejected.
- A relative tolerance (``%``, ``ppm``) is always a fraction of ``|nominal|``,
  for dimensionless inputs too: "2 %" of a fraction 0.05 is 0.001. Write an
  absolute tolerance of a dimensionless input as a bare number (``0.01``).
"""

from __future__ import annotations

import difflib
import math
import re
import sys
from collections.abc import Iterable
from pathlib import Path
from typing import TYPE_CHECKING


def _import_pint():
    """pint, without letting it import dask.

    pint probes for dask arrays on import (``pint.compat``); with dask installed (the
    ``[dask]`` extra) that pulls in dask.array, pandas and xarray, seconds that a typo in
    a scenario should not cost. The registry here never meets a dask array, so dask is
    hidden for the moment of the import when nothing has imported it yet; dask itself
    stays importable afterwards.
    """
    hidden = "dask" not in sys.modules
    if hidden:
        sys.modules["dask"] = None
    try:
        import pint as module
    finally:
        if hidden and sys.modules.get("dask", 0) is None:
            del sys.modules["dask"]
    return module


if TYPE_CHECKING:
    import pint
else:
    pint = _import_pint()

from trapbudget.models.protocol import is_quantity  # noqa: E402
from trapbudget.sensitivity.errors import ScenarioError  # noqa: E402

__all__ = [
    "DISPLAY_UNITS",
    "did_you_mean",
    "display_unit",
    "format_percent",
    "format_quantity",
    "parse_quantity",
    "parse_tolerance",
    "parse_tolerance_text",
    "suggest_unit",
    "ureg",
]


def _build_registry() -> pint.UnitRegistry:
    folder = Path(pint.__file__).parent
    text = (folder / "default_en.txt").read_text(encoding="utf-8")
    replacements = {
        "gauss = dyne / franklin = G": "gauss = 1e-4 * tesla = G = Gs",
        "oersted = dyne / maxwell": "oersted = 1000 / (4 * pi) * ampere / meter",
        "@import constants_en.txt": "",
    }
    for old, new in replacements.items():
        if old not in text:  # pragma: no cover - depends on the pint release
            raise ImportError(f"pint definitions changed: {old!r} not found")
        text = text.replace(old, new)
    registry = pint.UnitRegistry(None)  # type: ignore[var-annotated]
    registry.load_definitions(str(folder / "constants_en.txt"))
    registry.load_definitions(text.splitlines())
    return registry


ureg: pint.UnitRegistry = _build_registry()
"""The project's single unit registry (SI gauss, see the module notes)."""

_NUMBER = re.compile(r"^\s*([-+]?(?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)\s*(.*?)\s*$")
_RELATIVE_UNITS = {"%": 1e-2, "percent": 1e-2, "ppm": 1e-6, "ppb": 1e-9, "permille": 1e-3}
_OFFSET_TO_DELTA = {"degree_Celsius": "delta_degC", "degree_Fahrenheit": "delta_degF"}

# Units an experimentalist writes, offered as suggestions for a misspelt unit.
_COMMON_UNITS = (
    "W mW uW nW kW m mm um nm cm km s ms us ns min h Hz kHz MHz GHz T mT uT G mG "
    "T/m G/cm mT/m G/mm K mK uK nK degC delta_degC Pa mbar hPa torr mtorr bar atm "
    "A mA kA V mV kg g u 1/s m/s m**3/s cm**3/s 1/m**3 1/cm**3 W/m**2 mW/cm**2 "
    "1/(Pa*s) 1/(torr*s) sr rad mrad urad deg % ppm"
).split()

DISPLAY_UNITS: dict[str, str] = {
    "W": "mW",
    "Hz": "MHz",
    "T/m": "G/cm",
    "T": "G",
    "Pa": "mbar",
    "m": "mm",
    "K": "auto",
    "s": "auto",
    "1/m**3": "1/cm**3",
    "m**3/s": "cm**3/s",
    "W/m**2": "mW/cm**2",
}
"""Preferred display unit for each SI unit; ``"auto"`` picks a prefix by size."""

_AUTO_PREFIXES = {
    "K": (("nK", 1e-9), ("uK", 1e-6), ("mK", 1e-3), ("K", 1.0)),
    "s": (("ns", 1e-9), ("us", 1e-6), ("ms", 1e-3), ("s", 1.0)),
}


def did_you_mean(name: object, choices: Iterable[str]) -> str:
    """``"; did you mean 'x'?"`` for a close match among ``choices``, else the valid names."""
    choices = list(choices)
    matches = difflib.get_close_matches(str(name), choices, n=3, cutoff=0.6)
    if matches:
        return "; did you mean " + " or ".join(repr(m) for m in matches) + "?"
    shown = ", ".join(choices[:12]) + (", ..." if len(choices) > 12 else "")
    return f"; valid names are {shown}"


def _si_unit(unit: str) -> pint.Unit:
    return ureg.parse_units(unit) if unit not in ("", "1") else ureg.dimensionless


def suggest_unit(bad: str, unit: str | None) -> str:
    """Return ``"; did you mean 'mW'?"`` for a misspelt unit, preferring the dimension of ``unit``.

    ``unit`` is the SI unit the value should convert to, or None for no preference.
    """
    try:
        target = None if unit is None else _si_unit(unit).dimensionality
    except (pint.errors.PintError, ValueError, AttributeError, TypeError):
        target = None
    compatible = []
    for name in _COMMON_UNITS:
        try:
            if target is not None and ureg.parse_units(name).dimensionality == target:
                compatible.append(name)
        except (pint.errors.PintError, ValueError, AttributeError, TypeError):
            continue
    for pool, cutoff in ((compatible, 0.4), (list(_COMMON_UNITS), 0.6)):
        matches = difflib.get_close_matches(bad, pool, n=3, cutoff=cutoff)
        if matches:
            return "; did you mean " + " or ".join(repr(m) for m in matches) + "?"
    if compatible:
        return f"; write it in e.g. {compatible[0]!r}"
    return ""


def _split(text: str | float | int, *, unit: str, where: str, path: object | None):
    """Split a written quantity into (magnitude, unit text)."""
    if isinstance(text, bool):
        raise ScenarioError(
            f"{text!r} is not a quantity; write e.g. '1 {unit}'", key=where, path=path
        )
    if isinstance(text, int | float):
        return float(text), ""
    if is_quantity(text):  # a pint Quantity from Python: its magnitude and unit name
        return float(text.magnitude), str(text.units)  # type: ignore[attr-defined]
    if not isinstance(text, str):
        raise ScenarioError(
            f"{text!r} is not a quantity; write a string such as '{_example(unit)}'",
            path=path,
            key=where,
        )
    match = _NUMBER.match(text.replace("°C", "degC").replace("°F", "degF").replace("µ", "u"))
    if match is None:
        raise ScenarioError(
            f"{text!r} is not a number with a unit; write e.g. '{_example(unit)}'",
            path=path,
            key=where,
        )
    return float(match.group(1)), match.group(2)


#: What a written unit may contain before pint's expression parser sees it.
_UNIT_TEXT = re.compile(r"^[A-Za-z0-9_ .*/^()%+\-]{1,64}$")


def _units_of(unit_text: str, *, text: object, unit: str, where: str, path: object | None):
    if not _UNIT_TEXT.match(unit_text) or unit_text.count("(") != unit_text.count(")"):
        shown = (
            unit_text if unit_text.isprintable() else unit_text.encode("unicode_escape").decode()
        )
        raise ScenarioError(
            f"{shown!r} is not a unit (units are letters, digits, spaces and * / ^ ( ), "
            f"e.g. {_example(unit)!r})",
            path=path,
            key=where,
        )
    try:
        units = ureg.parse_units(unit_text)
        ureg.Quantity(1.0, units).to_base_units()  # catches what parses but cannot convert
        return units
    except pint.errors.UndefinedUnitError as error:
        names = getattr(error, "unit_names", None) or (unit_text,)
        bad = names[0] if isinstance(names, list | tuple) else str(names)
        raise ScenarioError(
            f"{text!r}: {bad!r} is not a unit{suggest_unit(unit_text, unit)}", path=path, key=where
        ) from None
    except Exception:  # pint's parser raises many kinds (ZeroDivision, Token, Assertion...)
        raise ScenarioError(
            f"{text!r}: {unit_text!r} is not a unit{suggest_unit(unit_text, unit)}",
            path=path,
            key=where,
        ) from None


def _convert(magnitude: float, units: pint.Unit, *, text, unit, where, path) -> float:
    target = _si_unit(unit)
    try:
        quantity = ureg.Quantity(magnitude, units)
        if unit == "Hz" and "radian" in str(units):
            # pint takes 1 rad/s for 1 Hz; a cyclic frequency is the angular one over 2 pi
            return float(quantity.to("radian/second").magnitude / (2 * math.pi))
        return float(quantity.to(target).magnitude)
    except pint.errors.DimensionalityError:
        want = unit or "dimensionless"
        raise ScenarioError(
            f"{text!r} is not in units of {want!r}; write it in e.g. {_example(unit)!r}",
            path=path,
            key=where,
        ) from None


def _example(unit: str) -> str:
    if unit in ("", "1"):
        return "0.5"
    display = DISPLAY_UNITS.get(unit, unit)
    if display == "auto":
        display = unit
    return f"1 {display}"


def parse_quantity(
    text: str | float | int, *, unit: str, key: str, path: object | None = None
) -> float:
    """Convert a written quantity to a float in the SI unit ``unit``.

    Parameters
    ----------
    text : str or float or int
        The value as written, e.g. ``"8 mW"``, ``"-12 MHz"``, ``"22 degC"``. A
        bare number is accepted only for a dimensionless ``unit``.
    unit : str
        The SI unit of the result as pint spells it (``""`` for dimensionless).
    key : str
        Key of the value, for error messages (e.g. ``"inputs.beam_power.nominal"``).
    path : path-like, optional
        File the value came from, for error messages.

    Returns
    -------
    float
        The value in ``unit``.

    Raises
    ------
    ScenarioError
        Unknown unit (with close matches), wrong dimension, or a bare number
        for a dimensional quantity.
    """
    magnitude, unit_text = _split(text, unit=unit, where=key, path=path)
    if not unit_text:
        if unit in ("", "1"):
            return magnitude
        raise ScenarioError(
            f"{text!r} has no unit; write it with a unit, e.g. '{_fmt_num(magnitude)} "
            f"{_example(unit).split(' ', 1)[1]}'",
            path=path,
            key=key,
        )
    units = _units_of(unit_text, text=text, unit=unit, where=key, path=path)
    return _convert(magnitude, units, text=text, unit=unit, where=key, path=path)


def _fmt_num(value: float) -> str:
    return f"{value:g}"


def parse_tolerance_text(
    text: str | float | int,
    *,
    unit: str,
    nominal: float,
    key: str,
    path: object | None = None,
    nominal_text: str | float | int | None = None,
) -> tuple[float, bool]:
    """Convert a written tolerance to ``(absolute SI value, written as relative)``.

    See :func:`parse_tolerance`; the second item tells whether the tolerance
    was written relative to the nominal (``%``, ``ppm``, ``ppb``, ``permille``).
    """
    magnitude, unit_text = _split(text, unit=unit, where=key, path=path)
    if unit_text in _RELATIVE_UNITS:
        if _is_temperature(unit) and (
            nominal_text is None or _written_in_offset_unit(nominal_text)
        ):
            raise ScenarioError(
                f"{text!r}: a relative tolerance of a temperature on an offset scale (degC) is "
                f"ambiguous; write it absolute, e.g. '0.1 K'",
                path=path,
                key=key,
            )
        if nominal == 0 and magnitude != 0:
            example = "0.01" if unit in ("", "1") else f"'0.1 {_example(unit).split(' ', 1)[1]}'"
            raise ScenarioError(
                f"{text!r}: a relative tolerance of a zero nominal is zero; write it "
                f"absolute, e.g. {example}",
                path=path,
                key=key,
            )
        value = magnitude * _RELATIVE_UNITS[unit_text] * abs(nominal)
        relative = True
    elif not unit_text:
        if unit not in ("", "1"):
            raise ScenarioError(
                f"{text!r} has no unit; write it relative ('{_fmt_num(magnitude)} %') or "
                f"absolute with a unit (e.g. '{_fmt_num(magnitude)} "
                f"{_example(unit).split(' ', 1)[1]}')",
                path=path,
                key=key,
            )
        value, relative = magnitude, False
    else:
        units = _units_of(unit_text, text=text, unit=unit, where=key, path=path)
        name = str(units)
        if name in _OFFSET_TO_DELTA:
            units = ureg.parse_units(_OFFSET_TO_DELTA[name])
        value = _convert(magnitude, units, text=text, unit=unit, where=key, path=path)
        relative = False
    if not math.isfinite(value) or value < 0:
        raise ScenarioError(
            f"tolerance {text!r} must be a finite non-negative amount; write e.g. '1 %'",
            path=path,
            key=key,
        )
    return value, relative


def parse_tolerance(
    text: str | float | int,
    *,
    unit: str,
    nominal: float,
    key: str,
    path: object | None = None,
    nominal_text: str | float | int | None = None,
) -> float:
    """Convert a written tolerance to an absolute amount in the SI unit ``unit``.

    Parameters
    ----------
    text : str or float or int
        Relative (``"2 %"``, ``"50 ppm"``: of ``|nominal|``) or absolute with a
        unit (``"0.1 mW"``, ``"0.1 K"``, ``"0.1 delta_degC"``; ``"0.1 degC"``
        is read as a temperature difference). A bare number only for a
        dimensionless quantity, where it is absolute.
    unit : str
        SI unit of the quantity.
    nominal : float
        Nominal value in ``unit`` (SI), the reference of a relative tolerance.
    key : str
        Key for error messages.
    path : path-like, optional
        File the value came from.
    nominal_text : str, optional
        The nominal as written. A relative tolerance of a temperature is
        accepted only when the nominal is known to be written in an absolute
        scale (e.g. ``"300 K"``).

    Returns
    -------
    float
        The tolerance in ``unit``, non-negative.

    Raises
    ------
    ScenarioError
        Bad unit, wrong dimension, negative value, or a relative tolerance on a
        temperature written in degC.
    """
    return parse_tolerance_text(
        text, unit=unit, nominal=nominal, key=key, path=path, nominal_text=nominal_text
    )[0]


def _is_temperature(unit: str) -> bool:
    try:
        return _si_unit(unit).dimensionality == ureg.kelvin.dimensionality
    except (pint.errors.PintError, ValueError, AttributeError, TypeError):
        return False


def _written_in_offset_unit(text: str | float | int) -> bool:
    if not isinstance(text, str):
        return False
    match = _NUMBER.match(text.replace("°C", "degC").replace("°F", "degF"))
    if match is None or not match.group(2):
        return False
    try:
        return str(ureg.parse_units(match.group(2))) in _OFFSET_TO_DELTA
    except (pint.errors.PintError, ValueError, AttributeError, TypeError):
        return False


def format_percent(fraction: float, *, digits: int = 1) -> str:
    """A fraction as a percentage, e.g. 0.1234 -> '12.3 %'."""
    fraction = float(fraction)
    if math.isnan(fraction):
        return "nan"
    return f"{100 * fraction:.{digits}f} %"


def display_unit(unit: str, magnitude: float) -> str:
    """The unit to show SI ``unit`` values of size ``magnitude`` in (:data:`DISPLAY_UNITS`).

    ``"auto"`` entries pick the prefix by size (``2e-4 K`` -> ``uK``); a unit
    without an entry is shown as it is.
    """
    display = DISPLAY_UNITS.get(unit, unit)
    if display != "auto":
        return display
    if magnitude > 0 and math.isfinite(magnitude):
        for name, scale in _AUTO_PREFIXES[unit]:
            if magnitude < 1000 * scale:
                return name
    return _AUTO_PREFIXES[unit][-1][0]


def format_quantity(value: float, unit: str, *, digits: int = 3) -> str:
    """Format an SI value in a readable unit for reports.

    Parameters
    ----------
    value : float
        The value in ``unit``.
    unit : str
        Its SI unit; :data:`DISPLAY_UNITS` gives the unit shown (``"T/m"`` is
        shown in G/cm, ``"Pa"`` in mbar, ``"K"`` in nK/uK/mK/K by size).
    digits : int
        Significant digits.

    Returns
    -------
    str
        E.g. ``"4 mW"``, ``"-12 MHz"``, ``"12 G/cm"``, ``"145 uK"``.
    """
    display = display_unit(unit, abs(value))
    if display == unit and unit not in DISPLAY_UNITS:
        text = f"{value:.{digits}g}"
        return f"{text} {unit}" if unit not in ("", "1") else text
    shown = ureg.Quantity(value, _si_unit(unit)).to(display).magnitude
    return f"{shown:.{digits}g} {display}"
