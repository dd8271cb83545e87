"""Looking up a species by the names people write ("Rb87", "87Rb", "Sr88-689"); the table."""

from __future__ import annotations

import re

from trapbudget.models.protocol import ModelError
from trapbudget.models.species import _U, SPECIES, Species

__all__ = ["species", "species_table"]

_ELEMENT_NAMES = {
    "rubidium": "rb",
    "cesium": "cs",
    "caesium": "cs",
    "potassium": "k",
    "sodium": "na",
    "lithium": "li",
    "strontium": "sr",
}
_SINGLE_ISOTOPE = {"cs": "133", "na": "23"}
_LINES = {"": "", "d2": "", "461": "", "689": "-689", "red": "-689", "blue": ""}


def _normalize(name: str) -> str | None:
    text = re.sub(r"[\s_\-]", "", name.strip().lower())
    for long, short in _ELEMENT_NAMES.items():
        text = text.replace(long, short)
    match = re.fullmatch(r"([a-z]+)(\d*?)(d2|461|689|red|blue)?", text) or re.fullmatch(
        r"(\d+)([a-z]+?)(d2|461|689|red|blue)?", text
    )
    if match is None:
        return None
    first, second, line = match.groups()
    element, mass = (first, second) if first.isalpha() else (second, first)
    mass = mass or _SINGLE_ISOTOPE.get(element, "")
    return f"{element.capitalize()}{mass}{_LINES[line or '']}"


def species(name: str | Species) -> Species:
    """Look up a species by name.

    Parameters
    ----------
    name : str or Species
        Key of :data:`SPECIES` in any common spelling: ``"Rb87"``, ``"Rb-87"``,
        ``"87Rb"``, ``"rb87"``, ``"rubidium-87"``, ``"Cs"``, ``"Sr88 689"``.
        A :class:`Species` is returned unchanged.

    Returns
    -------
    Species

    Raises
    ------
    ModelError
        For an unknown name; the message lists the valid names.
    """
    if isinstance(name, Species):
        return name
    key = _normalize(str(name))
    if key in SPECIES:
        return SPECIES[key]  # type: ignore[index]
    valid = ", ".join(SPECIES)
    raise ModelError(f"species {name!r} is not known; use one of: {valid}")


def species_table() -> list[dict[str, object]]:
    """One row per species for a command-line table.

    Returns
    -------
    list of dict
        Keys ``name``, ``label``, ``wavelength_nm``, ``linewidth_mhz`` (Gamma/2pi),
        ``saturation_intensity_mw_cm2``, ``mass_u``, ``doppler_temperature_uk``,
        ``recoil_temperature_nk``, ``sources`` (field -> citation).
    """
    return [
        {
            "name": s.name,
            "label": s.label,
            "wavelength_nm": s.wavelength * 1e9,
            "linewidth_mhz": s.linewidth_hz * 1e-6,
            "saturation_intensity_mw_cm2": s.saturation_intensity * 0.1,
            "mass_u": s.mass / _U,
            "doppler_temperature_uk": s.doppler_temperature * 1e6,
            "recoil_temperature_nk": s.recoil_temperature * 1e9,
            "sources": dict(s.sources),
        }
        for s in SPECIES.values()
    ]
