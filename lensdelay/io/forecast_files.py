"""Forecast results as files and text: forecast.json, forecast.ecsv, forecast.ics, summary."""
from __future__ import annotations

import datetime as _dt
import io

import numpy as np
from astropy import units as u
from astropy.table import Table

from lensdelay.model.cosmology import describe_cosmology
from lensdelay.report.text import CAUTION

#: What each status means (README: "Statuses"); printed under the table.
STATUS_MEANINGS = {
    "seen": "the event was observed in this image (the detection or a reported sighting)",
    "past": "its whole 95% window is over as of now: search archives",
    "uncertain": "fewer than 95% of samples agree whether it leads or trails the reference image",
    "now": "now lies inside its 95% window: observe",
    "future": "its whole 95% window lies ahead",
}

TENSION_CAUSES = ("a mass model too simple for this lens, a nearby galaxy or group not in the model, "
                  "microlensing distorting the light curve, or a wrong image identification")


def _instant(res, offset_days: float):
    return res["scenario"].transient.date + offset_days * u.day


def _iso(t) -> str:
    return t.isot[:19] + "Z"


def date_summary(res, im) -> dict:
    """ISO 8601 UTC date-times of the date quantiles."""
    return {k: _iso(_instant(res, v)) for k, v in im["date_offset_days"].items()}


def mjd_summary(res, im) -> dict:
    """The same quantiles as MJD (UTC)."""
    return {k: float(_instant(res, v).utc.mjd) for k, v in im["date_offset_days"].items()}


def day_of(iso: str) -> str:
    """The calendar day (UTC) that contains an instant.

    Window ends are shown as the days that contain them, so a shown window always
    contains the computed one (rounded outward): a 68% window starting
    2027-02-10T16:24 starts on 02-10.
    """
    return iso[:10]


def median_day(iso: str) -> str:
    """The calendar day nearest to an instant (a point estimate, not a window end)."""
    t = _dt.datetime.fromisoformat(iso.rstrip("Z")) + _dt.timedelta(hours=12)
    return t.date().isoformat()


def _window_days(res, im, lo_key, hi_key) -> tuple[str, str]:
    d = date_summary(res, im)
    return day_of(d[lo_key]), day_of(d[hi_key])


def forecast_json(res: dict) -> dict:
    """``forecast.json`` as CONVENTIONS.md defines it, plus provenance and details."""
    sc, st = res["scenario"], res["settings"]
    tr = sc.transient
    images = []
    for im in res["images"]:
        entry = {k: im[k] for k in ("family", "label", "observed", "x", "y", "parity",
                                    "arrival_rank", "delay_days", "magnification", "magnitude")}
        entry["date"] = date_summary(res, im)
        entry["date_mjd"] = mjd_summary(res, im)
        entry.update({k: im[k] for k in ("status", "order", "order_agreement", "parity_agreement",
                                         "rank_agreement", "flag", "exists_fraction", "fainter_than_depth",
                                         "per_model", "model_spread_days", "interval95_change",
                                         "sighted", "tension")})
        arch = im.get("archival_search")
        entry["archival_search"] = None if arch is None else {
            "from": _iso(_instant(res, arch["from_offset"])), "to": _iso(_instant(res, arch["to_offset"]))}
        if "observability" in im:
            entry["observability"] = im["observability"]
        images.append(entry)
    doc = {
        "reference_image": tr.seen_in, "reference_family": tr.family,
        "cosmology": describe_cosmology(res["cosmology"]),
        "seed": st.seed, "images": images,
        "now": _iso(res["now"]), "now_mjd": float(res["now"].utc.mjd),
        "detection": {"date": _iso(tr.date), "mjd": float(tr.date.utc.mjd),
                      "date_sigma_days": tr.date_sigma_days, "magnitude": tr.magnitude},
        "priors": {"H0": list(st.h0_prior) if st.h0_prior else "fixed to the cosmology",
                   "H0_used": res["h0_used"] if np.ndim(res["h0_used"]) == 0 else list(res["h0_used"]),
                   "kappa_ext": list(st.kappa_ext), "microlensing_mag": st.microlensing_mag,
                   "depth_mag": st.depth, "mass_model": st.model_prior},
        "samples": st.n_samples,
        "timing": res["timing"],
        "models": [{"label": label, "bic": float(f.bic), "weight": float(w), "weight_positions_only": float(wp),
                    "chi2": float(f.chi2), "dof": int(f.dof), "notes": notes}
                   for label, f, w, wp, notes in zip(res["model_labels"], res["fits"], res["model_weights"],
                                                     res["model_weights_positions"], res["model_notes"])],
        "model_weighting": st.weighting,
        "site": None if res["site"] is None else vars(res["site"]) | {
            "solar_elongation": list(res["site"].solar_elongation)},
        "statuses": STATUS_MEANINGS,
        "notes": res.get("notes", []),
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
        d = date_summary(res, im)
        mjd = mjd_summary(res, im)
        row = {"family": im["family"], "label": im["label"], "observed": im["observed"],
               "status": im["status"], "x": im["x"], "y": im["y"], "parity": im["parity"],
               "arrival_rank": im["arrival_rank"]}
        for k in ("median", "p16", "p84", "p2.5", "p97.5"):
            row[f"delay_{k}"] = im["delay_days"][k]
        for k in ("median", "p2.5", "p16", "p84", "p97.5"):
            row[f"date_{k}"] = d[k]
        for k in ("median", "p2.5", "p16", "p84", "p97.5"):
            row[f"mjd_{k}"] = mjd[k]
        mag = im["magnitude"] or {}
        row["magnitude_median"] = mag.get("median", np.nan)
        row["magnitude_p16"] = mag.get("p16", np.nan)
        row["magnitude_p84"] = mag.get("p84", np.nan)
        row["mu_median"] = im["magnification"]["median"]
        row["p_observable"] = im.get("observability", {}).get("probability_observable", np.nan)
        tension = im.get("tension")
        row["tension_sigma"] = tension["sigma"] if tension else np.nan
        rows.append(row)
    t = Table(rows=rows)
    for c in ("x", "y"):
        t[c].unit = u.arcsec
    for c in t.colnames:
        if c.startswith(("delay_", "mjd_")):
            t[c].unit = u.day
    t.meta["comments"] = ["lensdelay forecast; delays relative to the image the transient was seen in "
                          "(positive = later); mjd_* are UTC MJD", CAUTION]
    t.meta["reference_image"] = res["scenario"].transient.seen_in
    t.meta["now"] = _iso(res["now"])
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


def ics_windows(res: dict, im: dict) -> list[tuple[_dt.date, _dt.date]]:
    """Observable stretches (first, last day) of an image's 95% window still ahead of now.

    With a site: its observable runs (from the calendar); without one: the window from
    the day of ``now`` on. Nothing for a seen image or a window already over.
    """
    if im["status"] in ("seen", "past"):
        return []
    if "observability" in im:
        return [(_dt.date.fromisoformat(a), _dt.date.fromisoformat(b))
                for a, b in im["observability"]["windows_ahead"]]
    lo, hi = _window_days(res, im, "p2.5", "p97.5")
    today = res["now"].isot[:10]
    start = max(lo, today)
    return [] if start > hi else [(_dt.date.fromisoformat(start), _dt.date.fromisoformat(hi))]


def forecast_ics(res: dict, stamp: _dt.datetime | None = None) -> str:
    """iCalendar (RFC 5545): one all-day event per observable stretch of each image's
    95% window that is still ahead of ``now``."""
    sc = res["scenario"]
    stamp = stamp or res["now"].to_datetime().replace(tzinfo=None)
    lines = ["BEGIN:VCALENDAR", "VERSION:2.0", "PRODID:-//lensdelay//forecast//EN", "CALSCALE:GREGORIAN"]
    for im in res["images"]:
        d = date_summary(res, im)
        for k, (start, last) in enumerate(ics_windows(res, im)):
            desc = (f"Predicted reappearance of {sc.name} image {im['family']}/{im['label']} "
                    f"({im['parity']}). Median {median_day(d['median'])}; 68% window {day_of(d['p16'])} to "
                    f"{day_of(d['p84'])}; 95% window {day_of(d['p2.5'])} to {day_of(d['p97.5'])}. "
                    f"Delay {im['delay_days']['median']:.1f} d after image {sc.transient.seen_in}. ")
            if "observability" in im:
                desc += (f"This event covers observable nights {start} to {last}; "
                         f"P(observable) {im['observability']['probability_observable']:.2f}. ")
            if im.get("magnitude"):
                desc += f"Expected magnitude {im['magnitude']['median']:.1f}. "
            desc += CAUTION
            uid = (f"{sc.name}-{im['family']}-{im['label']}-{k}-"
                   f"{res['provenance']['input_sha256'][:12]}@lensdelay")
            lines += ["BEGIN:VEVENT", f"UID:{_ics_escape(uid.replace(' ', '_'))}",
                      f"DTSTAMP:{stamp:%Y%m%dT%H%M%SZ}",
                      f"DTSTART;VALUE=DATE:{start:%Y%m%d}",
                      f"DTEND;VALUE=DATE:{last + _dt.timedelta(days=1):%Y%m%d}",
                      "SUMMARY:" + _ics_escape(f"{sc.name} image {im['family']}/{im['label']}: "
                                               "in its 95% window"),
                      f"DESCRIPTION:{_ics_escape(desc)}", "TRANSP:TRANSPARENT", "END:VEVENT"]
    lines.append("END:VCALENDAR")
    return "\r\n".join(_fold(x) for x in lines) + "\r\n"


def _h0_text(res) -> str:
    st = res["settings"]
    if st.h0_prior:
        return f"H0 ~ N({st.h0_prior[0]:g}, {st.h0_prior[1]:g}) km/s/Mpc"
    cosmo = res["cosmology"]
    name = f", {cosmo.name}" if getattr(cosmo, "name", None) else ""
    return f"H0 = {float(cosmo.H0.value):g} km/s/Mpc (fixed{name})"


def forecast_text(res: dict) -> str:
    """The readable terminal summary."""
    sc, st = res["scenario"], res["settings"]
    tr = sc.transient
    lines = [f"Forecast for {sc.name}: transient seen in {tr.family}/{tr.seen_in} on "
             f"{tr.date.isot[:10]} (± {tr.date_sigma_days:g} d); as of {res['now'].isot[:16]}Z",
             f"{st.n_samples} samples; {_h0_text(res)}; kappa_ext ~ N({st.kappa_ext[0]:g}, "
             f"{st.kappa_ext[1]:g}); microlensing {st.microlensing_mag:g} mag"]
    timing = res["timing"]
    for s in timing["sightings"]:
        lines.append(f"sighting: {s['family']}/{s['image']} on {s['date'][:16]}Z ± {s['sigma_days']:g} d"
                     + ("" if s["sigma_source"] == "given" else " (default sigma)"))
    for d in timing["delays"]:
        lines.append(f"measured delay: {d['family']}/{d['image']} - {d['relative_to']} = "
                     f"{d['days']:g} ± {d['sigma']:g} d")
    for m in timing["models"]:
        if m["route"] == "reweight":
            lines.append(f"update [{m['label']}]: importance weights, {m['effective_samples']:.0f} effective "
                         f"samples (threshold {timing['min_effective_samples']:.0f})")
        elif m["route"] == "resample":
            lines.append(f"update [{m['label']}]: posterior sampled again with the measurements "
                         f"(re-weighting would have left {m['importance_effective_samples']:.0f}); about "
                         f"{m['effective_samples']:.0f} independent samples")
    lines.append("")
    head = (f"{'image':<8} {'status':<9} {'date (median)':<13} {'68% window':<23} {'95% window':<23} "
            f"{'delay [d]':>16} {'mag':>6} {'P(obs)':>6}")
    lines += [head, "-" * len(head)]
    for im in res["images"]:
        d = date_summary(res, im)
        dl = im["delay_days"]
        delay = f"{dl['median']:+.1f} ±{0.5 * (dl['p84'] - dl['p16']):.1f}"
        mag = f"{im['magnitude']['median']:.1f}" if im.get("magnitude") else "—"
        pobs = (f"{im['observability']['probability_observable']:.2f}" if "observability" in im else "—")
        name = f"{im['family']}/{im['label']}" + ("" if im["observed"] else "*")
        lo68, hi68 = _window_days(res, im, "p16", "p84")
        lo95, hi95 = _window_days(res, im, "p2.5", "p97.5")
        lines.append(f"{name:<8} {im['status']:<9} {median_day(d['median']):<13} "
                     f"{lo68}..{hi68:<11} {lo95}..{hi95:<11} {delay:>16} {mag:>6} {pobs:>6}")
    lines.append("(* = predicted, not yet observed; windows include the days that contain their ends)")
    used = sorted({im["status"] for im in res["images"]}, key=list(STATUS_MEANINGS).index)
    for s in used:
        lines.append(f"  {s}: {STATUS_MEANINGS[s]}")
    if len(res["model_labels"]) > 1:
        lines += ["", "per-model median delays [d] (weight):"]
        labels = res["model_labels"]
        lines.append(f"{'image':<8}" + "".join(f"{lab[:18]:>20}" for lab in labels))
        lines.append(f"{'weight':<8}" + "".join(f"{w:>20.2f}" for w in res["model_weights"]))
        for im in res["images"]:
            cells = []
            for lab in labels:
                v = im["per_model"].get(lab, {}).get("delay_median")
                cells.append(f"{v:>20.2f}" if v is not None else f"{'—':>20}")
            lines.append(f"{im['family'] + '/' + im['label']:<8}" + "".join(cells))
    lines.append("")
    for t in timing["tensions"]:
        p = t["predicted"]
        lines.append(f"CHECK {t['measurement']}: measured {t['measured']:+.2f} ± {t['measurement_sigma']:.2f} d, "
                     f"predicted from the positions {p['median']:+.2f} (68%: {p['p16']:+.2f}..{p['p84']:+.2f}); "
                     f"{t['sigma']:+.1f} sigma, p = {t['p_value']:.2g}")
        if t["in_tension"]:
            lines.append(f"WARNING: {t['measurement']} is {abs(t['sigma']):.1f} sigma from the prediction. "
                         f"Usual causes: {TENSION_CAUSES}. The windows above combine the measurement and "
                         "the model as the probability model says; treat them with care.")
    for im in res["images"]:
        for f in im["flag"]:
            lines.append(f"FLAG {im['family']}/{im['label']}: {f}")
        arch = im.get("archival_search")
        if arch is not None:
            a = _iso(_instant(res, arch["from_offset"]))
            b = _iso(_instant(res, arch["to_offset"]))
            lines.append(f"ARCHIVE {im['family']}/{im['label']}: its 95% window starts before the detection; "
                         f"search data taken between {day_of(a)} and {day_of(b)}")
        if im.get("fainter_than_depth"):
            lines.append(f"FAINT {im['family']}/{im['label']}: median magnitude is fainter than the depth "
                         f"{st.depth:g}")
        if im.get("interval95_change") is not None and im["status"] != "seen":
            lines.append(f"UPDATE {im['family']}/{im['label']}: 95% window is "
                         f"{100 * im['interval95_change']:.0f}% of its width before the measurements")
        if "observability" in im and im["status"] not in ("seen", "past"):
            ob = im["observability"]
            lines.append(f"SKY {im['family']}/{im['label']}: {ob['observable_days_in_95']} of "
                         f"{ob['days_in_95']} days in the 95% window are observable from the site")
    for n in res.get("notes", []):
        lines.append(f"NOTE: {n}")
    for label, notes in zip(res["model_labels"], res["model_notes"]):
        for n in notes:
            lines.append(f"NOTE [{label}]: {n}")
    lines += ["", CAUTION]
    return "\n".join(lines)
