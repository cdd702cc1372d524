"""What produced an output: tool version, the inputs and their hash, cosmology, seed."""

from __future__ import annotations

from lensdelay.io.reading import file_hash
from lensdelay.model.cosmology import describe_cosmology
from lensdelay.version import __version__


def provenance(inputs, cosmo, seed=None) -> dict:
    """Version, input files and their SHA-256, cosmology and seed: recorded in every JSON output."""
    out = {
        "tool": "lensdelay",
        "version": __version__,
        "inputs": [str(p) for p in inputs],
        "input_sha256": file_hash(*inputs),
        "cosmology": describe_cosmology(cosmo),
    }
    if seed is not None:
        out["seed"] = int(seed)
    return out
