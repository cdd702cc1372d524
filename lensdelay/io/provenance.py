"""What produced an output: tool version, the inputs and their hash, cosmology, seed."""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

from lensdelay.io.reading import file_hash
from lensdelay.model.cosmology import describe_cosmology
from lensdelay.version import __version__

__all__ = ["provenance", "system_hash", "fingerprint"]


def provenance(inputs, cosmo, seed=None) -> dict:
    """Version, input files and their SHA-256, cosmology and seed: recorded in every JSON output."""
    out = {
        "tool": "lensdelay",
        "version": __version__,
        "inputs": [str(p) for p in inputs],
        "input_sha256": file_hash(*inputs),
        # one hash per file: a reader can tell which input changed, and outputs of one
        # folder can be checked to come from the same system (the first input)
        "input_files": [{"path": str(p), "sha256": file_hash(p)} for p in inputs],
        "cosmology": describe_cosmology(cosmo),
    }
    if seed is not None:
        out["seed"] = int(seed)
    return out


def system_hash(doc: dict) -> str | None:
    """The SHA-256 of the first input recorded in an output's provenance (its system).

    ``doc`` is a provenance block (or a fit's top-level JSON); None when it records none.
    """
    files = doc.get("input_files") if isinstance(doc, dict) else None
    if not isinstance(files, list) or not files or not isinstance(files[0], dict):
        return None
    return files[0].get("sha256")


def fingerprint(paths, settings: dict) -> str:
    """SHA-256 over the bytes of ``paths`` (in order, with their names) and ``settings``.

    ``settings`` must be JSON-serialisable; its keys are sorted, so the same settings
    give the same fingerprint whatever order they were collected in.
    """
    digest = hashlib.sha256()
    for p in paths:
        digest.update(Path(p).name.encode("utf-8") + b"\0")
        digest.update(Path(p).read_bytes())
    digest.update(json.dumps(settings, sort_keys=True, default=str).encode("utf-8"))
    return digest.hexdigest()
