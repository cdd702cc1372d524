"""Reading a folder of job outputs for the report, refusing what it cannot use.

The report needs the JSON document of at least one job (forecast.json, fit.json,
hubble.json, cosmography.json) written by this version of lensdelay, with the keys the
page reads; the PNG figures beside them are optional. Anything else is refused in one
line naming the file and what is missing.
"""

from __future__ import annotations

import json
from pathlib import Path

from lensdelay.errors import InputError
from lensdelay.version import __version__

__all__ = [
    "REQUIRED",
    "IMAGE_KEYS",
    "FIGURE_STEMS",
    "check_document",
    "read_results",
]


#: Keys each job's JSON must hold for the report (top level, and per image entry).
REQUIRED = {
    "forecast": (
        "scenario",
        "reference_image",
        "reference_family",
        "cosmology",
        "images",
        "detection",
        "priors",
        "models",
        "sky_origin",
        "provenance",
    ),
    "fit": ("version", "scenario", "model", "chi2", "dof", "quality", "parameters"),
    "hubble": ("H0", "kappa_ext_comparison", "provenance"),
    "cosmography": (
        "blinded",
        "blinding_key_sha256",
        "population",
        "parameters",
        "lenses",
        "provenance",
    ),
}
IMAGE_KEYS = (
    "family",
    "label",
    "observed",
    "status",
    "x",
    "y",
    "ra_deg",
    "dec_deg",
    "position_error",
    "delay_days",
    "magnification",
    "parity",
    "date",
)
FIGURE_STEMS = (
    "sky",
    "timeline",
    "budget",
    "fit_sky",
    "fit_residuals",
    "corner",
    "hubble_curves",
    "hubble_posterior",
    "joint_h0",
    "population",
)


def check_document(job: str, doc, where: str) -> dict:
    """Refuse a job's JSON that this version cannot report on (one line, naming ``where``)."""
    if not isinstance(doc, dict):
        raise InputError(f"{where} must hold a JSON object, got {type(doc).__name__}")
    version = doc.get("version") if job == "fit" else (doc.get("provenance") or {}).get("version")
    if version != __version__:
        raise InputError(
            f"{where} was written by lensdelay {version or 'of unknown version'}, this is "
            f"{__version__}: run `lensdelay {job}` again to report on it"
        )
    missing = [k for k in REQUIRED[job] if k not in doc]
    if job == "forecast" and not missing:
        for im in doc["images"]:
            missing = [f"images[].{k}" for k in IMAGE_KEYS if k not in im]
            if missing:
                break
    if missing:
        raise InputError(f"{where} lacks {', '.join(missing)}: run `lensdelay {job}` again")
    return doc


def _check_same_system(docs: dict, folder: Path) -> None:
    """Refuse a folder whose job outputs come from different scenarios (one page, one system).

    Each output records the SHA-256 of its first input, the scenario
    (:func:`lensdelay.io.provenance.system_hash`); outputs that record none are refused
    as written by another version.
    """
    from lensdelay.io.provenance import system_hash

    hashes = {}
    for job, doc in docs.items():
        prov = doc if job == "fit" else doc.get("provenance")
        digest = system_hash(prov)
        if digest is None:
            raise InputError(
                f"{folder / (job + '.json')} lacks provenance.input_files (the scenario it was "
                f"made from): run `lensdelay {job}` again"
            )
        hashes[job] = digest
    if len(set(hashes.values())) > 1:
        which = ", ".join(f"{job}.json from {digest[:12]}" for job, digest in hashes.items())
        raise InputError(
            f"{folder} must hold the outputs of one system (the same scenario file), got "
            f"{which}; write each system's outputs into a folder of its own"
        )


def read_results(folder) -> tuple[dict, dict[str, bytes]]:
    """The jobs' documents and PNG figures found in ``folder``.

    Returns ``({job: document}, {figure stem: PNG bytes})``.
    """
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError(f"report folder {folder} must be a folder of lensdelay outputs, got none")
    docs = {}
    for job in ("forecast", "fit", "hubble", "cosmography"):
        path = folder / f"{job}.json"
        if not path.exists():
            continue
        try:
            doc = json.loads(path.read_text())
        except (OSError, ValueError) as err:
            raise InputError(f"{path} must be readable JSON, got: {err}") from err
        docs[job] = check_document(job, doc, str(path))
    _check_same_system(docs, folder)
    if not docs:
        raise InputError(
            f"{folder} must hold forecast.json, fit.json, hubble.json or cosmography.json "
            "(written by `lensdelay forecast|fit|hubble|cosmography --out`), got none"
        )
    figures = {}
    for stem in FIGURE_STEMS:
        path = folder / f"{stem}.png"
        if path.exists():
            data = path.read_bytes()
            if not data.startswith(b"\x89PNG\r\n\x1a\n"):
                raise InputError(f"{path} must be a PNG image, got other bytes")
            figures[stem] = data
    return docs, figures
