"""Files the tool writes: text, JSON without NaN, figures and whole output sets, each atomically."""

from __future__ import annotations

from lensdelay.atomic import atomic_save_npz, atomic_write_bytes, load_npz  # noqa: F401  (re-exported)

import json
from pathlib import Path

import numpy as np


def atomic_write_text(path, text: str) -> None:
    """Write UTF-8 text atomically."""
    atomic_write_bytes(path, text.encode("utf-8"))


def json_ready(obj):
    """Replace NaN and infinities by null and numpy scalars/arrays by plain Python values."""
    if isinstance(obj, dict):
        return {str(k): json_ready(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_ready(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return json_ready(obj.tolist())
    if isinstance(obj, (np.floating, float)):
        return float(obj) if np.isfinite(obj) else None
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


def atomic_write_json(path, obj) -> None:
    """JSON with no NaN (written as null), atomically."""
    atomic_write_text(path, json.dumps(json_ready(obj), indent=2, allow_nan=False) + "\n")


def atomic_savefig(fig, stem) -> list[str]:
    """Save a matplotlib figure as PNG and PDF, each atomically. Returns the paths."""
    import io

    out = []
    for ext in ("png", "pdf"):
        buf = io.BytesIO()
        # no creation date or software version in the files: identical runs, identical bytes
        metadata = {"CreationDate": None} if ext == "pdf" else {"Software": None}
        fig.savefig(buf, format=ext, dpi=130, bbox_inches="tight", metadata=metadata)
        path = f"{stem}.{ext}"
        atomic_write_bytes(path, buf.getvalue())
        out.append(path)
    return out


def write_output_set(
    out, *, json_name: str, doc: dict, texts=None, figures=None, arrays=None, inputs=()
) -> list[str]:
    """Write one command's outputs into folder ``out``: texts, arrays, figures, JSON last.

    Every file goes through a temporary file and a rename. Refuses (before writing
    anything) to overwrite any of ``inputs``.
    """
    from lensdelay.errors import InputError

    out = Path(out)
    names = [json_name, *(texts or {}), *(arrays or {})]
    names += [f"{stem}.{ext}" for stem in (figures or {}) for ext in ("png", "pdf")]
    protected = {Path(p).resolve() for p in inputs}
    for n in names:
        if (out / n).resolve() in protected:
            raise InputError(
                f"out {out} would overwrite the input {out / n}; choose another folder"
            )
    out.mkdir(parents=True, exist_ok=True)
    for name, text in (texts or {}).items():
        atomic_write_text(out / name, text)
    for name, arrs in (arrays or {}).items():
        atomic_save_npz(out / name, **arrs)
    for stem, fig in (figures or {}).items():
        atomic_savefig(fig, out / stem)
    atomic_write_json(out / json_name, doc)
    return names
