"""Figures, kept apart from the computation. Sky views: North up, East left, arcsec."""

from __future__ import annotations

import matplotlib
import numpy as np
from matplotlib.figure import Figure
from matplotlib.patches import Circle


MARKERS = {"minimum": "o", "saddle": "s", "maximum": "^"}


def _sky_axes(ax, extent):
    ax.set_xlim(extent, -extent)  # East to the left
    ax.set_ylim(-extent, extent)
    ax.set_aspect("equal")
    ax.set_xlabel("x = ΔRA cos δ [arcsec]  (East ←)")
    ax.set_ylabel("y = ΔDec [arcsec]  (North ↑)")


def sky_figure(view: dict, title: str = ""):
    """Observed and model images, critical curves and caustics of every family.

    ``view`` is :meth:`lensdelay.inference.fit.ScenarioFit.sky_view`.
    """
    fig = Figure(figsize=(6.4, 6.0))
    ax = fig.subplots()
    colours = matplotlib.rcParams["axes.prop_cycle"].by_key()["color"]
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
            mec="tab:red",
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


def corner_figure(samples, names, truths=None):
    """Pairwise scatter and marginal histograms of posterior samples."""
    n = samples.shape[1]
    fig = Figure(figsize=(1.7 * n + 1, 1.7 * n + 1))
    axes = fig.subplots(n, n, squeeze=False)
    short = [
        nm.replace("mass[", "m").replace("].", ".").replace("source[", "src.").replace("]", "")
        for nm in names
    ]
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
                ax.plot(samples[:, j], samples[:, i], ",", alpha=0.4, color="k")
            if i == n - 1:
                ax.set_xlabel(short[j], fontsize=7)
            else:
                ax.set_xticklabels([])
            if j == 0 and i > 0:
                ax.set_ylabel(short[i], fontsize=7)
            elif j > 0:
                ax.set_yticklabels([])
            ax.tick_params(labelsize=6)
    fig.suptitle("Posterior samples (points) and marginal histograms", fontsize=10)
    fig.subplots_adjust(top=0.95, hspace=0.08, wspace=0.08)
    return fig


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
                color="tab:blue",
                alpha=0.55,
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
                color="tab:orange",
                mec="k",
                ms=5,
                capsize=2,
                label="sighting ± 1σ" if first else None,
            )
            first = False
    ax.axvline(to_num(0.0), color="tab:red", lw=1.2, label=f"detection {tr.date.isot[:10]}")
    now = (res.now - base).to_value("day")
    if lo - pad <= now <= hi + pad:
        ax.axvline(to_num(now), color="tab:purple", ls="--", lw=1, label=f"now {res.now.isot[:10]}")
    ax.set_yticks(range(len(images)))
    ax.set_yticklabels(
        [f"{im.family}/{im.label}{'' if im.observed else '*'} ({im.status})" for im in images]
    )
    ax.set_ylim(-0.7, len(images) - 0.3)
    ax.set_xlim(to_num(lo - pad), to_num(hi + pad))
    ax.xaxis_date()
    ax.xaxis.set_major_formatter(mdates.ConciseDateFormatter(ax.xaxis.get_major_locator()))
    ax.set_xlabel("date (UTC)")
    ax.set_title(
        f"{res.scenario.name}: when each image shows the event (* = predicted); "
        "model-dependent, see cautions",
        fontsize=9,
    )
    ax.legend(fontsize=7, loc="upper left", bbox_to_anchor=(1.01, 1.0))
    fig.tight_layout()
    return fig


def budget_figure(budget):
    """Each sampled source's share of each image's date variance.

    Signed: after a measurement some sources offset one another.
    """
    from lensdelay.forecast.budget import SAMPLED_TERMS

    terms = SAMPLED_TERMS + ("remainder",)
    rows = budget["images"]
    fig = Figure(figsize=(8.0, 1.6 + 0.6 * max(len(rows), 1)))
    ax = fig.subplots()
    height = 0.8 / len(terms)
    colours = matplotlib.rcParams["axes.prop_cycle"].by_key()["color"]
    hatches = ["", "//", "..", "xx", "\\\\", "--"]
    for k, term in enumerate(terms):
        share = np.array([r["date"][term]["percent"] for r in rows])
        ax.barh(
            np.arange(len(rows)) - 0.4 + (k + 0.5) * height,
            share,
            height=height,
            color=colours[k % len(colours)],
            hatch=hatches[k % len(hatches)],
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


def hubble_curves_figure(res):
    """Predicted delay of each image pair against H0, with 68% and 95% bands."""
    rows = [r for r in res.curves if r["axis"] == "H0"]
    keys = sorted({(r["family"], r["image"], r["relative_to"]) for r in rows})
    fig = Figure(figsize=(7.0, 4.6))
    ax = fig.subplots()
    for k, key in enumerate(keys):
        sel = [r for r in rows if (r["family"], r["image"], r["relative_to"]) == key]
        h = np.array([r["value"] for r in sel])
        c = f"C{k % 10}"
        ax.fill_between(h, [r["p2.5"] for r in sel], [r["p97.5"] for r in sel], color=c, alpha=0.15)
        ax.fill_between(h, [r["p16"] for r in sel], [r["p84"] for r in sel], color=c, alpha=0.35)
        ax.plot(h, [r["median"] for r in sel], color=c, label=f"{key[0]}: {key[1]} − {key[2]}")
    for d in res.scenario.delays:
        ax.axhline(d.days, color="k", ls=":", lw=0.8, label=f"measured {d.image} − {d.relative_to}")
    ax.set_xlabel("H0 [km/s/Mpc]")
    ax.set_ylabel("delay t(image) − t(relative_to) [days]")
    ax.set_title("Predicted delays vs H0 (bands: 68%, 95%; dotted: measured)", fontsize=10)
    ax.legend(fontsize=7)
    fig.tight_layout()
    return fig


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
            label=f"κext ~ N({k['kappa_ext'][0]:+.2f}, {k['kappa_ext'][1]:.2f})",
        )
    ax.set_xlabel("H0 [km/s/Mpc]")
    ax.set_ylabel("posterior density")
    ax.set_title("H0 from the measured delays; H0 scales with (1 − κext)", fontsize=10)
    ax.legend(fontsize=8)
    fig.tight_layout()
    return fig
