"""The forecast's images as a region file for image viewers (``sky.reg``)."""

from __future__ import annotations

from astropy import units as u

__all__ = ["region_text"]


def region_text(res) -> str:
    """The images as a region file for image viewers, written with the ``regions`` package.

    Observed images are points; predicted images their 95% error ellipses (and a point
    at the median). Sky coordinates (ICRS) when the scenario has ``[sky]``, else image
    offsets in arcsec are not expressible and the file is not written (None returned).
    """
    from regions import EllipseSkyRegion, PointSkyRegion, Regions

    if res.scenario.sky is None:
        return None
    shapes = []
    for im in res.images:
        coord = im.coord
        meta = {"text": f"{im.family}/{im.label}{'' if im.observed else '*'}"}
        shapes.append(PointSkyRegion(coord, meta=meta))
        if not im.observed:
            e = im.ellipse(95)
            # regions measures an ellipse's angle from the first axis's direction
            # (North-to-East for sky ellipses: angle 0 along RA); ours is East of North
            shapes.append(
                EllipseSkyRegion(
                    coord,
                    width=2 * max(e.semi_major, 1e-4) * u.arcsec,
                    height=2 * max(e.semi_minor, 1e-4) * u.arcsec,
                    angle=(e.position_angle - 90.0) * u.deg,
                    meta={"text": f"{im.label}* 95%"},
                )
            )
    return Regions(shapes).serialize(format="ds9")
