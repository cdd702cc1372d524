"""Atomic file primitives shared by every layer that writes.

A temporary file in the same folder, then a rename, so a reader never sees half a
file. Arrays go through numpy's npz without pickle.
"""

from __future__ import annotations

import io
import os
import tempfile
from pathlib import Path

import numpy as np

__all__ = ["atomic_write_bytes", "atomic_save_npz", "load_npz"]


def _umask() -> int:
    """The process's umask (read by setting it and putting it back)."""
    mask = os.umask(0)
    os.umask(mask)
    return mask


def atomic_write_bytes(path: str | os.PathLike, data: bytes) -> None:
    """Write ``data`` to ``path`` via a temporary file in the same folder and a rename."""
    path = Path(path)
    path.parent.mkdir(parents=True, exist_ok=True)
    fd, tmp = tempfile.mkstemp(prefix=f".{path.name}.", suffix=".part", dir=path.parent)
    try:
        # mkstemp makes the file private (0600); give it the mode any new file of the
        # user's would have (0666 minus the umask), as an ordinary write would
        os.chmod(tmp, 0o666 & ~_umask())
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        os.replace(tmp, path)
    except BaseException:
        Path(tmp).unlink(missing_ok=True)
        raise


def atomic_save_npz(path, **arrays) -> None:
    """``numpy.savez`` through a temporary file; object arrays are refused (no pickle)."""
    for k, v in arrays.items():
        if np.asarray(v).dtype == object:
            raise TypeError(f"{k} is an object array; refusing to pickle")
    buf = io.BytesIO()
    np.savez(buf, **arrays)
    atomic_write_bytes(path, buf.getvalue())


def load_npz(path) -> dict:
    """Read an npz written by :func:`atomic_save_npz` (never unpickles)."""
    with np.load(path, allow_pickle=False) as data:
        return {k: data[k] for k in data.files}
