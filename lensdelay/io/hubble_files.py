"""``hubble.json`` and the delay-curve table of ``lensdelay hubble``."""

from __future__ import annotations

import io

from astropy.table import Table

from lensdelay.cautions import CAUTION
from lensdelay.model.cosmology import describe_cosmology

__all__ = ["hubble_json", "curves_table_text"]


def hubble_json(res) -> dict:
    """``hubble.json``: H0 and D_dt summaries, κ_ext comparison, curves, provenance."""
    doc = {
        "cosmology": describe_cosmology(res.scenario.cosmology),
        "kappa_ext": list(res.kappa_ext),
        "Om0_prior": list(res.om0_prior),
        "H0_prior": res.h0_prior_text,
        "H0": res.h0["H0"] if res.h0 is not None else None,
        "D_dt_Mpc": res.h0["D_dt_Mpc"] if res.h0 is not None else None,
        "measured_delays": [vars(d) for d in res.scenario.delays],
        "kappa_ext_comparison": [
            {"kappa_ext": k["kappa_ext"], "H0": k["H0"]} for k in res.kappa_comparison
        ],
        "delay_vs_H0": [r for r in res.curves if r["axis"] == "H0"],
        "delay_vs_other": [r for r in res.curves if r["axis"] != "H0"],
        "fit_quality": res.fit.quality(),
        "joint_fit_quality": res.joint_fit.quality() if res.joint_fit is not None else None,
        "mass_model_prior": res.prior,
        "notes": list(res.notes),
        "cautions": CAUTION,
        "provenance": res.provenance,
    }
    return doc


def curves_table_text(res) -> str:
    """The delay-vs-H0 (and Ωm, w) curves as ECSV text."""
    buf = io.StringIO()
    Table(rows=list(res.curves)).write(buf, format="ascii.ecsv")
    return buf.getvalue()
