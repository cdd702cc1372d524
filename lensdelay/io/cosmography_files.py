"""Joint-H0 results as files.

cosmography.json, the per-lens table, the population samples, and the blinding key kept
beside them.
"""

from __future__ import annotations

import secrets
from pathlib import Path

import numpy as np
from astropy.table import Table

from lensdelay.cautions import CAUTION
from lensdelay.errors import InputError
from lensdelay.io.forecast_files import table_with_gaps

__all__ = [
    "BLINDING_KEY",
    "read_or_new_blinding_key",
    "cosmography_json",
    "lenses_table",
    "dispersions_table",
    "samples_table",
]

#: The blinding key's file in the output folder (its SHA-256 is in every output).
BLINDING_KEY = "blinding.key"
#: Population samples kept in the ECSV (thinned evenly beyond this).
MAX_SAMPLE_ROWS = 20000


def read_or_new_blinding_key(folder) -> bytes:
    """The key in ``folder`` (as written by an earlier run), or a new random one.

    A new key is not written here: it joins the run's output set, so nothing is left
    behind when a run fails.
    """
    path = Path(folder) / BLINDING_KEY if folder is not None else None
    if path is not None and path.exists():
        text = path.read_text().strip()
        if len(text) != 64 or any(c not in "0123456789abcdef" for c in text):
            raise InputError(
                f"{BLINDING_KEY} must hold the 64 hexadecimal digits a run wrote, got "
                f"{len(text)} characters (restore it, or delete it for a new blinding)",
                str(path),
            )
        return bytes.fromhex(text)
    return secrets.token_bytes(32)


def cosmography_json(res, provenance: dict | None = None) -> dict:
    """``cosmography.json``: the population posterior, the lenses, the sampler, the blinding."""
    pop = res.population
    return {
        "blinded": res.blinded,
        "blinding_key_sha256": res.blinding_key_sha256,
        "population": {
            "anisotropy": pop.anisotropy,
            "lambda_int": "inferred" if pop.lambda_int else "fixed at 1",
            "Om0": list(pop.om0) if pop.om0_free else float(pop.om0),
            "cosmology": pop.describe_cosmology(),
            "priors": {
                p.name: {"lower": p.lower, "upper": p.upper, "gaussian": p.gaussian}
                for p in pop.parameters()
            },
        },
        "parameters": res.parameters,
        "H0_width_percent": 50.0 * (res.h0["p84"] - res.h0["p16"]) / res.h0["median"],
        "orbits_side_by_side": [alt.as_dict() for alt in res.orbit_alternatives],
        "lenses": [
            {
                "name": lens.name,
                "n_delays": lens.n_delays,
                "kinematics": lens.has_kinematics,
                "kappa_ext_prior": list(lens.kappa_prior),
                "H0_alone": lens.h0,
                "time_delay_distance_mpc": lens.time_delay_distance_mpc,
                "dispersion_measured": _listed(lens.dispersion_measured),
                "dispersion_error": _listed(lens.dispersion_error),
                "dispersion_predicted": _listed(lens.dispersion_predicted),
                "dispersion_rings_arcsec": [list(r) for r in lens.rings],
                "notes": list(lens.notes),
            }
            for lens in res.lenses
        ],
        "sampler": {
            "walkers": res.chain.walkers,
            "steps": res.chain.steps,
            "burn_in": res.chain.burn,
            "acceptance": res.chain.acceptance,
            "autocorrelation_steps": dict(
                zip(res.chain.names, map(float, res.chain.autocorrelation))
            ),
            "draws_per_lens": res.settings["draws_per_lens"],
            "seed": res.settings["seed"],
        },
        "notes": list(res.notes),
        "cautions": CAUTION,
        "provenance": provenance,
    }


def _blinded(res, text: str) -> list[str]:
    return [text, "BLINDED: H0 and D_dt carry a hidden factor"] if res.blinded else [text]


def _listed(values):
    """A per-aperture tuple as a JSON list (None stays None)."""
    return None if values is None else list(values)


def lenses_table(res) -> Table:
    """One row per lens: its own H0 and D_Δt quantiles (dispersions: dispersions_table)."""
    rows = []
    for lens in res.lenses:
        row = {
            "name": lens.name,
            "n_delays": lens.n_delays,
            "kinematics": lens.has_kinematics,
            "n_apertures": 0 if lens.dispersion_measured is None else len(lens.dispersion_measured),
        }
        for key, q in (("h0", lens.h0), ("ddt", lens.time_delay_distance_mpc)):
            for k in ("median", "p16", "p84"):
                row[f"{key}_{k}"] = np.nan if q is None else q[k]
        rows.append(row)
    t = table_with_gaps(rows)
    for c in t.colnames:
        if c.startswith("h0_"):
            t[c].unit = "km / (Mpc s)"
        elif c.startswith("ddt_"):
            t[c].unit = "Mpc"
    t.meta["comments"] = _blinded(
        res,
        "lensdelay joint H0: per lens, its own H0 and D_dt (other population parameters at "
        "the joint medians); its dispersions are in cosmography_dispersions.ecsv; " + CAUTION,
    )
    t.meta["blinding_key_sha256"] = res.blinding_key_sha256
    return t


def dispersions_table(res) -> Table:
    """One row per lens and aperture: measured dispersion, error and the predicted one.

    ``r_inner`` and ``r_outer`` give a ring of resolved kinematics (NaN for a slit or a
    circle); the prediction applies the population's medians to the lens's own draws.
    """
    rows = []
    for lens in res.lenses:
        if lens.dispersion_measured is None:
            continue
        rings = lens.rings or [(np.nan, np.nan)] * len(lens.dispersion_measured)
        for b, (measured, error, predicted, (inner, outer)) in enumerate(
            zip(lens.dispersion_measured, lens.dispersion_error, lens.dispersion_predicted, rings)
        ):
            row = {"name": lens.name, "aperture": b, "r_inner": inner, "r_outer": outer}
            row |= {"sigma_meas": measured, "sigma_meas_err": error}
            row |= {f"sigma_pred_{k}": predicted[k] for k in ("median", "p16", "p84")}
            rows.append(row)
    columns = ["name", "aperture", "r_inner", "r_outer", "sigma_meas", "sigma_meas_err"]
    columns += ["sigma_pred_median", "sigma_pred_p16", "sigma_pred_p84"]
    t = (
        Table(rows=[[r[c] for c in columns] for r in rows], names=columns)
        if rows
        else Table(names=columns, dtype=[str, int, float, float, float, float, float, float, float])
    )
    for c in ("r_inner", "r_outer"):
        t[c].unit = "arcsec"
    for c in t.colnames:
        if c.startswith("sigma_"):
            t[c].unit = "km / s"
    t.meta["comments"] = _blinded(
        res,
        "lensdelay joint H0: per lens and aperture (a slit or circle: one row; resolved "
        "kinematics: one per ring, radii in arcsec), the measured dispersion and the one "
        "the population's medians predict from the lens's own posterior; " + CAUTION,
    )
    t.meta["blinding_key_sha256"] = res.blinding_key_sha256
    return t


def samples_table(res) -> Table:
    """The population's posterior samples (evenly thinned to at most MAX_SAMPLE_ROWS)."""
    samples = res.chain.samples
    step = max(1, int(np.ceil(len(samples) / MAX_SAMPLE_ROWS)))
    t = Table(samples[::step], names=list(res.chain.names))
    t["H0"].unit = "km / (Mpc s)"
    t.meta["comments"] = _blinded(res, "lensdelay joint H0: posterior samples after burn-in")
    t.meta["blinding_key_sha256"] = res.blinding_key_sha256
    return t
