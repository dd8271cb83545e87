"""Atomic file writing, safe replacement of whole folders, NetCDF round-trips of Datasets.

A report folder is built in a temporary folder beside its final place and then put in
place in one step, so that after a crash or a kill at any moment the final place is
either as it was or complete:

* :func:`folder_lock` holds an advisory ``fcntl.flock`` lock on a lock file beside the
  folder for the whole write; the kernel drops it when the process dies, so a killed
  run never leaves a stale lock, and a second run into the same folder is told at once;
* :func:`replace_folder` swaps the new folder with the old one in one system call
  (Linux ``renameat2`` with ``RENAME_EXCHANGE``) and then deletes the old content;
  where that call does not exist it falls back to two renames;
* :func:`clean_leftovers` removes what killed runs left beside the folder (temporary
  ``.part`` folders, old folders of a swap); it runs under the lock.
"""

from __future__ import annotations

import contextlib
import ctypes
import ctypes.util
import errno
import json
import os
import shutil
import tempfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import xarray as xr

from trapbudget.sensitivity.errors import UsageError

__all__ = [
    "FolderBusyError",
    "atomic_path",
    "atomic_write_bytes",
    "atomic_write_json",
    "atomic_write_text",
    "clean_leftovers",
    "default_mode",
    "folder_lock",
    "load_dataset",
    "replace_folder",
    "save_dataset",
    "scratch_name",
    "try_lock",
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


_AT_FDCWD = -100
_RENAME_EXCHANGE = 2


class FolderBusyError(UsageError):
    """Another run holds the lock of this output folder."""


def _lock_path(folder: Path) -> Path:
    return folder.with_name(f".{folder.name}.lock")


def scratch_name(folder: Path, kind: str) -> Path:
    """A hidden sibling of ``folder`` for a run's scratch work (``kind``: 'part' or 'old')."""
    return folder.with_name(f".{folder.name}.{os.getpid()}.{kind}")


def try_lock(folder: str | os.PathLike[str]) -> bool:
    """True when no other process holds the lock of ``folder`` right now (probe only)."""
    folder = Path(folder)
    if not folder.parent.is_dir():
        return True
    with contextlib.suppress(FolderBusyError), folder_lock(folder):
        return True
    return False


@contextlib.contextmanager
def folder_lock(folder: str | os.PathLike[str]) -> Iterator[None]:
    """Hold the exclusive lock of ``folder`` (non-blocking), or raise :class:`FolderBusyError`.

    The lock file beside the folder is removed on release. A waiter that opened the
    file just before it was removed finds, after locking, that the name no longer
    points at its file, and starts again (so two runs can never both hold a lock).
    """
    import fcntl

    folder = Path(folder)
    folder.parent.mkdir(parents=True, exist_ok=True)
    path = _lock_path(folder)
    while True:
        fd = os.open(path, os.O_RDWR | os.O_CREAT, 0o644)
        try:
            fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
        except OSError as error:
            os.close(fd)
            if error.errno in (errno.EAGAIN, errno.EACCES):
                raise FolderBusyError(
                    f"--out {folder}: another trapbudget run is writing this folder; wait "
                    "for it to finish or choose another folder"
                ) from None
            raise
        try:
            same = os.stat(path).st_ino == os.fstat(fd).st_ino
        except FileNotFoundError:
            same = False
        if same:
            break
        os.close(fd)
    try:
        yield
    finally:
        with contextlib.suppress(FileNotFoundError):
            os.unlink(path)
        os.close(fd)


def clean_leftovers(folder: str | os.PathLike[str]) -> list[Path]:
    """Remove scratch folders that killed runs left beside ``folder``; call under the lock."""
    folder = Path(folder)
    removed: list[Path] = []
    if not folder.parent.is_dir():
        return removed
    prefix = f".{folder.name}."
    for item in folder.parent.iterdir():
        name = item.name
        if name.startswith(prefix) and name.endswith((".part", ".old")) and item.is_dir():
            shutil.rmtree(item, ignore_errors=True)
            removed.append(item)
    return removed


def _exchange(a: Path, b: Path) -> bool:
    """Swap two paths atomically (Linux renameat2); False where the call is unavailable."""
    name = ctypes.util.find_library("c")
    if name is None:
        return False
    try:
        libc = ctypes.CDLL(name, use_errno=True)
        renameat2 = libc.renameat2
    except (OSError, AttributeError):
        return False
    renameat2.argtypes = [ctypes.c_int, ctypes.c_char_p, ctypes.c_int, ctypes.c_char_p]
    renameat2.argtypes += [ctypes.c_uint]
    result = renameat2(_AT_FDCWD, os.fsencode(a), _AT_FDCWD, os.fsencode(b), _RENAME_EXCHANGE)
    if result == 0:
        return True
    code = ctypes.get_errno()
    if code in (errno.ENOSYS, errno.EINVAL, errno.ENOTSUP):
        return False
    raise OSError(code, os.strerror(code), str(b))


def replace_folder(new: str | os.PathLike[str], folder: str | os.PathLike[str]) -> None:
    """Put the finished folder ``new`` at ``folder``, replacing what was there.

    With an existing ``folder`` the two are exchanged in one step; the old content is
    then deleted. A kill at any moment leaves ``folder`` either as it was or complete
    (what remains beside it is removed by the next :func:`clean_leftovers`).
    """
    new, folder = Path(new), Path(folder)
    if not folder.exists():
        os.replace(new, folder)
        return
    if _exchange(new, folder):
        shutil.rmtree(new, ignore_errors=True)  # `new` now holds the old content
        return
    old = scratch_name(folder, "old")  # fallback: a short window without `folder`
    os.replace(folder, old)
    os.replace(new, folder)
    shutil.rmtree(old, ignore_errors=True)
