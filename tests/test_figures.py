"""Figures as a set (issue 14): sizes, words on the axes, one panel per image pair."""

from types import SimpleNamespace

import numpy as np
import pytest

from lensdelay.io.storage import figure_bytes
from lensdelay.report.figures import corner_figure, hubble_curves_figure, parameter_label


def test_corner_figure_stays_small(rng):
    """20,000 samples of 9 parameters: the PDF under 1 MB (a scatter of every sample made
    it 9 MB), the PNG too."""
    names = [
        "mass[0].einstein_radius",
        "mass[0].axis_ratio",
        "mass[0].position_angle",
        "mass[0].x",
        "mass[0].y",
        "mass[1].strength",
        "mass[1].position_angle",
        "source[sn].x",
        "source[sn].y",
    ]
    samples = rng.normal(size=(20_000, 9))
    fig = corner_figure(samples, names)
    assert len(figure_bytes(fig, "pdf")) < 1_000_000
    assert len(figure_bytes(fig, "png")) < 1_000_000


@pytest.mark.parametrize(
    "name, words",
    [
        ("mass[0].einstein_radius", "Einstein radius [″] (mass 1)"),
        ("mass[1].strength", "shear strength (mass 2)"),
        ("source[sn].y", "source y (sn) [″]"),
        ("members.cut", "members: truncation radius [″]"),
        ("H0", "H0 [km/s/Mpc]"),
    ],
)
def test_parameter_names_in_words(name, words):
    assert parameter_label(name) == words


def _curves(pairs, axes):
    rows = []
    for image in pairs:
        for axis, grid in axes.items():
            for v in grid:
                rows.append(
                    {"family": "sn", "image": image, "relative_to": "A", "axis": axis, "value": v}
                    | {k: 10.0 for k in ("median", "p16", "p84", "p2.5", "p97.5")}
                )
    return rows


@pytest.mark.parametrize("n_pairs, axes", [(1, ("H0",)), (3, ("H0", "Om0", "w0")), (9, ("H0",))])
def test_delay_curves_one_panel_per_pair_and_quantity(n_pairs, axes):
    """A row of panels per image pair (at most six; the title names the rest), a column per
    quantity varied (Ωm and w only when asked), each x axis labelled in words."""
    grids = {"H0": np.linspace(50, 90, 5), "Om0": np.linspace(0.15, 0.45, 4), "w0": [-1.2, -0.8]}
    pairs = [f"X{k}" for k in range(n_pairs)]
    res = SimpleNamespace(
        curves=_curves(pairs, {a: grids[a] for a in axes}), scenario=SimpleNamespace(delays=())
    )
    fig = hubble_curves_figure(res)
    panels = [ax for ax in fig.axes if ax.get_visible()]
    assert len(panels) == min(n_pairs, 6) * len(axes)
    labels = {ax.get_xlabel() for ax in panels if ax.get_xlabel()}
    assert labels == {
        {
            "H0": "H0 [km/s/Mpc]",
            "Om0": "Ωm (matter density today)",
            "w0": "w (dark-energy equation of state)",
        }[a]
        for a in axes
    }
    if n_pairs > 6:
        assert "3 more pairs" in fig._suptitle.get_text()
