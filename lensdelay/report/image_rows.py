"""The cells of a forecast's image table, shared by the terminal text and the HTML report.

Both draw from one record per image, as ``forecast.json`` holds it
(:func:`lensdelay.io.forecast_files.image_record`), so the two tables cannot disagree:
each renderer only picks its columns and lays them out.
"""

from __future__ import annotations

from dataclasses import dataclass

from lensdelay.dates import day_of, median_day

__all__ = ["ImageCells", "image_cells", "sexagesimal"]


@dataclass(frozen=True)
class ImageCells:
    """One image's table cells as plain text (``—`` where a value does not exist).

    Window ends are the calendar days that contain them (:func:`lensdelay.dates.day_of`),
    so a shown window always contains the computed one; the median date is the nearest
    day.
    """

    name: str  # family/label, with * when the image is predicted and not yet observed
    status: str
    median_day: str
    window68: tuple[str, str]
    window95: tuple[str, str]
    delay_68: str  # median ± half the 68% width, days
    delay_95: str  # median [2.5%, 97.5%], days
    magnitude: str
    p_observable: str
    offsets: str  # x, y in arcsec (East, North of the sky origin)
    ra: str
    dec: str
    ellipse95: str
    magnification: str
    parity: str


def image_cells(record: dict) -> ImageCells:
    """The cells of one image from its ``forecast.json`` record."""
    date = record["date"]
    d = record["delay_days"]
    mag = record.get("magnitude")
    obs = record.get("observability") or {}
    p_obs = obs.get("probability_observable")
    ra, dec = sexagesimal(record.get("ra_deg"), record.get("dec_deg"))
    return ImageCells(
        name=f"{record['family']}/{record['label']}" + ("" if record["observed"] else "*"),
        status=record["status"],
        median_day=median_day(date["median"]),
        window68=(day_of(date["p16"]), day_of(date["p84"])),
        window95=(day_of(date["p2.5"]), day_of(date["p97.5"])),
        delay_68=f"{d['median']:+.1f} ±{0.5 * (d['p84'] - d['p16']):.1f}",
        delay_95=f"{d['median']:+.1f} [{d['p2.5']:+.1f}, {d['p97.5']:+.1f}]",
        magnitude="—" if not mag else f"{mag['median']:.1f}",
        p_observable="—" if p_obs is None else f"{p_obs:.2f}",
        offsets=f"{record['x']:+.3f}, {record['y']:+.3f}",
        ra=ra,
        dec=dec,
        ellipse95=_ellipse(record, 95),
        magnification=f"{record['magnification']['median']:+.2f}",
        parity=record["parity"],
    )


def _ellipse(record: dict, level: int) -> str:
    """'a × b mas, PA θ°' of the image's error ellipse at ``level`` percent."""
    for e in record.get("position_error") or []:
        if e["level"] == level:
            return (
                f"{1e3 * e['semi_major_arcsec']:.0f} × {1e3 * e['semi_minor_arcsec']:.0f} mas, "
                f"PA {e['position_angle_deg']:.0f}°"
            )
    return "—"


def sexagesimal(ra_deg, dec_deg) -> tuple[str, str]:
    """RA as h:m:s and Dec as ±d:m:s (em dashes without a sky position)."""
    if ra_deg is None:
        return "—", "—"
    from astropy import units as u
    from astropy.coordinates import Angle

    ra = Angle(ra_deg * u.deg).to_string(unit=u.hourangle, sep=":", precision=3, pad=True)
    dec = Angle(dec_deg * u.deg).to_string(unit=u.deg, sep=":", precision=2, alwayssign=True)
    return ra, dec
