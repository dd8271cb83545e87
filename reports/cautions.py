"""Safety cautions fitted to the species and the atom source a report describes.

The reports layer reads only the study record (species, model, model options), so the
wavelengths of each element's lines are listed here, by element, for the text alone.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from typing import Any

__all__ = ["safety_cautions"]

# element -> (cooling lines, nm; whether the main light is visible to the eye; metal family)
_LINES: dict[str, tuple[str, bool, str]] = {
    "Rb": ("780 nm (and 795 nm)", False, "alkali"),
    "Cs": ("852 nm (and 894 nm)", False, "alkali"),
    "K": ("767 nm (and 770 nm)", False, "alkali"),
    "Na": ("589 nm (yellow)", True, "alkali"),
    "Li": ("671 nm (red)", True, "alkali"),
    "Sr": ("461 nm (blue) and 689 nm (red)", True, "alkaline-earth"),
}
_SR_REPUMPERS = {
    "707+679": "707 nm and 679 nm (deep red, barely visible)",
    "481": "481 nm (blue-green)",
}
_NAMES = {"Rb": "rubidium", "Cs": "caesium", "K": "potassium", "Na": "sodium", "Li": "lithium"}

_OPENING = "This report computes numbers; it does not make an apparatus safe."
_CLOSING = (
    "Defer to your laser-safety officer, local codes and licensed practice; nothing in this "
    "report replaces them."
)


def _element(species: str) -> str:
    match = re.match(r"\s*(\d*)([A-Z][a-z]?)", species or "")
    return match.group(2) if match else ""


def _laser(element: str, options: Mapping[str, Any]) -> str:
    if element not in _LINES:
        return (
            "Lasers used for cooling and trapping (often class 3B or 4, near-infrared and nearly "
            "invisible, or visible and dazzling) can blind in a fraction of a second, including "
            "by stray reflections: use the eyewear, enclosures and interlocks your laser-safety "
            "officer specifies."
        )
    lines, visible, _ = _LINES[element]
    extra = ""
    if element == "Sr":
        repump = str(options.get("repump", "707+679"))
        if repump in _SR_REPUMPERS:
            extra = f"; the repumpers add {_SR_REPUMPERS[repump]}"
    if visible:
        nature = (
            "visible light: it dazzles and can cause flash blindness, blue light adds a "
            "photochemical hazard to the retina at lower exposures, and the blink reflex does "
            "not protect against class 3B or 4 beams; eyewear for the near infrared does not "
            "block it"
        )
    else:
        nature = "near-infrared light, nearly invisible: the eye does not blink away from it"
    return (
        f"The cooling lasers here run at {lines}{extra}, often class 3B or 4, {nature}. They "
        "can blind in a fraction of a second, including by stray reflections: use eyewear "
        "rated for every wavelength present, enclosures and interlocks your laser-safety "
        "officer specifies."
    )


def _metal(element: str) -> str:
    if element == "Sr":
        return (
            "Strontium is a reactive alkaline-earth metal: it reacts with water releasing "
            "hydrogen, tarnishes in air and fine turnings can ignite; load ovens under inert "
            "gas and handle it under your institution's chemical-safety rules."
        )
    name = _NAMES.get(element)
    what = name if name else "Alkali and alkaline-earth metals (rubidium, caesium, strontium)"
    verb = "reacts" if name else "react"
    return (
        f"{what[0].upper() + what[1:]} {verb} violently with water and can ignite in air: handle "
        "under the chemical-safety rules of your institution."
    )


def safety_cautions(
    species: str = "", model: str = "", options: Mapping[str, Any] | None = None
) -> list[str]:
    """The cautions of a report on ``species`` with ``model`` and its options.

    Parameters
    ----------
    species : str
        Species key of the study (``"Rb87"``, ``"Sr88"``, ``"Sr88-689"``); empty for none.
    model : str
        Model name (``"VaporCellMOT"``, ``"BeamLoadedMOT"``, ``"NarrowLineMOT"``).
    options : mapping, optional
        The model options (``source``, ``repump``).

    Returns
    -------
    list of str
        One caution per hazard present, ending with the deferral to the laser-safety officer,
        local codes and licensed practice.
    """
    options = dict(options or {})
    element = _element(species)
    source = str(options.get("source", ""))
    oven = model == "BeamLoadedMOT" and source in ("oven", "zeeman-slower")
    cautions = [_OPENING, _laser(element, options)]
    coils = (
        "Quadrupole coils carry high currents, store magnetic energy and get hot: follow local "
        "electrical-safety codes; interlock the supplies and cooling."
    )
    if model == "BeamLoadedMOT" and source == "zeeman-slower":
        coils += (
            " A Zeeman slower's coils carry tens of amperes for hundreds of watts, usually "
            "water-cooled: interlock the current to the coolant flow and temperature, and mind "
            "the stray field at tools and implants near the slower."
        )
    cautions.append(coils)
    cautions.append(_metal(element))
    if oven:
        hot = "about 450-550 degC" if element == "Sr" else "one to several hundred degC"
        cautions.append(
            f"The oven runs at {hot}: it burns, its heater supplies need interlocks against "
            "overheating, the atomic beam coats the windows it faces, and the oven must be cold "
            "before the vacuum is opened."
        )
    elif model == "BeamLoadedMOT" and source == "2d-mot":
        cautions.append(
            "The 2D-MOT source cell is glass under vacuum and is often heated: it can implode, "
            "and hot cells and bake-outs burn; shield and label them."
        )
    else:
        cautions.append(
            "Glass vacuum cells can implode; heated cells, ovens and bake-outs burn: shield and "
            "label them."
        )
    cautions.append(_CLOSING)
    return cautions
