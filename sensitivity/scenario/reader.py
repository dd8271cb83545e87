"""Reading a scenario file (TOML, units on every value) into a :class:`Scenario`."""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Any

try:
    import tomllib
except ImportError:  # pragma: no cover - Python 3.10
    import tomli as tomllib

from trapbudget.sensitivity.errors import ScenarioError
from trapbudget.sensitivity.scenario.core import Scenario
from trapbudget.sensitivity.textfiles import read_text

__all__ = ["load_scenario"]


def load_scenario(path: str | Path, *, model: Any = None) -> Scenario:
    """Read a scenario TOML file.

    Parameters
    ----------
    path : path-like
        The file.
    model : model, optional
        Use this model object instead of the registry entry.

    Raises
    ------
    ScenarioError
        Unreadable file, TOML syntax error, or any content error.
    """
    path = Path(path)
    text = read_text(path, what="scenario file")
    try:
        data = tomllib.loads(text)
    except tomllib.TOMLDecodeError as error:
        raise ScenarioError(f"not valid TOML: {error}; fix the file", path=path) from None
    if not data:
        raise ScenarioError(
            "the scenario is empty, so there is nothing to study; start from "
            "'trapbudget demo' (its harrier-rb87.toml) and add [scenario] and [inputs.<name>] "
            "tables",
            path=path,
        )
    digest = hashlib.sha256(path.read_bytes()).hexdigest()
    return Scenario.from_dict(data, path=path, model=model, sha256=digest)
