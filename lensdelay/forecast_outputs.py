"""Forecast results as files and text: forecast.json, forecast.ecsv, forecast.ics, summary."""
from __future__ import annotations

import datetime as _dt
import io

import numpy as np
from astropy import units as u
from astropy.table import Table

from .cosmology import describe_cosmology
from .report import CAUTION


def _date_summary(res, im) -> dict:
    """ISO 8601 UTC date-times of the date quantiles."""
    tr = res["scenario"].transient
    return {k: (tr.date + v * u.day).isot[:19] + "Z" for k, v in im["date_offset_days"].items()}


def day_of(iso: str) -> str:
    """The calendar day nearest to an ISO date-time (for display: rounds, not truncates)."""
    t = _dt.datetime.fromisoformat(iso.rstrip("Z")) + _dt.timedelta(hours=12)
    return t.date().isoformat()


def forecast_json(res: dict) -> dict:
    """``forecast.json`` as CONVENTIONS.md defines it, plus provenance and details."""
    sc, st = res["scenario"], res["settings"]
    tr = sc.transient
    images = []
    for im in res["images"]:
        entry = {k: im[k] for k in ("family", "label", "observed", "x", "y", "parity",
                                    "arrival_rank", "delay_days", "magnification", "magnitude")}
        entry["date"] = _date_summary(res, im)
        entry.update({k: im[k] for k in ("status", "parity_agreement", "rank_agreement", "flag",
                                         "exists_fraction", "fainter_than_depth",
                                         "per_model_delay_median", "model_spread_days",
                                         "interval95_shrink")})
        if "observability" in im:
            entry["observability"] = im["observability"]
        images.append(entry)
    doc = {
        "reference_image": tr.seen_in, "reference_family": tr.family,
        "cosmology": describe_cosmology(res["cosmology"]),
        "seed": st.seed, "images": images,
        "detection": {"date": tr.date.isot[:19] + "Z", "date_sigma_days": tr.date_sigma_days,
                      "magnitude": tr.magnitude},
        "priors": {"H0": list(st.h0_prior) if st.h0_prior else "fixed to the cosmology",
                   "kappa_ext": list(st.kappa_ext), "microlensing_mag": st.microlensing_mag,
                   "depth_mag": st.depth, "mass_model": st.model_prior},
        "samples": st.n_samples,
        "updated_on": {lab: {"date": d.isot[:19] + "Z", "sigma_days": s} for lab, (d, s) in st.seen.items()},
        "models": [{"label": m.model_label, "bic": float(m.bic), "weight": float(w),
                    "chi2": float(f.chi2), "dof": int(f.dof), "notes": m.notes}
                   for m, w, f in zip(res["models"], res["model_weights"], res["fits"])],
        "model_weighting": st.weighting,
        "site": None if res["site"] is None else vars(res["site"]) | {
            "solar_elongation": list(res["site"].solar_elongation)},
        "cautions": CAUTION,
        "provenance": res["provenance"],
    }
    if "budget" in res:
        doc["budget"] = res["budget"]
    return doc


def forecast_table(res: dict) -> Table:
    """One row per image (ECSV)."""
    rows = []
    for im in res["images"]:
        d = _date_summary(res, im)
        row = {"family": im["family"], "label": im["label"], "observed": im["observed"],
               "status": im["status"], "x": im["x"], "y": im["y"], "parity": im["parity"],
               "arrival_rank": im["arrival_rank"]}
        for k in ("median", "p16", "p84", "p2.5", "p97.5"):
            row[f"delay_{k}"] = im["delay_days"][k]
        for k in ("median", "p2.5", "p16", "p84", "p97.5"):
            row[f"date_{k}"] = d[k]
        mag = im["magnitude"] or {}
        row["magnitude_median"] = mag.get("median", np.nan)
        row["magnitude_p16"] = mag.get("p16", np.nan)
        row["magnitude_p84"] = mag.get("p84", np.nan)
        row["mu_median"] = im["magnification"]["median"]
        row["p_observable"] = im.get("observability", {}).get("probability_observable", np.nan)
        rows.append(row)
    t = Table(rows=rows)
    for c in ("x", "y"):
        t[c].unit = u.arcsec
    for c in t.colnames:
        if c.startswith("delay_"):
            t[c].unit = u.day
    t.meta["comments"] = ["lensdelay forecast; delays relative to the image the transient was seen in "
                          "(positive = later)", CAUTION]
    t.meta["reference_image"] = res["scenario"].transient.seen_in
    return t


def table_text(table: Table) -> str:
    buf = io.StringIO()
    table.write(buf, format="ascii.ecsv")
    return buf.getvalue()


def _ics_escape(text: str) -> str:
    return text.replace("\\", "\\\\").replace(";", "\\;").replace(",", "\\,").replace("\n", "\\n")


def _fold(line: str) -> str:
    """RFC 5545 §3.1: lines longer than 75 octets are folded with CRLF + space."""
    out, data = [], line.encode("utf-8")
    while len(data) > 75:
        cut = 75 if not out else 74
        while cut > 0 and (data[cut] & 0xC0) == 0x80:   # never split a UTF-8 character
            cut -= 1
        out.append(data[:cut].decode("utf-8"))
        data = data[cut:]
    out.append(data.decode("utf-8"))
    return "\r\n ".join(out)


def forecast_ics(res: dict, now: _dt.datetime | None = None) -> str:
    """iCalendar (RFC 5545): one all-day event per future image over its 68% window."""
    sc = res["scenario"]
    now = now or _dt.datetime.now(_dt.timezone.utc)
    stamp = now.strftime("%Y%m%dT%H%M%SZ")
    lines = ["BEGIN:VCALENDAR", "VERSION:2.0", "PRODID:-//lensdelay//forecast//EN", "CALSCALE:GREGORIAN"]
    for im in res["images"]:
        if im["status"] not in ("future", "uncertain"):
            continue
        d = _date_summary(res, im)
        start = _dt.date.fromisoformat(day_of(d["p16"]))
        end = _dt.date.fromisoformat(day_of(d["p84"])) + _dt.timedelta(days=1)
        desc = (f"Predicted reappearance of {sc.name} image {im['family']}/{im['label']} "
                f"({im['parity']}). Median {day_of(d['median'])}; 68% window {day_of(d['p16'])} to "
                f"{day_of(d['p84'])}; 95% window {day_of(d['p2.5'])} to {day_of(d['p97.5'])}. "
                f"Delay {im['delay_days']['median']:.1f} d after image {sc.transient.seen_in}. ")
        if im.get("magnitude"):
            desc += f"Expected magnitude {im['magnitude']['median']:.1f}. "
        if "observability" in im:
            desc += f"P(observable) {im['observability']['probability_observable']:.2f}. "
        desc += CAUTION
        uid = f"{sc.name}-{im['family']}-{im['label']}-{res['provenance']['input_sha256'][:12]}@lensdelay"
        lines += ["BEGIN:VEVENT", f"UID:{_ics_escape(uid.replace(' ', '_'))}", f"DTSTAMP:{stamp}",
                  f"DTSTART;VALUE=DATE:{start:%Y%m%d}", f"DTEND;VALUE=DATE:{end:%Y%m%d}",
                  "SUMMARY:" + _ics_escape(f"{sc.name} image {im['label']}: 68% window"),
                  f"DESCRIPTION:{_ics_escape(desc)}", "TRANSP:TRANSPARENT", "END:VEVENT"]
    lines.append("END:VCALENDAR")
    return "\r\n".join(_fold(x) for x in lines) + "\r\n"


def forecast_text(res: dict) -> str:
    """The readable terminal summary."""
    sc, st = res["scenario"], res["settings"]
    tr = sc.transient
    h0 = (f"H0 ~ N({st.h0_prior[0]:g}, {st.h0_prior[1]:g}) km/s/Mpc" if st.h0_prior
          else f"H0 = {sc.cosmology.H0.value:g} km/s/Mpc (fixed)")
    lines = [f"Forecast for {sc.name}: transient seen in {tr.family}/{tr.seen_in} on "
             f"{tr.date.isot[:10]} (± {tr.date_sigma_days:g} d)",
             f"{st.n_samples} samples; {h0}; kappa_ext ~ N({st.kappa_ext[0]:g}, {st.kappa_ext[1]:g}); "
             f"microlensing {st.microlensing_mag:g} mag",
             "models: " + ", ".join(f"{m.model_label} (weight {w:.2f})"
                                    for m, w in zip(res["models"], res["model_weights"])), ""]
    head = (f"{'image':<8} {'status':<9} {'date (median)':<13} {'68% window':<23} {'95% window':<23} "
            f"{'delay [d]':>16} {'mag':>6} {'P(obs)':>6}")
    lines += [head, "-" * len(head)]
    for im in res["images"]:
        d = _date_summary(res, im)
        dl = im["delay_days"]
        delay = f"{dl['median']:+.1f} ±{0.5 * (dl['p84'] - dl['p16']):.1f}"
        mag = f"{im['magnitude']['median']:.1f}" if im.get("magnitude") else "—"
        pobs = (f"{im['observability']['probability_observable']:.2f}" if "observability" in im else "—")
        name = f"{im['family']}/{im['label']}" + ("" if im["observed"] else "*")
        lines.append(f"{name:<8} {im['status']:<9} {day_of(d['median']):<13} "
                     f"{day_of(d['p16'])}..{day_of(d['p84']):<11} {day_of(d['p2.5'])}..{day_of(d['p97.5']):<11} "
                     f"{delay:>16} {mag:>6} {pobs:>6}")
    lines.append("(* = predicted, not yet observed)")
    for im in res["images"]:
        for f in im["flag"]:
            lines.append(f"FLAG {im['label']}: {f}")
        if im["status"] == "past":
            lines.append(f"PAST {im['label']}: the event should already have appeared there; search "
                         f"archives between {day_of(_date_summary(res, im)['p2.5'])} and "
                         f"{day_of(_date_summary(res, im)['p97.5'])}")
        if im.get("fainter_than_depth"):
            lines.append(f"FAINT {im['label']}: median magnitude is fainter than the depth {st.depth:g}")
        if im.get("interval95_shrink") is not None:
            lines.append(f"UPDATE {im['label']}: 95% window is {100 * im['interval95_shrink']:.0f}% of "
                         "its width before the new measurements")
        if "observability" in im and im["status"] != "seen":
            ob = im["observability"]
            lines.append(f"SKY {im['label']}: {ob['observable_days_in_95']} of {ob['days_in_95']} days in the "
                         f"95% window are observable from the site")
    for m in res["models"]:
        for n in m.notes:
            lines.append(f"NOTE [{m.model_label}]: {n}")
    lines += ["", CAUTION]
    return "\n".join(lines)
