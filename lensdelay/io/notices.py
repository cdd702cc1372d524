"""Notices of a matched alert: a JSON notice and the same as IVOA VOEvent 2.0 XML.

A notice answers one alert matched to a watched lens (CONVENTIONS.md, "Survey alerts"):
the alert, the matched lens and image with the match probability, and every image's
position, 68%/95% date windows, expected magnitude and status as of the alert, with
archival advice for images whose window has passed. The JSON notice is built first
(:func:`notice`); the VOEvent (:func:`voevent_xml`) is written from it, so the two never
disagree. Roles: ``first``; ``update`` (more alerts of the same transient: it supersedes
the notices it cites); ``retraction`` (a later alert showed the match wrong). VOEvent
elements follow the IVOA Recommendation "Sky Event Reporting Metadata Version 2.0"
(Seaman et al. 2011); the tests validate every kind against its XML schema.
"""

from __future__ import annotations

import xml.etree.ElementTree as ET

from lensdelay.cautions import CAUTION
from lensdelay.errors import InputError
from lensdelay.version import __version__

__all__ = ["NOTICE_ROLES", "AUTHOR_IVORN", "notice", "voevent_xml"]

#: What a notice can be; a VOEvent cites the earlier notices for the last two.
NOTICE_ROLES = ("first", "update", "retraction")
#: The identifier of the notices' author (a local IVORN: no registry is claimed).
AUTHOR_IVORN = "ivo://lensdelay.local/watch"
_VOEVENT_NS = "http://www.ivoa.net/xml/VOEvent/v2.0"
_CITE = {"update": "supersedes", "retraction": "retraction"}


def _image(record: dict) -> dict:
    """One image of the notice from forecast.json's record."""
    date = record["date"]
    mag = record.get("magnitude")
    return {
        "image": f"{record['family']}/{record['label']}",
        "observed": record["observed"],
        "status": record["status"],
        "ra_deg": record.get("ra_deg"),
        "dec_deg": record.get("dec_deg"),
        "position_error": record.get("position_error", []),
        "median_date": date["median"],
        "window68": [date["p16"], date["p84"]],
        "window95": [date["p2.5"], date["p97.5"]],
        "magnitude": None if not mag else mag["median"],
        "archival_search": record.get("archival_search"),
    }


def notice(
    *,
    role: str,
    sequence: int,
    issued: str,
    alert,
    assignment,
    forecast: dict | None,
    transient: str,
    cites=(),
    reason: str | None = None,
) -> dict:
    """The JSON notice of a matched alert.

    Parameters
    ----------
    role : str
        ``first``, ``update`` or ``retraction``.
    sequence : int
        The notice's number for this transient (1 for the first).
    issued : str
        ISO 8601 UTC date-time of issue.
    alert : lensdelay.model.alerts.Alert
    assignment : lensdelay.forecast.watchlist.Assignment
    forecast : dict or None
        forecast.json of the lens with this alert (None for a retraction).
    transient : str
        The transient's name within the watch (the survey's object id, or the first alert's).
    cites : sequence of str
        IVORNs of the notices an update supersedes or a retraction retracts.
    reason : str, optional
        Why a retraction retracts.
    """
    if role not in NOTICE_ROLES:
        raise InputError(f"role must be one of {', '.join(NOTICE_ROLES)}, got {role!r}")
    if role != "first" and not cites:
        raise InputError(f"cites must name the notices an {role} follows, got none")
    if role != "retraction" and forecast is None:
        raise InputError(f"forecast is required for a {role} notice, got nothing")
    lens = assignment.lens
    doc = {
        "kind": "lensdelay notice",
        "version": __version__,
        "ivorn": f"{AUTHOR_IVORN}#{lens}/{transient}/{sequence}",
        "role": role,
        "sequence": sequence,
        "cites": list(cites),
        "issued": issued,
        "transient": transient,
        "alert": {
            "alert_id": alert.alert_id,
            "ra_deg": alert.ra,
            "dec_deg": alert.dec,
            "mjd": alert.mjd,
            "band": alert.band,
            "mag": alert.mag,
            "mag_err": alert.mag_err,
            "flux": alert.flux,
            "flux_err": alert.flux_err,
            "object_id": alert.object_id,
        },
        "lens": lens,
        "match": {
            "image": assignment.image,
            "probability": assignment.probability,
            "probabilities": dict(assignment.probabilities),
            "offset_arcsec": list(assignment.offset),
        },
        "images": [] if forecast is None else [_image(r) for r in forecast["images"]],
        "reason": reason,
        "caution": CAUTION,
    }
    return doc


def _param(parent, name: str, value, unit=None, ucd=None, data_type=None):
    if value is None:
        return
    attrs = {"name": name, "value": str(value)}
    if unit:
        attrs["unit"] = unit
    if ucd:
        attrs["ucd"] = ucd
    if data_type or isinstance(value, float):
        attrs["dataType"] = data_type or "float"
    ET.SubElement(parent, "Param", attrs)


def voevent_xml(doc: dict, alert_error_deg: float = 1e-4) -> bytes:
    """The notice as VOEvent 2.0 XML (UTF-8 bytes), from its JSON form."""
    root = ET.Element(
        f"{{{_VOEVENT_NS}}}VOEvent",
        {"version": "2.0", "ivorn": doc["ivorn"], "role": "prediction"},
    )
    who = ET.SubElement(root, "Who")
    ET.SubElement(who, "AuthorIVORN").text = AUTHOR_IVORN
    ET.SubElement(who, "Date").text = doc["issued"]
    author = ET.SubElement(who, "Author")
    ET.SubElement(author, "shortName").text = f"lensdelay {doc['version']} watch"
    what = ET.SubElement(root, "What")
    a, m = doc["alert"], doc["match"]
    _param(what, "role", doc["role"])
    _param(what, "transient", doc["transient"])
    _param(what, "alert_id", a["alert_id"])
    _param(what, "band", a["band"])
    _param(what, "mag", a["mag"], "mag", "phot.mag")
    _param(what, "lens", doc["lens"])
    _param(what, "matched_image", m["image"] or "none of its images")
    _param(what, "match_probability", float(m["probability"]))
    for im in doc["images"]:
        group = ET.SubElement(what, "Group", {"name": im["image"], "type": "lensed image"})
        _param(group, "status", im["status"])
        _param(group, "ra", im["ra_deg"], "deg", "pos.eq.ra")
        _param(group, "dec", im["dec_deg"], "deg", "pos.eq.dec")
        _param(group, "median_date", im["median_date"], ucd="time.epoch")
        _param(group, "window68_start", im["window68"][0], ucd="time.start")
        _param(group, "window68_end", im["window68"][1], ucd="time.end")
        _param(group, "window95_start", im["window95"][0], ucd="time.start")
        _param(group, "window95_end", im["window95"][1], ucd="time.end")
        _param(group, "magnitude", im["magnitude"], "mag", "phot.mag")
        if im["archival_search"]:
            _param(group, "archival_search_from", im["archival_search"]["from"])
            _param(group, "archival_search_to", im["archival_search"]["to"])
    if doc["reason"]:
        ET.SubElement(what, "Description").text = doc["reason"]
    where = ET.SubElement(root, "WhereWhen")
    location = ET.SubElement(where, "ObsDataLocation")
    ET.SubElement(location, "ObservatoryLocation", {"id": "GEOLUN"})
    observation = ET.SubElement(location, "ObservationLocation")
    ET.SubElement(observation, "AstroCoordSystem", {"id": "UTC-ICRS-TOPO"})
    coords = ET.SubElement(observation, "AstroCoords", {"coord_system_id": "UTC-ICRS-TOPO"})
    time = ET.SubElement(coords, "Time", {"unit": "s"})
    instant = ET.SubElement(time, "TimeInstant")
    from astropy.time import Time

    ET.SubElement(instant, "ISOTime").text = Time(a["mjd"], format="mjd", scale="utc").isot
    position = ET.SubElement(coords, "Position2D", {"unit": "deg"})
    ET.SubElement(position, "Name1").text = "RA"
    ET.SubElement(position, "Name2").text = "Dec"
    value = ET.SubElement(position, "Value2")
    ET.SubElement(value, "C1").text = repr(float(a["ra_deg"]))
    ET.SubElement(value, "C2").text = repr(float(a["dec_deg"]))
    ET.SubElement(position, "Error2Radius").text = repr(float(alert_error_deg))
    how = ET.SubElement(root, "How")
    ET.SubElement(how, "Description").text = (
        "lensdelay forecast of every image from a lens prepared ahead of the alert"
    )
    why = ET.SubElement(root, "Why", {"importance": "0.5"})
    inference = ET.SubElement(
        why, "Inference", {"probability": f"{min(max(m['probability'], 0.0), 1.0):.6f}"}
    )
    ET.SubElement(inference, "Name").text = doc["lens"]
    ET.SubElement(inference, "Concept").text = "gravitationally lensed transient"
    if doc["cites"]:
        citations = ET.SubElement(root, "Citations")
        for ivorn in doc["cites"]:
            ET.SubElement(citations, "EventIVORN", {"cite": _CITE[doc["role"]]}).text = ivorn
        ET.SubElement(citations, "Description").text = doc["reason"] or doc["role"]
    ET.SubElement(root, "Description").text = doc["caution"]
    ET.register_namespace("voe", _VOEVENT_NS)
    return ET.tostring(root, encoding="utf-8", xml_declaration=True)
