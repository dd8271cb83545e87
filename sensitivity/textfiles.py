"""Reading the user's text files (scenarios, mappings, data, logs) as untrusted input.

Every reader in the engine goes through :func:`read_text`: UTF-8 with or without a
byte-order mark is accepted; any other encoding, a binary file, a folder or a missing
file is refused with one line naming the file and the fix. :func:`read_toml` adds the
TOML parser with its error turned into the same kind of line.
"""

from __future__ import annotations

import os
from pathlib import Path
from typing import Any

try:
    import tomllib
except ImportError:  # pragma: no cover - Python 3.10
    import tomli as tomllib

from trapbudget.sensitivity.errors import ScenarioError

__all__ = ["MAX_TEXT_BYTES", "read_text", "read_toml"]

#: Larger text files are refused (a scenario or a lab log is kilobytes to a few megabytes).
MAX_TEXT_BYTES = 256 * 1024 * 1024


def read_text(
    path: str | os.PathLike[str],
    *,
    error: type[ScenarioError] = ScenarioError,
    what: str = "file",
) -> str:
    """The text of ``path``, decoded as UTF-8 (a leading byte-order mark is dropped).

    Raises
    ------
    ScenarioError (or ``error``, a subclass)
        Missing or unreadable file, a folder, a binary file, a file that is not
        UTF-8 (e.g. a Latin-1 export), or one over :data:`MAX_TEXT_BYTES`.
    """
    file = Path(path)
    try:
        if file.is_dir():
            raise error(f"the {what} is a folder; give the path of a file", path=file)
        size = file.stat().st_size
        if size > MAX_TEXT_BYTES:
            raise error(
                f"the {what} is {size / 2**20:.0f} MiB, more than a text file of this kind "
                f"should be ({MAX_TEXT_BYTES // 2**20} MiB); check the path",
                path=file,
            )
        data = file.read_bytes()
    except FileNotFoundError:
        raise error(f"the {what} does not exist; check the path", path=file) from None
    except OSError as exc:
        raise error(
            f"cannot read the {what} ({exc.strerror or exc}); check the path and permissions",
            path=file,
        ) from None
    if b"\x00" in data:
        raise error(f"the {what} is binary, not text; give a text file (UTF-8)", path=file)
    try:
        return data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        raise error(
            f"the {what} is not UTF-8 text (byte 0x{data[exc.start]:02x} at offset {exc.start}, "
            "e.g. a Latin-1 '°'); save the file as UTF-8",
            path=file,
        ) from None


def read_toml(
    path: str | os.PathLike[str],
    *,
    error: type[ScenarioError] = ScenarioError,
    what: str = "file",
) -> dict[str, Any]:
    """Parse ``path`` as TOML (through :func:`read_text`)."""
    text = read_text(path, error=error, what=what)
    try:
        return tomllib.loads(text)
    except tomllib.TOMLDecodeError as exc:
        raise error(f"not valid TOML: {exc}; fix the {what}", path=Path(path)) from None
