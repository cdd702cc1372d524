"""Figures, kept apart from the computation. Sky views: North up, East left, arcsec."""

from __future__ import annotations

import functools

import matplotlib
import numpy as np
from cycler import cycler
from matplotlib.figure import Figure
from matplotlib.patches import Circle

from lensdelay.dates import far_dates_allowed

__all__ = [
    "MARKERS",
    "PALETTE",
    "FIGURE_STYLE",
    "styled",
    "sky_figure",
    "residual_figure",
    "PARAMETER_WORDS",
    "parameter_label",
    "corner_figure",
    "timeline_figure",
    "budget_figure",
    "CURVE_AXES",
    "MAX_CURVE_ROWS",
    "hubble_curves_figure",
    "h0_figure",
    "light_curves_figure",
]


MARKERS = {"minimum": "o", "saddle": "s", "maximum": "^"}
#: The project's colours (ours; distinct in greyscale by lightness where it matters): ink
#: blue, wine, green, amber, violet, slate.
PALETTE = ("#1f4e9a", "#7a1f3d", "#2e7d4f", "#b35c00", "#5b3f8c", "#4a5563")
#: One look for every figure: fonts and sizes, the palette as the colour cycle.
FIGURE_STYLE = {
    "font.family": "DejaVu Sans",
    "font.size": 9,
    "axes.titlesize": 10,
    "axes.labelsize": 9,
    "xtick.labelsize": 8,
    "ytick.labelsize": 8,
    "legend.fontsize": 7.5,
    "axes.prop_cycle": cycler(color=PALETTE),
}


def styled(make):
    """Build a figure under :data:`FIGURE_STYLE` (a context: nothing global changes)."""

    @functools.wraps(make)
    def wrapper(*args, **kwargs):
        with matplotlib.rc_context(FIGURE_STYLE), far_dates_allowed():
            return make(*args, **kwargs)

    return wrapper


def _sky_axes(ax, extent):
    ax.set_xlim(extent, -extent)  # East to the left
    ax.set_ylim(-extent, extent)
    ax.set_aspect("equal")
    ax.set_xlabel("x = ΔRA cos δ [arcsec]  (East ←)")
    ax.set_ylabel("y = ΔDec [arcsec]  (North ↑)")


@styled
def sky_figure(view: dict, title: str = ""):
    """Observed and model images, critical curves and caustics of every family.

    ``view`` is :meth:`lensdelay.inference.scenario_fit.ScenarioFit.sky_view`.
    """
    fig = Figure(figsize=(6.4, 6.0))
    ax = fig.subplots()
    colours = PALETTE
    for k, fam in enumerate(view["families"]):
        c = colours[k % len(colours)]
        for n, line in enumerate(fam["critical_lines"]):
            ax.plot(
                line.x,
                line.y,
                "-",
                color=c,
                lw=0.9,
                alpha=0.8,
                label=f"{fam['label']}: critical curve" if n == 0 else None,
            )
            ax.plot(
                line.caustic_x,
                line.caustic_y,
                ":",
                color=c,
                lw=0.9,
                label=f"{fam['label']}: caustic" if n == 0 else None,
            )
        ax.errorbar(
            fam["x"],
            fam["y"],
            xerr=fam["sigma"],
            yerr=fam["sigma"],
            fmt="+",
            color="k",
            ms=10,
            label="observed" if k == 0 else None,
        )
        for x, y, lab in zip(fam["x"], fam["y"], fam["labels"]):
            ax.annotate(
                f"{fam['label']}/{lab}",
                (x, y),
                textcoords="offset points",
                xytext=(6, 6),
                fontsize=8,
            )
        ax.plot(fam["model_x"], fam["model_y"], "x", color=c, ms=7, label=f"{fam['label']}: model")
        ax.plot(*fam["source"], "*", color=c, ms=9, label=f"{fam['label']}: source")
    for j, im in enumerate(view["unobserved"]):
        ax.plot(
            im["x"],
            im["y"],
            MARKERS.get(im["parity"], "o"),
            mfc="none",
            mec=PALETTE[1],
            ms=8,
            label="predicted, not observed" if j == 0 else None,
        )
    members = view.get("members")
    if members is not None and len(members["x"]):
        # member galaxies inside the view (a catalogue may reach far beyond it)
        inside = (np.abs(members["x"]) <= view["extent"]) & (np.abs(members["y"]) <= view["extent"])
        if np.any(inside):
            ax.plot(
                members["x"][inside],
                members["y"][inside],
                "D",
                mfc="none",
                mec="0.35",
                ms=6,
                label="member galaxies",
            )
    _sky_axes(ax, view["extent"])
    ax.set_title(title or "Sky view (North up, East left)")
    ax.legend(fontsize=7, loc="upper left", framealpha=0.8)
    fig.tight_layout()
    return fig


@styled
def residual_figure(fit_result):
    """Per-image position residuals in mas, with the 1-σ circle."""
    rows = [r for r in fit_result.residuals_mas if r["reproduced"]]
    fig = Figure(figsize=(5.2, 5.0))
    ax = fig.subplots()
    lim = 1.0
    for r in rows:
        ax.plot(r["dx_mas"], r["dy_mas"], "o", label=f"{r['family']}/{r['image']}")
        circ = Circle((0, 0), r["sigma_mas"], fill=False, ls=":", color="0.5")
        ax.add_patch(circ)
        lim = max(lim, abs(r["dx_mas"]), abs(r["dy_mas"]), r["sigma_mas"])
    lim *= 1.3
    ax.axhline(0, color="0.7", lw=0.5)
    ax.axvline(0, color="0.7", lw=0.5)
    ax.set_xlim(lim, -lim)
    ax.set_ylim(-lim, lim)
    ax.set_aspect("equal")
    ax.set_xlabel("model − observed, x [mas]  (East ←)")
    ax.set_ylabel("model − observed, y [mas]  (North ↑)")
    ax.set_title(
        f"Image residuals (χ² = {fit_result.chi2:.2f}, dof = {fit_result.dof}); dotted: 1σ"
    )
    ax.legend(fontsize=8)
    fig.tight_layout()
    return fig


#: Words for parameter names (the part after the component), with units.
PARAMETER_WORDS = {
    "einstein_radius": "Einstein radius [″]",
    "axis_ratio": "axis ratio",
    "position_angle": "position angle [°]",
    "strength": "shear strength",
    "slope": "radial slope γ′",
    "convergence": "convergence κ",
    "kappa_s": "κs",
    "scale_radius": "scale radius [″]",
    "core": "core [″]",
    "cut": "truncation radius [″]",
    "cosine": "cosine term",
    "sine": "sine term",
    "x": "centre x (East) [″]",
    "y": "centre y (North) [″]",
}


def parameter_label(name: str) -> str:
    """A parameter's code name in words, with its unit.

    'mass[0].einstein_radius' -> 'Einstein radius [″] (mass 1)'; 'source[sn].x' ->
    'source x (sn) [″]'; names it does not know are returned with spaces for underscores.
    """
    if name.startswith("source[") and "]." in name:
        family, coord = name[len("source[") :].split("].", 1)
        return f"source {coord} ({family}) [″]"
    if name.startswith("mass[") and "]." in name:
        index, key = name[len("mass[") :].split("].", 1)
        words = PARAMETER_WORDS.get(key, key.replace("_", " "))
        return f"{words} (mass {int(index) + 1})" if index.isdigit() else words
    if name.startswith("members."):
        key = name.split(".", 1)[1]
        return f"members: {PARAMETER_WORDS.get(key, key.replace('_', ' '))}"
    return {"H0": "H0 [km/s/Mpc]", "kappa_ext": "κ_ext"}.get(name, name.replace("_", " "))


@styled
def corner_figure(samples, names, truths=None):
    """Pairwise 2-D histograms and marginal histograms of posterior samples.

    The pairs are shaded histograms drawn as raster images inside the vector PDF: a
    scatter of every sample made the file several megabytes.
    """
    n = samples.shape[1]
    size = min(1.7 * n + 1, 16.0)
    fig = Figure(figsize=(size, size))
    axes = fig.subplots(n, n, squeeze=False)
    labels = [parameter_label(nm) for nm in names]
    finite = np.all(np.isfinite(samples), axis=1)
    samples = samples[finite]
    for i in range(n):
        for j in range(n):
            ax = axes[i, j]
            if j > i:
                ax.axis("off")
                continue
            if i == j:
                ax.hist(samples[:, i], bins=30, histtype="step", color="k")
                ax.set_yticks([])
            else:
                ax.hist2d(
                    samples[:, j], samples[:, i], bins=36, cmap="Greys", cmin=1, rasterized=True
                )
            if i == n - 1:
                ax.set_xlabel(labels[j], fontsize=7)
            else:
                ax.set_xticklabels([])
            if j == 0 and i > 0:
                ax.set_ylabel(labels[i], fontsize=7)
            elif j > 0:
                ax.set_yticklabels([])
            ax.tick_params(labelsize=6)
    fig.suptitle("Posterior of the mass-model parameters (shading: sample density)", fontsize=10)
    fig.subplots_adjust(top=0.95, hspace=0.08, wspace=0.08)
    return fig


@styled
def timeline_figure(res):
    """Each image's date distribution on a calendar axis, with observable spans shaded."""
    import matplotlib.dates as mdates
    from astropy import units as u

    tr = res.scenario.transient
    images = res.images
    fig = Figure(figsize=(9.0, 1.2 + 0.75 * len(images)))
    ax = fig.subplots()
    base = tr.date
    lo = min(im.date_offset_days["p2.5"] for im in images)
    hi = max(im.date_offset_days["p97.5"] for im in images)
    pad = 0.08 * (hi - lo) + 2
    cal = res.calendar
    to_num = lambda off: mdates.date2num((base + np.asarray(off) * u.day).to_datetime())  # noqa: E731
    if cal is not None:
        start_offset = (cal.start - base).to_value("day")
        days = np.arange(len(cal.observable))
        ax.axvspan(
            to_num(start_offset),
            to_num(start_offset + len(days)),
            color="0.8",
            alpha=0.6,
            lw=0,
            label="not observable from the site",
        )
        first = True
        for a, b in cal.windows(0, len(days) - 1):
            ax.axvspan(
                to_num(start_offset + a),
                to_num(start_offset + b + 1),
                color="#d9f0d3",
                lw=0,
                label="observable from the site" if first else None,
            )
            first = False
    for row, im in enumerate(images):
        ok = np.isfinite(im.samples.offsets) & (im.samples.weights > 0)
        off = im.samples.offsets[ok]
        w = im.samples.weights[ok]
        hist, edges = np.histogram(off, bins=60, weights=w)
        if hist.max() > 0:
            h = 0.38 * hist / hist.max()
            centres = to_num(0.5 * (edges[1:] + edges[:-1]))
            ax.fill_between(
                centres,
                row - h,
                row + h,
                color=PALETTE[0],
                alpha=0.45,
                lw=0,
                label="date distribution" if row == 0 else None,
            )
        q = im.date_offset_days
        ax.plot(
            to_num([q["p2.5"], q["p97.5"]]),
            [row, row],
            "-",
            color="k",
            lw=1,
            label="95% window" if row == 0 else None,
        )
        ax.plot(
            to_num([q["p16"], q["p84"]]),
            [row, row],
            "-",
            color="k",
            lw=4,
            label="68% window" if row == 0 else None,
        )
        ax.plot(
            to_num(q["median"]),
            row,
            "o",
            color="w",
            mec="k",
            ms=5,
            label="median" if row == 0 else None,
        )
    rows = {im.label: row for row, im in enumerate(images)}
    first = True
    for s in res.settings.sightings:
        if s.label in rows:
            off = (s.date - base).to_value("day")
            ax.errorbar(
                [to_num(off)],
                [rows[s.label] + 0.25],
                xerr=[
                    [to_num(off) - to_num(off - s.sigma_days)],
                    [to_num(off + s.sigma_days) - to_num(off)],
                ],
                fmt="D",
                color=PALETTE[3],
                mec="k",
                ms=5,
                capsize=2,
                label="sighting ± 1σ" if first else None,
            )
            first = False
    ax.axvline(to_num(0.0), color=PALETTE[1], lw=1.2, label=f"detection {tr.date.isot[:10]}")
    now = (res.now - base).to_value("day")
    if lo - pad <= now <= hi + pad:
        ax.axvline(to_num(now), color=PALETTE[4], ls="--", lw=1, label=f"now {res.now.isot[:10]}")
    ax.set_yticks(range(len(images)))
    ax.set_yticklabels(
        [f"{im.family}/{im.label}{'' if im.observed else '*'} ({im.status})" for im in images]
    )
    ax.set_ylim(-0.7, len(images) - 0.3)
    ax.set_xlim(to_num(lo - pad), to_num(hi + pad))
    ax.xaxis_date()
    span = (hi - lo) + 2 * pad
    locator = mdates.AutoDateLocator(minticks=4, maxticks=9)
    ax.xaxis.set_major_locator(locator)
    # day and month on every tick (the year in the axis label) for galaxy-scale spans;
    # month and year for cluster-scale ones
    ax.xaxis.set_major_formatter(mdates.DateFormatter("%d %b" if span < 400 else "%b %Y"))
    first = base + (lo - pad) * u.day
    last = base + (hi + pad) * u.day
    years = sorted({first.datetime.year, last.datetime.year})
    year_text = "–".join(str(y) for y in years) if span < 400 else ""
    ax.set_xlabel(f"date (UTC{', ' + year_text if year_text else ''})")
    ax.set_title(
        f"{res.scenario.name}: when each image shows the event (* = predicted); "
        "model-dependent, see cautions",
        fontsize=9,
    )
    ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    fig.tight_layout()
    return fig


@styled
def budget_figure(budget):
    """Each sampled source's share of each image's date variance.

    Signed: after a measurement some sources offset one another.
    """
    from lensdelay.forecast.budget import SAMPLED_TERMS

    rows = budget["images"]
    # one colour and hatch per source (the remainder in grey); a source with no share in
    # any image is left out of the bars and the legend
    style = {
        term: (PALETTE[k % len(PALETTE)], ["", "//", "..", "xx", "\\\\", "--", "++"][k % 7])
        for k, term in enumerate(SAMPLED_TERMS)
    }
    style["remainder"] = ("#bbbbbb", "")
    shares = {t: np.array([r["date"][t]["percent"] for r in rows]) for t in style}
    terms = [t for t in style if np.any(np.abs(shares[t]) >= 0.05)] or ["remainder"]
    fig = Figure(figsize=(8.0, 1.6 + 0.6 * max(len(rows), 1)))
    ax = fig.subplots()
    height = 0.8 / len(terms)
    for k, term in enumerate(terms):
        share = shares[term]
        ax.barh(
            np.arange(len(rows)) - 0.4 + (k + 0.5) * height,
            share,
            height=height,
            color=style[term][0],
            hatch=style[term][1],
            edgecolor="k",
            lw=0.3,
            label=term,
        )
    ax.axvline(0, color="k", lw=0.8)
    ax.set_yticks(range(len(rows)))
    ax.set_yticklabels([f"{r['family']}/{r['label']}" for r in rows])
    ax.invert_yaxis()
    ax.set_xlabel("share of the date variance [%] (covariance with each source; sums to 100)")
    ax.set_title("Uncertainty budget of each image's date, after updates", fontsize=10)
    ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    fig.tight_layout()
    return fig


#: Axis words of the delay-curve panels.
CURVE_AXES = {
    "H0": "H0 [km/s/Mpc]",
    "Om0": "Ωm (matter density today)",
    "w0": "w (dark-energy equation of state)",
}
#: Most image pairs drawn, one row of panels each; the others are named in the title.
MAX_CURVE_ROWS = 6


@styled
def hubble_curves_figure(res):
    """Predicted delay of each image pair against H0 (and Ωm, w when asked), 68%/95% bands.

    One row of panels per image pair (so that many images stay readable), one column per
    quantity varied; a measured delay is drawn in its pair's panels with its ±1σ band.
    """
    axes_present = [a for a in CURVE_AXES if any(r["axis"] == a for r in res.curves)]
    keys = sorted({(r["family"], r["image"], r["relative_to"]) for r in res.curves})
    shown = keys[:MAX_CURVE_ROWS]
    nrow, ncol = len(shown), len(axes_present)
    fig = Figure(figsize=(3.6 * ncol + 1.0, 2.1 * nrow + 1.0))
    grid = fig.subplots(nrow, ncol, squeeze=False, sharex="col")
    measured = {(d.family, d.image, d.relative_to): d for d in res.scenario.delays}
    for i, key in enumerate(shown):
        for j, axis in enumerate(axes_present):
            ax = grid[i, j]
            sel = [
                r
                for r in res.curves
                if (r["family"], r["image"], r["relative_to"]) == key and r["axis"] == axis
            ]
            v = np.array([r["value"] for r in sel])
            ax.fill_between(
                v, [r["p2.5"] for r in sel], [r["p97.5"] for r in sel], color="#c9d6ea", lw=0
            )
            ax.fill_between(
                v, [r["p16"] for r in sel], [r["p84"] for r in sel], color="#8fa9d2", lw=0
            )
            ax.plot(v, [r["median"] for r in sel], color="#1f4e9a", lw=1.4)
            d = measured.get(key)
            if d is not None:
                ax.axhspan(d.days - d.sigma, d.days + d.sigma, color="#e8b36a", alpha=0.5, lw=0)
                ax.axhline(d.days, color="#8a3b00", ls="--", lw=1)
            if j == 0:
                ax.set_ylabel(f"{key[0]}/{key[1]} after {key[2]}\n[days]", fontsize=8)
            if i == nrow - 1:
                ax.set_xlabel(CURVE_AXES[axis], fontsize=9)
            ax.tick_params(labelsize=7)
    left_out = len(keys) - len(shown)
    more = f"; {left_out} more pairs in hubble_curves.ecsv" if left_out else ""
    fig.suptitle(
        "Predicted delays (line: median; bands: 68%, 95%)"
        + ("; measured delay: dashed, ±1σ shaded" if measured else "")
        + more,
        fontsize=9,
    )
    fig.tight_layout()
    return fig


@styled
def h0_figure(res):
    """H0 posterior under several κext priors: the mass-sheet degeneracy."""
    fig = Figure(figsize=(7.0, 4.2))
    ax = fig.subplots()
    for k in res.kappa_comparison:
        s = k["samples_H0"]
        ax.hist(
            s[np.isfinite(s)],
            bins=60,
            histtype="step",
            density=True,
            label=f"κ_ext ~ N({k['kappa_ext'][0]:+.2f}, {k['kappa_ext'][1]:.2f})",
        )
    ax.set_xlabel("H0 [km/s/Mpc]")
    ax.set_ylabel("posterior density")
    ax.set_title("H0 from the measured delays; H0 scales with (1 − κ_ext)", fontsize=10)
    ax.legend(fontsize=8)
    fig.tight_layout()
    return fig


@styled
def light_curves_figure(measured):
    """The light curves laid onto the reference's by the measured delays, with residuals.

    Quasars: every image shifted by −Δ and freed of its own offset and microlensing
    polynomial, over the intrinsic curve the Gaussian process predicts; supernovae: each
    band's fluxes shifted by −Δ and divided by the image's flux ratio, over the shared
    shape. Residuals are in units of each point's error.
    """
    model, best = measured.model, measured.best
    labels = model.labels
    markers = ("o", "s", "^", "D", "v", "P")
    if measured.kind == "quasar":
        panels = [""]
    else:
        panels = list(model.bands)
    fig = Figure(figsize=(8.0, 2.2 + 2.6 * len(panels)))
    grid = fig.subplots(
        2 * len(panels),
        1,
        squeeze=False,
        sharex=True,
        gridspec_kw={"height_ratios": [3, 1] * len(panels)},
    )
    n1 = len(labels) - 1
    for p, band in enumerate(panels):
        ax, axr = grid[2 * p, 0], grid[2 * p + 1, 0]
        if measured.kind == "quasar":
            delays = np.concatenate([[0.0], best[:n1]])
            beta = model.linear_coefficients(best[:n1], best[-2], best[-1])
            trend = model.design @ beta
            ts = model.t - delays[model.which]
            y = model.y - trend
            err = model.err * model.error_scale[model.which]  # as fitted (stated × factor)
            import celerite2
            from celerite2 import terms

            gp = celerite2.GaussianProcess(
                terms.RealTerm(a=np.exp(2 * best[-2]), c=np.exp(-best[-1])), mean=0.0
            )
            order = np.argsort(ts)
            gp.compute(ts[order], yerr=err[order])
            dense = np.linspace(ts.min(), ts.max(), 1500)
            mu, var = gp.predict(y[order], t=dense, return_var=True)
            ax.fill_between(dense, mu - np.sqrt(var), mu + np.sqrt(var), color="0.85", lw=0)
            ax.plot(dense, mu, color="0.3", lw=0.8, label="intrinsic curve (±1σ)")
            # celerite2 predicts at sorted times: predict there, then undo the sort
            at_points = np.empty(len(ts))
            at_points[order] = gp.predict(y[order], t=ts[order])
            for k, lab in enumerate(labels):
                sel = model.which == k
                ax.errorbar(
                    ts[sel],
                    y[sel],
                    err[sel],
                    fmt=markers[k % 6],
                    ms=3,
                    color=PALETTE[k % len(PALETTE)],
                    lw=0.5,
                    label=f"{lab}",
                )
                axr.plot(
                    ts[sel],
                    (y[sel] - at_points[sel]) / err[sel],
                    markers[k % 6],
                    ms=2.5,
                    color=PALETTE[k % len(PALETTE)],
                )
            ax.invert_yaxis()
            ax.set_ylabel("magnitude − own trend")
        else:
            b = p
            k0 = model.n_shape
            delays = np.concatenate([[0.0], best[k0 : k0 + n1]])
            full = model.model_flux(best)[0]
            scale_rows = full / np.maximum(model.model_flux(_unscaled(model, best))[0], 1e-300)
            dense = np.linspace(model.t.min() - delays.max(), model.t.max() - delays.min(), 800)
            shape = model.model_flux(
                _unscaled(model, best),
                t=dense,
                which=np.zeros(len(dense), dtype=int),
                band=np.full(len(dense), b),
            )[0]
            ax.plot(dense, shape, color="0.3", lw=0.9, label=f"shared shape, band {band}")
            for k, lab in enumerate(labels):
                sel = (model.which == k) & (model.band == b)
                ts = model.t[sel] - delays[k]
                f = model.flux[sel] / scale_rows[sel]
                e = model.flux_err[sel] / scale_rows[sel]
                ax.errorbar(
                    ts,
                    f,
                    e,
                    fmt=markers[k % 6],
                    ms=3,
                    lw=0.5,
                    color=PALETTE[k % len(PALETTE)],
                    label=lab,
                )
                sd = np.sqrt(model.flux_err[sel] ** 2 + (np.exp(best[-1]) * full[sel]) ** 2)
                axr.plot(
                    ts,
                    (model.flux[sel] - full[sel]) / sd,
                    markers[k % 6],
                    ms=2.5,
                    color=PALETTE[k % len(PALETTE)],
                )
            ax.set_ylabel("flux / flux ratio (relative)")
        axr.axhline(0, color="0.5", lw=0.6)
        axr.set_ylabel("residual [σ]")
        ax.legend(fontsize=7, ncol=min(len(labels) + 1, 5), loc="best")
    grid[-1, 0].set_xlabel(f"time − delay [MJD] (each image moved onto {measured.reference})")
    text = ", ".join(
        f"{im.label}: {im.delay_days['median']:+.1f} d" if im.measurable else f"{im.label}: —"
        for im in measured.images
    )
    fig.suptitle(
        f"Light curves laid onto {measured.reference} ({measured.kind}); {text}", fontsize=9
    )
    fig.tight_layout()
    return fig


def _unscaled(model, best):
    """The supernova parameters with every image's flux ratio and chromatic term at zero."""
    theta = np.array(best, dtype=float).copy()
    k0, n1 = model.n_shape, model.n_images - 1
    theta[k0 + n1 : -1] = 0.0
    return theta
