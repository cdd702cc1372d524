"""Figures as a set (issue 14): sizes, words on the axes, one panel per image pair."""

from pathlib import Path
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


def _three_figures():
    import matplotlib.pyplot as plt

    figs = {}
    for k, stem in enumerate(("one", "two", "three")):
        fig, ax = plt.subplots(figsize=(3, 2))
        ax.plot([0, 1, 2], [0, k, 2 * k], label=stem)
        ax.set_xlabel("x")
        ax.set_ylabel("y")
        figs[stem] = fig
    return figs


def test_figures_rendered_by_two_processes_are_the_serial_bytes(tmp_path):
    """A forked child renders every second figure: the files are those one process makes."""
    from lensdelay.io.storage import save_figures

    figs = _three_figures()
    written = save_figures(figs, tmp_path)
    assert sorted(written) == sorted(
        str(tmp_path / f"{stem}.{ext}") for stem in figs for ext in ("png", "pdf")
    )
    for stem, fig in figs.items():
        for ext in ("png", "pdf"):
            assert (tmp_path / f"{stem}.{ext}").read_bytes() == figure_bytes(fig, ext)
    assert not list(tmp_path.glob(".*.part"))


def test_a_failing_child_leaves_its_figures_to_the_parent(tmp_path, monkeypatch):
    """The child dies on its first figure: this process renders that share itself."""
    import os

    import lensdelay.io.storage as storage

    parent = os.getpid()
    real = storage.atomic_savefig

    def only_in_the_parent(fig, stem, rendered=None):
        if os.getpid() != parent:
            raise OSError("the child cannot write")
        return real(fig, stem, rendered)

    monkeypatch.setattr(storage, "atomic_savefig", only_in_the_parent)
    figs = _three_figures()
    storage.save_figures(figs, tmp_path)
    for stem, fig in figs.items():
        assert (tmp_path / f"{stem}.png").read_bytes() == figure_bytes(fig, "png")


def test_no_child_is_forked_beside_another_thread():
    """A running thread would be frozen mid-state in a child: then one process renders."""
    import threading

    from lensdelay.io.storage import _may_fork

    stop = threading.Event()
    worker = threading.Thread(target=stop.wait)
    worker.start()
    try:
        assert not _may_fork()
    finally:
        stop.set()
        worker.join()


def test_figures_already_rendered_are_written_not_rendered_again(tmp_path, monkeypatch):
    """A report page's PNGs go into the files as they are: each figure is rendered once
    per format (the bytes equal a fresh rendering: figure_bytes is deterministic)."""
    import lensdelay.io.storage as storage

    figs = _three_figures()
    pngs = {stem: figure_bytes(fig, "png") for stem, fig in figs.items()}
    calls = []
    real = storage.figure_bytes

    def counted(fig, ext="png"):
        calls.append(ext)
        return real(fig, ext)

    monkeypatch.setattr(storage, "_may_fork", lambda: False)  # count in this process
    monkeypatch.setattr(storage, "figure_bytes", counted)
    storage.save_figures(figs, tmp_path, {stem: {"png": b} for stem, b in pngs.items()})
    assert calls == ["pdf"] * len(figs)
    for stem, fig in figs.items():
        assert (tmp_path / f"{stem}.png").read_bytes() == pngs[stem] == real(fig, "png")
        assert (tmp_path / f"{stem}.pdf").read_bytes() == real(fig, "pdf")


def test_figure_builders_are_drawn_by_the_process_that_renders_them(tmp_path):
    """Given builders, the child draws its own share (this process never builds it), and
    the files are the bytes of the figures built in one process. Run in a fresh
    interpreter: a thread another test left running here would rightly stop the fork."""
    import subprocess
    import sys

    code = f"""
import sys
sys.path.insert(0, {str(Path(__file__).parent)!r})
from test_figures import _three_figures
from lensdelay.io.storage import _may_fork, save_figures
built = []
def builder(stem):
    def build():
        built.append(stem)  # a child's appends stay in the child
        return _three_figures()[stem]
    return build
assert _may_fork()
save_figures({{s: builder(s) for s in ("one", "two", "three")}}, {str(tmp_path)!r})
print(",".join(built))
"""
    out = subprocess.run([sys.executable, "-c", code], capture_output=True, text=True, check=True)
    assert out.stdout.split() == ["one,three"]  # "two" was the child's
    for stem, fig in _three_figures().items():
        for ext in ("png", "pdf"):
            assert (tmp_path / f"{stem}.{ext}").read_bytes() == figure_bytes(fig, ext)
