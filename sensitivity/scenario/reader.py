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
    try:
        data_bytes = path.read_bytes()
    except OSError as error:
        raise ScenarioError(
            f"cannot read the file ({error.strerror}); check the path", path=path
        ) from None
    try:
        data = tomllib.loads(data_bytes.decode("utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as error:
        raise ScenarioError(f"not valid TOML: {error}", path=path) from None
    return Scenario.from_dict(
        data, path=path, model=model, sha256=hashlib.sha256(data_bytes).hexdigest()
    )
