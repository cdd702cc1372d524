"""A prepared lens on disk: one folder, no pickle.

``lens.json`` (settings, the fit, the chain's diagnostics, the watched images, hashes),
``chain.npz`` (the posterior and the fit's arrays, float64 as drawn), ``scenario.toml``
(the scenario with its mass model written inline) and, for a scenario with members, its
catalogue. :func:`read_prepared` rebuilds exactly what :func:`write_prepared` was given.
"""

from __future__ import annotations

import hashlib
import json
from pathlib import Path

import numpy as np

from lensdelay.errors import InputError, path_of
from lensdelay.forecast.prepared import PreparedLens
from lensdelay.inference.fit import FitResult
from lensdelay.inference.misfit import ModelError
from lensdelay.inference.modes import ModeShare
from lensdelay.inference.sampling import Chain
from lensdelay.atomic import load_npz
from lensdelay.io.reading import load_scenario, self_contained_document
from lensdelay.io.storage import json_ready, write_output_set
from lensdelay.model.simulate import to_toml
from lensdelay.version import __version__

__all__ = ["KIND", "write_prepared", "is_prepared", "read_prepared"]


#: What ``lens.json`` says it is (a folder of forecast outputs is not a prepared lens).
KIND = "lensdelay prepared lens"


def _sha(data: bytes) -> str:
    return hashlib.sha256(data).hexdigest()


def _arrays_sha(arrays: dict) -> str:
    """SHA-256 over the arrays' names, dtypes, shapes and bytes, in name order.

    The content of ``chain.npz`` rather than its zip bytes, so it can be computed
    before the file is written and checked on the arrays as read.
    """
    digest = hashlib.sha256()
    for name in sorted(arrays):
        a = np.ascontiguousarray(arrays[name])
        digest.update(f"{name}|{a.dtype.str}|{a.shape}|".encode("utf-8"))
        digest.update(a.tobytes())
    return digest.hexdigest()


def _document_sha(meta: dict) -> str:
    """SHA-256 of lens.json's content without its own ``document_sha256`` key."""
    body = {k: v for k, v in meta.items() if k != "document_sha256"}
    return _sha(json.dumps(body, sort_keys=True, allow_nan=False).encode("utf-8"))


def write_prepared(out, prepared: PreparedLens, scenario_path, model_path=None) -> list[str]:
    """Write ``prepared`` into folder ``out`` as one set (atomically; inputs untouched)."""
    doc, files = self_contained_document(scenario_path, model_path)
    scenario_text = to_toml(doc)
    fit, chain = prepared.fit, prepared.chain
    err = fit.model_error
    meta = {
        "kind": KIND,
        "tool": "lensdelay",
        "version": __version__,
        "source": str(scenario_path),
        "model_label": prepared.scenario.model.label,
        "seed": prepared.seed,
        "walkers": prepared.walkers,
        "steps": prepared.steps,
        "prior": prepared.prior,
        "sha256": {"scenario.toml": _sha(scenario_text.encode("utf-8"))}
        | {name: _sha(data) for name, data in files.items()},
        "fit": {
            "model_label": fit.model_label,
            "names": list(fit.names),
            "chi2": fit.chi2,
            "n_constraints": fit.n_constraints,
            "n_parameters": fit.n_parameters,
            "residuals_mas": fit.residuals_mas,
            "unobserved_images": fit.unobserved_images,
            "at_bounds": list(fit.at_bounds),
            "success": bool(fit.success),
            "message": fit.message,
            "notes": list(fit.notes),
            "model_error": None
            if err is None
            else {
                "floor_arcsec": err.floor_arcsec,
                "chi2": err.chi2,
                "dof": err.dof,
                "p_value": err.p_value,
            },
            # the fit's other optima, so a forecast from the lens notes them as one from
            # scratch does
            "alternatives": [
                {"chi2": float(c2), "values": np.asarray(v, dtype=float).tolist()}
                for c2, v in fit.alternatives
            ],
        },
        "chain": {
            "names": list(chain.names),
            "burn": chain.burn,
            "thin": chain.thin,
            "seed": chain.seed,
            "move": chain.move,
            "warnings": list(chain.warnings),
            "draws": chain.draws,
            "effective_samples": chain.effective_samples,
            # the fit modes mixed in the chain (lensdelay.inference.modes), if any
            "modes": [
                {"chi2": m.chi2, "weight": m.weight, "walkers": m.walkers} for m in chain.modes
            ],
        },
        "watched_families": len(prepared.watched),
    }
    arrays = {
        "chain": chain.chain,
        "log_prob": chain.log_prob,
        "acceptance": np.asarray(chain.acceptance, dtype=float),
        "autocorr": np.asarray(chain.autocorr, dtype=float),
        "rhat": np.asarray(chain.rhat, dtype=float),
        "fit_values": np.asarray(fit.values, dtype=float),
        "fit_errors": np.asarray(fit.errors, dtype=float),
    }
    if fit.covariance is not None:
        arrays["fit_covariance"] = np.asarray(fit.covariance, dtype=float)
    for k, (x, y) in enumerate(prepared.watched):
        arrays[f"watched_{k}_x"] = np.asarray(x, dtype=float)
        arrays[f"watched_{k}_y"] = np.asarray(y, dtype=float)
    meta["sha256"]["chain.npz"] = _arrays_sha(arrays)
    meta = json_ready(meta)
    # lens.json's own hash: an edited fit, setting or hash list is refused on reading
    meta["document_sha256"] = _document_sha(meta)
    return write_output_set(
        out,
        json_name="lens.json",
        doc=meta,
        texts={"scenario.toml": scenario_text},
        binaries=files,
        arrays={"chain.npz": arrays},
        inputs=[p for p in (scenario_path, model_path) if p is not None],
    )


def is_prepared(path) -> bool:
    """Whether ``path`` is a folder holding a prepared lens."""
    return Path(path).is_dir() and (Path(path) / "lens.json").is_file()


def read_prepared(folder) -> PreparedLens:
    """The prepared lens in ``folder``; every problem is one :class:`InputError` line.

    Every file is checked against the SHA-256 recorded when the lens was prepared
    (``scenario.toml``, the catalogue, the content of ``chain.npz``), and ``lens.json``
    against its own, so a file changed, swapped with another lens's or truncated since
    is refused, naming it.
    """
    import zipfile

    folder = path_of(folder, "prepared lens")
    where = str(folder / "lens.json")
    try:
        meta = json.loads((folder / "lens.json").read_text(encoding="utf-8"))
    except (OSError, ValueError) as err:
        raise InputError(
            f"must be a prepared lens's JSON, got an unreadable file ({err})", where
        ) from err
    if not isinstance(meta, dict):
        raise InputError(f"must hold a JSON object, got {type(meta).__name__}", where)
    if meta.get("kind") != KIND:
        raise InputError(f"kind must be {KIND!r}, got {meta.get('kind')!r}", where)
    if meta.get("version") != __version__:
        raise InputError(
            f"version must be {__version__} (prepare the lens again with this version), "
            f"got {meta.get('version')!r}",
            where,
        )
    try:
        recorded_self = meta.get("document_sha256")
        same = recorded_self == _document_sha(meta)
    except (TypeError, ValueError):
        same = False
    if not same:
        raise InputError(
            "document_sha256 must match lens.json's content (the file was edited since the "
            "lens was prepared; prepare it again)",
            where,
        )
    hashes = meta.get("sha256")
    if not isinstance(hashes, dict) or not {"scenario.toml", "chain.npz"} <= set(hashes):
        raise InputError(
            "sha256 must list scenario.toml and chain.npz (prepare the lens again), "
            f"got {sorted(hashes) if isinstance(hashes, dict) else hashes!r}",
            where,
        )
    for name, digest in hashes.items():
        if name == "chain.npz":
            continue
        path = folder / name
        if not path.is_file() or _sha(path.read_bytes()) != digest:
            raise InputError(
                f"sha256 of {name} must match the one recorded when the lens was prepared "
                "(the folder was changed since)",
                where,
            )
    chain_path = folder / "chain.npz"
    try:
        a = load_npz(chain_path)
    except (OSError, ValueError, zipfile.BadZipFile, EOFError) as err:
        raise InputError(
            f"must be the prepared lens's arrays, got an unreadable file ({err})", str(chain_path)
        ) from err
    if _arrays_sha(a) != hashes["chain.npz"]:
        raise InputError(
            "sha256 of chain.npz must match the one recorded when the lens was prepared "
            "(another lens's chain, or changed since)",
            where,
        )
    try:
        return _rebuild(folder, meta, a)
    except (KeyError, TypeError, ValueError, IndexError) as err:
        raise InputError(
            f"must hold every entry a prepared lens needs, got a problem with {err!s} "
            "(prepare the lens again)",
            where,
        ) from err


def _rebuild(folder: Path, meta: dict, a: dict) -> PreparedLens:
    """The prepared lens from its checked parts."""
    from dataclasses import replace

    scenario, _ = load_scenario(folder / "scenario.toml")
    scenario = replace(scenario, model=replace(scenario.model, label=meta["model_label"]))
    f = meta["fit"]
    err = f["model_error"]
    fit = FitResult(
        f["model_label"],
        list(f["names"]),
        a["fit_values"],
        a["fit_errors"],
        float(f["chi2"]),
        int(f["n_constraints"]),
        int(f["n_parameters"]),
        f["residuals_mas"],
        f["unobserved_images"],
        list(f["at_bounds"]),
        bool(f["success"]),
        f["message"],
        a.get("fit_covariance"),
        list(f["notes"]),
        None if err is None else ModelError(**err),
        alternatives=[
            (float(alt["chi2"]), np.asarray(alt["values"], dtype=float))
            for alt in f.get("alternatives", [])
        ],
    )
    c = meta["chain"]
    chain = Chain(
        list(c["names"]),
        a["chain"],
        a["log_prob"],
        a["acceptance"],
        a["autocorr"],
        int(c["burn"]),
        int(c["thin"]),
        int(c["seed"]),
        list(c["warnings"]),
        c["move"],
        a["rhat"],
        draws=c["draws"],
        effective_samples=c["effective_samples"],
        modes=tuple(ModeShare(**m) for m in c.get("modes", [])),
    )
    watched = [
        (a[f"watched_{k}_x"], a[f"watched_{k}_y"]) for k in range(int(meta["watched_families"]))
    ]
    return PreparedLens(
        scenario,
        fit,
        chain,
        watched,
        int(meta["seed"]),
        int(meta["walkers"]),
        int(meta["steps"]),
        meta["prior"],
    )
