"""The forecast's finder chart (sky.png / sky.pdf) and its region file (sky.reg).

The chart is drawn on astropy's WCSAxes with a gnomonic (TAN) celestial WCS centred on
the scenario's ``[sky]`` origin, one pixel per arcsec, so that data in pixel
coordinates are offsets: pixel = (−x, y) with x East and y North. The RA/Dec grid is
the WCS's; arcsec offsets from the origin are an overlay in the origin's sky-offset
frame (ticks along the top and right). North is up and East to the left. Without a
``[sky]`` origin the chart is drawn in offsets alone, East still to the left.

Everything is told apart by line style and marker as well as colour, so the chart reads
in greyscale.
"""

from __future__ import annotations

import numpy as np
from astropy.wcs import WCS
from matplotlib.figure import Figure
from matplotlib.patches import Ellipse

from lensdelay.report.figures import MARKERS, PALETTE, styled

__all__ = [
    "CRITICAL_STYLE",
    "CAUSTIC_STYLE",
    "CONTOUR_COLOUR",
    "PREDICTED_COLOUR",
    "OBSERVED_COLOUR",
    "offset_wcs",
    "offset_axes_wcs",
    "finder_chart",
    "LABEL_OFFSETS",
]


#: Line styles and shades of the chart (ours; dark enough for greyscale printing).
CRITICAL_STYLE = {"color": PALETTE[1], "ls": "-", "lw": 1.1}
CAUSTIC_STYLE = {"color": PALETTE[1], "ls": (0, (3, 2)), "lw": 0.9}
CONTOUR_COLOUR = "0.55"
PREDICTED_COLOUR = PALETTE[0]
OBSERVED_COLOUR = "black"


def offset_wcs(origin) -> WCS:
    """A TAN WCS at ``origin`` (SkyCoord), 1″ pixels, RA increasing to the left.

    Pixel (0, 0) (FITS pixel 1, 1) is the origin; pixel x grows to the West.
    """
    w = WCS(naxis=2)
    w.wcs.ctype = ["RA---TAN", "DEC--TAN"]
    w.wcs.crval = [float(origin.ra.deg), float(origin.dec.deg)]
    w.wcs.crpix = [1.0, 1.0]
    w.wcs.cdelt = [-1.0 / 3600.0, 1.0 / 3600.0]
    w.wcs.cunit = ["deg", "deg"]
    w.wcs.radesys = "ICRS"
    return w


def offset_axes_wcs() -> WCS:
    """A linear WCS from :func:`offset_wcs`'s pixels to East and North offsets (arcsec)."""
    w = WCS(naxis=2)
    w.wcs.ctype = ["EAST", "NORTH"]
    w.wcs.crval = [0.0, 0.0]
    w.wcs.crpix = [1.0, 1.0]
    w.wcs.cdelt = [-1.0, 1.0]
    return w


def _window_label(res, im) -> str:
    """'label: 95% first..last' with month and day (the year when it changes)."""
    if im.status == "seen":
        return f"{im.label} (seen)"
    lo, hi = im.window_days(95)
    hi_short = hi[5:] if hi[:4] == lo[:4] else hi
    return f"{im.label}{'' if im.observed else '*'}: {lo}..{hi_short}"


@styled
def finder_chart(res) -> Figure:
    """The finder chart of a forecast (:class:`lensdelay.forecast.result.Forecast`).

    Draws the observed images, the predicted images with their 68% and 95% error
    ellipses, the lens centre, the critical curve and caustic at the transient's
    redshift, arrival-time contours of the transient's source (days after the reference
    image), a scale bar, and each image's 95% date window as its label.
    """
    sc, tr = res.scenario, res.scenario.transient
    view = res.sky_view
    extent = float(view["extent"])
    fig = Figure(figsize=(7.2, 7.0))
    sky = sc.sky
    if sky is not None:
        ax = fig.add_subplot(projection=offset_wcs(sky))
    else:
        ax = fig.add_subplot()
    # data are drawn in pixels = (−x, y): East (x > 0) falls to the left
    ax.set_xlim(-extent, extent)
    ax.set_ylim(-extent, extent)
    ax.set_aspect("equal")

    arrival = view["arrival"]
    days = arrival["days"]
    finite = days[np.isfinite(days)]
    if finite.size:
        # contours over the span of the images' arrival times and a little beyond: the
        # surface climbs steeply outside, where more lines would only hide the images
        medians = [im.delay_days["median"] for im in res.images if im.family == tr.family]
        lo, hi = min(medians), max(medians)
        step = _nice_step(max(hi - lo, 1e-3) / 5.0)
        levels = np.arange(np.floor(finite.min() / step), np.ceil(finite.max() / step) + 1) * step
        levels = levels[(levels >= lo - 2 * step) & (levels <= hi + 3 * step)]
        if levels.size > 1:
            cs = ax.contour(
                -arrival["x"],
                arrival["y"],
                days,
                levels=levels,
                colors=CONTOUR_COLOUR,
                linewidths=0.6,
            )
            ax.clabel(cs, fontsize=6, fmt=lambda v: f"{v:+.0f} d" if step >= 1 else f"{v:+.1f} d")
            ax.plot([], [], color=CONTOUR_COLOUR, lw=0.6, label=f"arrival time, every {step:g} d")

    fam = next(f for f in view["families"] if f["label"] == tr.family)
    for n, line in enumerate(fam["critical_lines"]):
        ax.plot(-line.x, line.y, **CRITICAL_STYLE, label="critical curve" if n == 0 else None)
        ax.plot(
            -line.caustic_x,
            line.caustic_y,
            **CAUSTIC_STYLE,
            label="caustic" if n == 0 else None,
        )

    if view.get("lens_centre") is not None:
        lx, ly = view["lens_centre"]
        ax.plot(-lx, ly, marker="x", color="0.2", ms=9, mew=1.6, ls="none", label="lens centre")

    ax.plot(
        -np.asarray(fam["x"]),
        fam["y"],
        "+",
        color=OBSERVED_COLOUR,
        ms=12,
        mew=1.4,
        ls="none",
        label="observed image",
    )
    drew_predicted = False
    labels = []
    for im in res.images:
        if im.family != tr.family:
            continue
        if not im.observed:
            for e in im.position_error:
                ax.add_patch(
                    Ellipse(
                        (-im.x, im.y),
                        2 * max(e.semi_major, 1e-4),
                        2 * max(e.semi_minor, 1e-4),
                        # matplotlib angles run counter-clockwise from +pixel x (West);
                        # a position angle runs from North toward East (counter-clockwise
                        # on this chart): from West that is 90° more
                        angle=90.0 + e.position_angle,
                        fill=False,
                        ec=PREDICTED_COLOUR,
                        lw=1.0,
                        ls="-" if e.level == 68 else (0, (2, 1.5)),
                    )
                )
            ax.plot(
                -im.x,
                im.y,
                MARKERS.get(im.parity, "o"),
                mfc="white",
                mec=PREDICTED_COLOUR,
                mew=1.3,
                ms=7,
                ls="none",
                label="predicted image (68%, 95% ellipses)" if not drew_predicted else None,
            )
            drew_predicted = True
        labels.append((-im.x, im.y, _window_label(res, im)))

    _scale_bar(ax, extent)
    if sky is not None:
        ra, dec = ax.coords[0], ax.coords[1]
        ra.set_axislabel("Right ascension (ICRS)")
        dec.set_axislabel("Declination (ICRS)")
        ra.set_major_formatter("hh:mm:ss.ss")
        dec.set_major_formatter("dd:mm:ss.s")
        ra.set_ticklabel(size=7)
        dec.set_ticklabel(size=7)
        ra.set_ticks_position("b")
        dec.set_ticks_position("l")
        ra.set_ticklabel_position("b")
        dec.set_ticklabel_position("l")
        ax.coords.grid(color="0.8", ls=":", lw=0.5)
        # the offsets through a linear WCS: the same numbers as the tangent plane's to
        # far below a pixel at these scales, without a frame transform at every tick
        overlay = ax.get_coords_overlay(offset_axes_wcs())
        east, north = overlay[0], overlay[1]
        for c, pos, label in (
            (east, "t", "East offset [arcsec]"),
            (north, "r", "North offset [arcsec]"),
        ):
            c.set_major_formatter("x")
            c.set_ticks_position(pos)
            c.set_ticklabel_position(pos)
            c.set_axislabel_position(pos)
            c.set_axislabel(label)
            c.set_ticklabel(size=7)
            c.grid(draw_grid=False)
    else:
        # data are in pixels (−x, y): label the ticks with the East offsets themselves
        ticks = ax.get_xticks()
        ax.set_xticks(ticks, [f"{-t:g}" for t in ticks])
        ax.set_xlim(-extent, extent)
        ax.set_xlabel("East offset [arcsec] (East to the left)")
        ax.set_ylabel("North offset [arcsec]")
    _place_labels(fig, ax, labels)  # once the axes' limits are final
    where = "" if sky is not None else "; no [sky] origin: offsets only"
    ax.set_title(
        f"{sc.name}: where each image appears (model {view['model_label']})\n"
        f"North up, East left; labels: 95% date windows (UTC){where}; model-dependent",
        fontsize=8.5,
        pad=30 if sky is not None else 6,
    )
    ax.legend(fontsize=7, loc="lower left", framealpha=0.85)
    return fig


#: Where a label may sit around its image (offset points), tried in this order.
LABEL_OFFSETS = [
    (dx * r, dy * r)
    for r in (1.0, 2.0, 3.2)
    for dx, dy in ((8, 7), (8, -14), (-8, 7), (-8, -14), (0, 12), (0, -18), (14, 0), (-14, 0))
]


def _place_labels(fig, ax, labels) -> None:
    """Annotate each point with its text where it overlaps no label placed before it.

    Greedy: points are labelled from the most crowded outwards; each label takes the
    first offset of LABEL_OFFSETS (near the point first) whose box overlaps no other
    label and no other point, else the offset with the least overlap. A cluster's
    images can lie within arcseconds on a field of minutes, where fixed offsets pile up.
    """
    if not labels:
        return
    canvas = fig.canvas
    if not hasattr(canvas, "get_renderer"):  # a bare Figure: measure text with Agg
        from matplotlib.backends.backend_agg import FigureCanvasAgg

        canvas = FigureCanvasAgg(fig)
    renderer = canvas.get_renderer()
    points = ax.transData.transform(np.array([(x, y) for x, y, _ in labels]))
    gaps = np.hypot(*(points[:, None, :] - points[None, :, :]).transpose(2, 0, 1))
    np.fill_diagonal(gaps, np.inf)
    order = np.argsort(gaps.min(axis=1))
    placed = []
    for k in order:
        x, y, text = labels[k]
        best = None
        for dx, dy in LABEL_OFFSETS:
            note = ax.annotate(
                text,
                (x, y),
                textcoords="offset points",
                xytext=(dx, dy),
                fontsize=7.5,
                ha="left" if dx >= 0 else "right",
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.8},
            )
            box = note.get_window_extent(renderer).expanded(1.05, 1.15)
            overlap = sum(_overlap(box, other) for other in placed) + sum(
                float(box.contains(px, py)) * 50.0 for j, (px, py) in enumerate(points) if j != k
            )
            if best is None or overlap < best[0]:
                if best is not None:
                    best[1].remove()
                best = (overlap, note, box)
            else:
                note.remove()
            if overlap == 0:
                break
        placed.append(best[2])


def _overlap(a, b) -> float:
    """Area (display pixels²) shared by two boxes."""
    w = min(a.x1, b.x1) - max(a.x0, b.x0)
    h = min(a.y1, b.y1) - max(a.y0, b.y0)
    return max(w, 0.0) * max(h, 0.0)


def _nice_step(x: float) -> float:
    """A round contour step (1, 2 or 5 × a power of ten) near ``x``."""
    if not np.isfinite(x) or x <= 0:
        return 1.0
    power = 10 ** np.floor(np.log10(x))
    for m in (1, 2, 5, 10):
        if x <= m * power:
            return float(m * power)
    return float(10 * power)


def _scale_bar(ax, extent: float) -> None:
    """A bar of a round number of arcsec in the lower right corner."""
    length = _nice_step(0.25 * extent)
    x1 = extent * 0.92
    x0 = x1 - length
    y = -extent * 0.9
    ax.plot([x0, x1], [y, y], color="black", lw=2.5, solid_capstyle="butt")
    ax.text(
        0.5 * (x0 + x1), y + 0.03 * extent, f'{length:g}"', ha="center", va="bottom", fontsize=8
    )
