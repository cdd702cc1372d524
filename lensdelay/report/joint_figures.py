"""Figures of a joint H0: each lens's H0 against the joint band, and the population."""

from __future__ import annotations

import numpy as np
from matplotlib.figure import Figure

from lensdelay.report.figures import PALETTE, styled

__all__ = ["joint_h0_figure", "population_figure", "PARAMETER_TITLES", "ORBIT_NAMES"]

#: Axis labels of the population's parameters.
PARAMETER_TITLES = {
    "H0": "H0 [km/s/Mpc]",
    "Om0": "Ωm",
    "Ode0": "Ω_Λ (dark energy density today)",
    "w0": "dark energy w0",
    "wa": "dark energy wa",
    "lambda_mean": "mean internal mass sheet λ_int",
    "lambda_scatter": "scatter of λ_int",
    "r_ani_mean": "mean r_ani / R_eff (Osipkov–Merritt)",
    "r_ani_scatter": "scatter of ln r_ani",
    "beta_mean": "mean anisotropy β",
    "beta_scatter": "scatter of β",
}


#: The orbit models as the figures name them.
ORBIT_NAMES = {
    "isotropic": "isotropic",
    "constant": "constant-β",
    "osipkov_merritt": "Osipkov–Merritt",
}


def _blinded(res) -> str:
    return " (BLINDED)" if res.blinded else ""


@styled
def joint_h0_figure(res) -> Figure:
    """Each lens's own H0 (68% and 95%) with the joint posterior's 68% band and median."""
    lenses = [lens for lens in res.lenses if lens.h0 is not None]
    # the joint H0 under the other orbit models (--orbits-side-by-side), below the lenses
    rows = [(lens.name, lens.h0, PALETTE[1]) for lens in lenses]
    rows += [
        (f"all lenses, {ORBIT_NAMES[alt.anisotropy]} orbits", alt.h0, PALETTE[2])
        for alt in res.orbit_alternatives
    ]
    height = 2.3 + 0.22 * len(rows)
    fig = Figure(figsize=(6.4, height))
    ax = fig.subplots()
    h = res.h0
    ax.axvspan(h["p16"], h["p84"], color=PALETTE[0], alpha=0.18, lw=0, label="joint 68%")
    ax.axvline(h["median"], color=PALETTE[0], lw=1.2, label="joint median")
    y = np.arange(len(rows))[::-1]
    for yi, (_, q, colour) in zip(y, rows):
        ax.plot([q["p2.5"], q["p97.5"]], [yi, yi], color=PALETTE[5], lw=0.8)
        ax.plot([q["p16"], q["p84"]], [yi, yi], color=colour, lw=2.2)
        ax.plot(q["median"], yi, "o", color=colour, ms=3.5)
    ax.plot([], [], color=PALETTE[1], lw=2.2, marker="o", ms=3.5, label="one lens: 68%")
    if res.orbit_alternatives:
        label = "all lenses, other orbits: 68%"
        ax.plot([], [], color=PALETTE[2], lw=2.2, marker="o", ms=3.5, label=label)
    ax.plot([], [], color=PALETTE[5], lw=0.8, label="95%")
    names = [name for name, _, _ in rows]
    ax.set_yticks(y, names, fontsize=7 if len(rows) > 20 else 8)
    ax.set_ylim(-1, len(rows))
    ax.set_xlabel("H0 [km/s/Mpc]" + (" (blinded)" if res.blinded else ""))
    ax.set_title(
        f"H0 of each lens and of all {len(res.lenses)} together{_blinded(res)}\n"
        "one lens: the population's other parameters at the joint medians;\n"
        "model-dependent (mass sheet, line of sight)",
        fontsize=8.5,
    )
    # below the axes: inside, the legend would cover the lenses' intervals
    fig.legend(
        loc="lower center", ncol=5 if res.orbit_alternatives else 4, fontsize=7, frameon=False
    )
    fig.tight_layout(rect=(0.0, 0.35 / height, 1.0, 1.0))
    return fig


@styled
def population_figure(res) -> Figure:
    """The marginal posteriors of the population's parameters besides H0."""
    names = [n for n in res.chain.names if n != "H0"]
    if not names:
        names = ["H0"]
    cols = min(len(names), 2)
    rows = int(np.ceil(len(names) / cols))
    fig = Figure(figsize=(3.3 * cols, 2.5 * rows))
    axes = np.atleast_1d(fig.subplots(rows, cols, squeeze=False).ravel())
    for ax, name in zip(axes, names):
        values = res.chain.column(name)
        ax.hist(values, bins=50, histtype="stepfilled", color=PALETTE[0], alpha=0.7)
        q = res.parameters[name]
        for key, style in (("median", "-"), ("p16", ":"), ("p84", ":")):
            ax.axvline(q[key], color=PALETTE[1], ls=style, lw=1)
        ax.set_xlabel(PARAMETER_TITLES.get(name, name))
        ax.set_ylabel("samples")
    for ax in axes[len(names) :]:
        ax.set_visible(False)
    fig.suptitle("Population posterior (median and 68% marked)" + _blinded(res), fontsize=9)
    fig.tight_layout()
    return fig
