"""Forecast results as files and text: forecast.json, forecast.ecsv, forecast.ics, summary."""

from __future__ import annotations

import datetime as _dt
import io

import icalendar
import numpy as np
from astropy import units as u
from astropy.table import Table

from lensdelay.dates import allows_far_dates, iso_utc
from lensdelay.model.cosmology import describe_cosmology
from lensdelay.cautions import CAUTION
from lensdelay.inference.summaries import quantile_summary
from lensdelay.forecast.result import STATUS_MEANINGS

__all__ = [
    "H0_TABLE",
    "image_record",
    "dates_by_h0",
    "forecast_json",
    "forecast_table",
    "table_with_gaps",
    "table_text",
    "ics_windows",
    "forecast_ics",
]


@allows_far_dates
def _family_redshift(res, family) -> dict:
    """A family's redshift: the measured number, or (free) its bounds and posterior.

    The posterior is that of the most probable model (null when it was not sampled).
    """
    if not family.redshift_free:
        return {"redshift": float(family.redshift)}
    p = family.redshift_parameter
    out = {"redshift": None, "redshift_bounds": [p.min, p.max], "redshift_posterior": None}
    name = f"redshift[{family.label}]"
    if len(res.chains):
        chain = res.chains[int(np.argmax(res.model_weights))]
        if chain is not None and name in chain.names:
            out["redshift_posterior"] = quantile_summary(
                chain.samples()[:, chain.names.index(name)]
            )
    return out


#: H0 values (km/s/Mpc) at which dates are also given, beside the marginalised ones: the
#: early-universe and distance-ladder values and the middle (common practice in
#: published forecasts of cluster-lensed supernovae).
H0_TABLE = (67.0, 70.0, 73.0)


def dates_by_h0(res, im) -> dict:
    """ISO date quantiles of an image had H0 been fixed at each of :data:`H0_TABLE`."""
    h_ref = float(res.cosmology.H0.to_value("km / (Mpc s)"))
    table = im.dates_at_h0(H0_TABLE, h_ref)
    return {f"{h0:g}": {k: iso_utc(im.instant(v)) for k, v in q.items()} for h0, q in table.items()}


def image_record(res, im) -> dict:
    """One image of ``forecast.json`` (CONVENTIONS.md's fields, plus details), JSON-ready.

    The text and HTML reports draw their image tables from these records.
    """
    entry = {
        k: getattr(im, k)
        for k in (
            "family",
            "label",
            "observed",
            "x",
            "y",
            "parity",
            "arrival_rank",
            "delay_days",
            "magnification",
            "magnitude",
        )
    }
    entry["ra_deg"], entry["dec_deg"] = im.ra, im.dec
    entry["position_error"] = [e.as_dict() for e in im.position_error]
    entry["date"] = im.dates_iso()
    entry["date_mjd"] = im.dates_mjd()
    entry["date_by_H0"] = dates_by_h0(res, im)
    entry.update(
        {
            k: getattr(im, k)
            for k in (
                "status",
                "order",
                "order_agreement",
                "parity_agreement",
                "rank_agreement",
                "exists_fraction",
                "fainter_than_depth",
                "per_model",
                "model_spread_days",
                "interval95_change",
                "sighted",
            )
        }
    )
    entry["tension"] = None if im.tension is None else im.tension.as_dict()
    entry["flag"] = list(im.flags)
    arch = im.archival_span()
    entry["archival_search"] = None if arch is None else {"from": arch[0], "to": arch[1]}
    if im.observability is not None:
        entry["observability"] = im.observability
    return entry


def forecast_json(res) -> dict:
    """``forecast.json`` as CONVENTIONS.md defines it, plus provenance and details."""
    sc, st = res.scenario, res.settings
    tr = sc.transient
    images = [image_record(res, im) for im in res.images]
    doc = {
        "scenario": {
            "name": sc.name,
            "lens_redshift": float(sc.lens_redshift),
            "families": [
                {
                    "label": f.label,
                    **_family_redshift(res, f),
                    "images": [
                        {"label": o.label, "x": o.x, "y": o.y, "sigma": o.sigma} for o in f.images
                    ],
                }
                for f in sc.families
            ],
        },
        "reference_image": tr.seen_in,
        "reference_family": tr.family,
        "cosmology": describe_cosmology(res.cosmology),
        "seed": st.seed,
        "images": images,
        "sky_origin": None
        if sc.sky is None
        else {"ra_deg": float(sc.sky.ra.deg), "dec_deg": float(sc.sky.dec.deg), "frame": "icrs"},
        "now": iso_utc(res.now),
        "now_mjd": float(res.now.utc.mjd),
        "detection": {
            "date": iso_utc(tr.date),
            "mjd": float(tr.date.utc.mjd),
            "date_sigma_days": tr.date_sigma_days,
            "magnitude": tr.magnitude,
        },
        "priors": {
            "H0": list(st.h0_prior) if st.h0_prior else "fixed to the cosmology",
            "H0_used": res.h0_used if np.ndim(res.h0_used) == 0 else list(res.h0_used),
            "kappa_ext": list(st.kappa_ext),
            "microlensing_mag": st.microlensing_mag,
            "unseen_perturbers": (
                st.perturbers.as_dict()
                if st.perturbers is not None and st.perturbers.active
                else None
            ),
            "depth_mag": st.depth,
            "mass_model": st.model_prior,
        },
        "samples": st.n_samples,
        "timing": res.timing.as_dict(),
        "models": [
            {
                "label": label,
                "bic": float(f.bic),
                "weight": float(w),
                "weight_positions_only": float(wp),
                "chi2": float(f.chi2),
                "dof": int(f.dof),
                "quality": f.quality(),
                "notes": list(notes),
            }
            for label, f, w, wp, notes in zip(
                res.model_labels,
                res.fits,
                res.model_weights,
                res.model_weights_positions,
                res.model_notes,
            )
        ],
        "model_weighting": st.weighting,
        "site": None
        if res.site is None
        else vars(res.site) | {"solar_elongation": list(res.site.solar_elongation)},
        "statuses": STATUS_MEANINGS,
        "notes": list(res.notes),
        "cautions": CAUTION,
        "provenance": res.provenance,
    }
    if res.budget is not None:
        doc["budget"] = res.budget
    return doc


def forecast_table(res) -> Table:
    """One row per image (ECSV)."""
    rows = []
    for im in res.images:
        d = im.dates_iso()
        mjd = im.dates_mjd()
        row = {
            "family": im.family,
            "label": im.label,
            "observed": im.observed,
            "status": im.status,
            "x": im.x,
            "y": im.y,
            "parity": im.parity,
            "arrival_rank": im.arrival_rank,
            "ra": np.nan if im.ra is None else im.ra,
            "dec": np.nan if im.dec is None else im.dec,
        }
        for e in im.position_error:
            row[f"ellipse{e.level}_semi_major"] = e.semi_major
            row[f"ellipse{e.level}_semi_minor"] = e.semi_minor
            row[f"ellipse{e.level}_position_angle"] = e.position_angle
        for k in ("median", "p16", "p84", "p2.5", "p97.5"):
            row[f"delay_{k}"] = im.delay_days[k]
        for k in ("median", "p2.5", "p16", "p84", "p97.5"):
            row[f"date_{k}"] = d[k]
        for k in ("median", "p2.5", "p16", "p84", "p97.5"):
            row[f"mjd_{k}"] = mjd[k]
        mag = im.magnitude or {}
        row["magnitude_median"] = mag.get("median", np.nan)
        row["magnitude_p16"] = mag.get("p16", np.nan)
        row["magnitude_p84"] = mag.get("p84", np.nan)
        row["mu_median"] = im.magnification["median"]
        row["p_observable"] = (im.observability or {}).get("probability_observable", np.nan)
        tension = im.tension
        row["tension_sigma"] = tension.sigma if tension is not None else np.nan
        rows.append(row)
    t = table_with_gaps(rows)
    for c in t.colnames:
        if c in ("x", "y") or c.endswith(("_semi_major", "_semi_minor")):
            t[c].unit = u.arcsec
        elif c in ("ra", "dec") or c.endswith("_position_angle"):
            t[c].unit = u.deg
    for c in t.colnames:
        if c.startswith(("delay_", "mjd_")):
            t[c].unit = u.day
    t.meta["comments"] = [
        "lensdelay forecast; delays relative to the image the transient was seen in "
        "(positive = later); mjd_* are UTC MJD; ra, dec ICRS; ellipseNN_*: the NN% position "
        "error ellipse (position angle of the major axis, East of North)",
        CAUTION,
    ]
    t.meta["reference_image"] = res.scenario.transient.seen_in
    t.meta["now"] = iso_utc(res.now)
    return t


def table_with_gaps(rows: list[dict]) -> Table:
    """A table of ``rows`` whose missing values (NaN) are masked.

    A value that does not exist (no site, no magnitude, no sighting, no kinematics) is an
    empty cell in ECSV and null in JSON -- never a NaN.
    """
    t = Table(rows=rows, masked=True)
    for c in t.colnames:
        if t[c].dtype.kind == "f":
            t[c].mask = ~np.isfinite(np.asarray(t[c], dtype=float))
    return t


def table_text(table: Table) -> str:
    """An astropy table as ECSV text."""
    buf = io.StringIO()
    table.write(buf, format="ascii.ecsv")
    return buf.getvalue()


def ics_windows(res, im) -> list[tuple[_dt.date, _dt.date]]:
    """Observable stretches (first, last day) of an image's 95% window still ahead of now.

    With a site: its observable runs (from the calendar); without one: the window from
    the day of ``now`` on. Nothing for a seen image or a window already over.
    """
    if im.status in ("seen", "past"):
        return []
    if im.observability is not None:
        return [
            (_dt.date.fromisoformat(a), _dt.date.fromisoformat(b))
            for a, b in im.observability["windows_ahead"]
        ]
    lo, hi = im.window_days(95)
    today = res.now.isot[:10]
    start = max(lo, today)
    return [] if start > hi else [(_dt.date.fromisoformat(start), _dt.date.fromisoformat(hi))]


def forecast_ics(res, stamp: _dt.datetime | None = None) -> str:
    """The forecast as iCalendar (RFC 5545, written with the ``icalendar`` package).

    One all-day event per observable stretch of each image's 95% window that is still
    ahead of ``now``.
    """
    sc = res.scenario
    stamp = stamp or res.now.to_datetime().replace(tzinfo=_dt.timezone.utc)
    cal = icalendar.Calendar()
    cal.add("prodid", "-//lensdelay//forecast//EN")
    cal.add("version", "2.0")
    cal.add("calscale", "GREGORIAN")
    for im in res.images:
        lo68, hi68 = im.window_days(68)
        lo95, hi95 = im.window_days(95)
        for k, (start, last) in enumerate(ics_windows(res, im)):
            desc = (
                f"Predicted reappearance of {sc.name} image {im.family}/{im.label} "
                f"({im.parity}). Median {im.median_day()}; 68% window {lo68} to {hi68}; "
                f"95% window {lo95} to {hi95}. "
                f"Delay {im.delay_days['median']:.1f} d after image {sc.transient.seen_in}. "
            )
            if im.observability is not None:
                desc += (
                    f"This event covers observable nights {start} to {last}; "
                    f"P(observable) {im.observability['probability_observable']:.2f}. "
                )
            if im.magnitude:
                desc += f"Expected magnitude {im.magnitude['median']:.1f}. "
            event = icalendar.Event()
            event.add(
                "uid",
                f"{sc.name.replace(' ', '_')}-{im.family}-{im.label}-{k}-"
                f"{res.provenance['input_sha256'][:12]}@lensdelay",
            )
            event.add("dtstamp", stamp)
            event.add("dtstart", start)
            event.add("dtend", last + _dt.timedelta(days=1))  # all-day events end exclusively
            possible = (
                f" (possible image: exists in {100 * im.exists_fraction:.0f}% of the forecast)"
                if im.exists_fraction < 0.95
                else ""
            )
            event.add(
                "summary", f"{sc.name} image {im.family}/{im.label}: in its 95% window{possible}"
            )
            event.add("description", desc + CAUTION)
            event.add("transp", "TRANSPARENT")
            cal.add_component(event)
    return cal.to_ical().decode("utf-8")
