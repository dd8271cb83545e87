"""Atomic file writing and NetCDF round-trips of result Datasets."""

from __future__ import annotations

import contextlib
import json
import os
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

__all__ = [
    "atomic_path",
    "atomic_write_bytes",
    "atomic_write_json",
    "atomic_write_text",
    "default_mode",
    "load_dataset",
    "save_dataset",
]


def default_mode(*, directory: bool = False) -> int:
    """Permissions a plainly created file (or folder) gets under the current umask."""
    mask = os.umask(0)
    os.umask(mask)
    return (0o777 if directory else 0o666) & ~mask


@contextlib.contextmanager
def atomic_path(path: str | os.PathLike[str]) -> Iterator[Path]:
    """Yield a temporary path beside ``path``; move it into place only on success.

    An exception inside the block removes the temporary file and leaves any
    existing ``path`` untouched. The finished file gets the usual permissions
    under the umask (a temporary file is created private).
    """
    target = Path(path)
    target.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{target.name}.", suffix=".part", dir=target.parent)
    os.close(fd)
    tmp_path = Path(tmp)
    try:
        yield tmp_path
        os.chmod(tmp_path, default_mode())
        os.replace(tmp_path, target)
    finally:
        if tmp_path.exists():
            tmp_path.unlink()


def atomic_write_bytes(path: str | os.PathLike[str], data: bytes) -> Path:
    """Write ``data`` to ``path`` atomically and return the path."""
    with atomic_path(path) as tmp:
        tmp.write_bytes(data)
    return Path(path)


def atomic_write_text(path: str | os.PathLike[str], text: str) -> Path:
    """Write UTF-8 ``text`` to ``path`` atomically and return the path."""
    return atomic_write_bytes(path, text.encode("utf-8"))


def _json_default(obj: Any) -> Any:
    if isinstance(obj, np.generic):
        return obj.item()
    if isinstance(obj, np.ndarray):
        return obj.tolist()
    if isinstance(obj, Path):
        return str(obj)
    raise TypeError(f"cannot serialise {type(obj).__name__} to JSON")


def atomic_write_json(path: str | os.PathLike[str], obj: Any) -> Path:
    """Write ``obj`` as indented JSON atomically and return the path."""
    return atomic_write_text(path, json.dumps(obj, indent=2, default=_json_default) + "\n")


def _encode_attrs(attrs: dict[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in attrs.items():
        if isinstance(value, bool | np.bool_):
            out[key] = int(value)
            out[f"{key}__bool"] = 1
        elif value is None:
            out[key] = ""
            out[f"{key}__none"] = 1
        elif isinstance(value, dict | list | tuple) and not (
            isinstance(value, list | tuple) and all(isinstance(v, int | float) for v in value)
        ):
            out[key] = json.dumps(value, default=_json_default)
            out[f"{key}__json"] = 1
        else:
            out[key] = value
    return out


def _decode_attrs(attrs: dict[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for key, value in attrs.items():
        if key.endswith(("__bool", "__none", "__json")):
            continue
        if attrs.get(f"{key}__bool"):
            out[key] = bool(value)
        elif attrs.get(f"{key}__none"):
            out[key] = None
        elif attrs.get(f"{key}__json"):
            out[key] = json.loads(value)
        elif isinstance(value, np.ndarray) and value.ndim == 1:
            out[key] = value.tolist()
        elif isinstance(value, np.generic):
            out[key] = value.item()
        else:
            out[key] = value
    return out


def save_dataset(ds: xr.Dataset, path: str | os.PathLike[str]) -> Path:
    """Save a result Dataset to NetCDF (h5netcdf) atomically.

    Boolean variables and attributes, ``None`` and nested attributes (dicts,
    lists of strings) are encoded so that :func:`load_dataset` restores them.
    """
    ds = ds.copy()
    ds.attrs = _encode_attrs(dict(ds.attrs))
    for name in list(ds.variables):
        var = ds[name]
        attrs = _encode_attrs(dict(var.attrs))
        if var.dtype == bool:
            ds[name] = var.astype("int8")
            attrs["dtype_bool"] = 1
        ds[name].attrs = attrs
    with atomic_path(path) as tmp:
        ds.to_netcdf(tmp, engine="h5netcdf")
    return Path(path)


def load_dataset(path: str | os.PathLike[str]) -> xr.Dataset:
    """Load a Dataset written by :func:`save_dataset`, fully into memory."""
    with xr.open_dataset(path, engine="h5netcdf") as handle:
        ds = handle.load()
    ds.attrs = _decode_attrs(dict(ds.attrs))
    for name in list(ds.variables):
        attrs = dict(ds[name].attrs)
        is_bool = attrs.pop("dtype_bool", 0)
        if is_bool:
            ds[name] = ds[name].astype(bool)
        ds[name].attrs = _decode_attrs(attrs)
    return ds
