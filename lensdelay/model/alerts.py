"""Survey alerts: one detection each, as CONVENTIONS.md, "Survey alerts", defines them.

Pure data and validation: :func:`alert_from_record` turns one record (a mapping, from an
Avro, CSV or JSON-lines file) into an :class:`Alert`, the field names renamed by a mapping,
or raises :class:`AlertError` naming what is wrong. Reading the files is
:mod:`lensdelay.io.alert_files`' job.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from lensdelay.errors import LensdelayError

__all__ = ["ALERT_FIELDS", "Alert", "AlertError", "alert_from_record"]

#: The default field names, by the meaning the tool gives them.
ALERT_FIELDS = {
    "alert_id": "alert_id",
    "ra": "ra",
    "dec": "dec",
    "mjd": "mjd",
    "mag": "mag",
    "mag_err": "mag_err",
    "flux": "flux",
    "flux_err": "flux_err",
    "band": "band",
    "object_id": "object_id",
}


class AlertError(LensdelayError):
    """A record that is not an alert this tool can use (logged and skipped, never fatal)."""


@dataclass(frozen=True)
class Alert:
    """One detection: where (ICRS degrees), when (UTC MJD), how bright, in which band.

    ``mag`` and ``mag_err`` are None when the record gives a flux instead (``flux``,
    ``flux_err``, in the survey's units); ``object_id`` groups the detections of one
    transient when the survey gives it.
    """

    alert_id: str
    ra: float
    dec: float
    mjd: float
    band: str
    mag: float | None = None
    mag_err: float | None = None
    flux: float | None = None
    flux_err: float | None = None
    object_id: str | None = None


def _number(record, name, field, *, required=True, lo=None, hi=None):
    value = record.get(field)
    if value is None or value == "":
        if required:
            raise AlertError(f"{name} ({field!r}) is required, got nothing")
        return None
    try:
        number = float(value)
    except (TypeError, ValueError) as err:
        raise AlertError(f"{name} ({field!r}) must be a number, got {value!r}") from err
    if not math.isfinite(number):
        raise AlertError(f"{name} ({field!r}) must be finite, got {value!r}")
    if (lo is not None and number < lo) or (hi is not None and number > hi):
        raise AlertError(f"{name} ({field!r}) must lie in [{lo:g}, {hi:g}], got {number:g}")
    return number


def alert_from_record(record, fields: dict | None = None) -> Alert:
    """An :class:`Alert` from one record; ``fields`` renames (meaning -> the record's name).

    A position, a time, a band and an identifier are required, and a magnitude or a flux.
    """
    if not isinstance(record, dict):
        raise AlertError(f"a record must be a mapping of fields, got {type(record).__name__}")
    f = ALERT_FIELDS | (fields or {})
    alert_id = record.get(f["alert_id"])
    if alert_id is None or str(alert_id).strip() == "":
        raise AlertError(f"alert_id ({f['alert_id']!r}) is required, got nothing")
    ra = _number(record, "ra", f["ra"], lo=0.0, hi=360.0)
    dec = _number(record, "dec", f["dec"], lo=-90.0, hi=90.0)
    mjd = _number(record, "mjd", f["mjd"], lo=0.0, hi=1e6)
    band = record.get(f["band"])
    if band is None or str(band).strip() == "":
        raise AlertError(f"band ({f['band']!r}) is required, got nothing")
    mag = _number(record, "mag", f["mag"], required=False, lo=-30.0, hi=40.0)
    mag_err = _number(record, "mag_err", f["mag_err"], required=False, lo=0.0, hi=10.0)
    flux = _number(record, "flux", f["flux"], required=False)
    flux_err = _number(record, "flux_err", f["flux_err"], required=False, lo=0.0)
    if mag is None and flux is None:
        raise AlertError(
            f"a brightness is required: mag ({f['mag']!r}) or flux ({f['flux']!r}), got neither"
        )
    object_id = record.get(f["object_id"])
    return Alert(
        alert_id=str(alert_id),
        ra=ra % 360.0,
        dec=dec,
        mjd=mjd,
        band=str(band),
        mag=mag,
        mag_err=mag_err,
        flux=flux,
        flux_err=flux_err,
        object_id=None if object_id in (None, "") else str(object_id),
    )
