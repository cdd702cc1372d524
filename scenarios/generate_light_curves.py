"""Regenerate the invented light-curve demos (run from the project root).

Two made-up systems whose light curves are simulated from their own true lens models, so
the delays the curves carry are the ones the mass model predicts (at H0 = 70):

* **Harrowgate double**, a two-image quasar watched for six seasons by two telescopes
  whose zero points differ by 0.12 mag; its intrinsic variability is a damped random
  walk and each image carries slow microlensing of its own (a random walk over years) —
  not a polynomial.
* **Pellory quad**, a four-image supernova seen in two bands for 120 days from the
  first image's rise; the later images are cut off by the end of the campaign.

Everything is invented: names, coordinates, dates and "observations". Demos, not data.
"""

from __future__ import annotations

import sys

import numpy as np
from astropy.table import Table

from lensdelay.io.storage import atomic_write_text
from lensdelay.lensing.distances import LensDistances
from lensdelay.lensing.images import find_images
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles import ExternalShear, IsothermalEllipsoid, SingularIsothermalSphere
from lensdelay.lightcurves.simulate import (
    damped_random_walk,
    seasonal_epochs,
    simulate_quasar,
    simulate_supernova,
)
from lensdelay.model.cosmology import DEFAULT_COSMOLOGY
from lensdelay.model.simulate import simulate_family, to_toml


def _true_delays(lens, source, z_lens, z_source, labels):
    """Delays (days) of every kept image after the first, from the true lens."""
    table = find_images(lens, [source[0]], [source[1]])
    keep = np.abs(table.magnification) >= 0.05
    fermat = table.fermat[keep]
    per = LensDistances(DEFAULT_COSMOLOGY, z_lens, z_source).days_per_arcsec2(z_source)
    return {lab: float((f - fermat[0]) * per) for lab, f in zip(labels, fermat)}


def _write_curves(path, curves, with_band=False, with_instrument=False):
    cols = {
        "image": curves.image,
        "time": np.round(curves.time, 5),
        "mag": np.round(curves.mag, 4),
        "mag_err": np.round(curves.mag_err, 4),
    }
    if with_band:
        cols["band"] = curves.band
    if with_instrument:
        cols["instrument"] = curves.instrument
    table = Table(cols)
    table.meta["comment"] = ["Invented demo light curves (scenarios/generate_light_curves.py)."]
    from io import StringIO

    buf = StringIO()
    table.write(buf, format="ascii.ecsv")
    atomic_write_text(path, buf.getvalue())
    print(f"wrote {path}", file=sys.stderr)


def _write_scenario(name, header, doc):
    atomic_write_text(f"scenarios/{name}.toml", header + "\n" + to_toml(doc))
    print(f"wrote scenarios/{name}.toml", file=sys.stderr)


def harrowgate(rng):
    lens = Lens(
        (
            SingularIsothermalSphere(einstein_radius=1.12, x=0.008, y=-0.012),
            ExternalShear(strength=0.05, position_angle=-20.0),
        )
    )
    source, z_lens, z_source = (0.24, 0.11), 0.44, 1.83
    fam = simulate_family(lens, *source, label="qso", redshift=z_source, sigma=0.003, rng=rng)
    labels = [im["label"] for im in fam["image"]]
    truth = _true_delays(lens, source, z_lens, z_source, labels)
    epochs = seasonal_epochs(58000.0, 6, 230.0, 4.0, rng)
    curves = simulate_quasar(
        {lab: epochs for lab in labels},
        truth,
        0.22,
        180.0,
        {lab: 0.012 if lab == "A" else 0.02 for lab in labels},
        {},
        rng,
        offsets={lab: im["magnitude"] - 2.0 for lab, im in zip(labels, fam["image"])},
    )
    mag = curves.mag.copy()
    for lab in labels:  # each image's own slow microlensing: a random walk over years
        mine = curves.image == lab
        mag[mine] += damped_random_walk(curves.time[mine], 0.08, 900.0, rng)
    second = curves.time > epochs[0] + 3 * 365.25  # a second telescope takes over
    mag += 0.12 * second
    from dataclasses import replace

    curves = replace(curves, mag=mag, instrument=np.where(second, "north-2m", "south-1m"))
    _write_curves("scenarios/harrowgate_curves.ecsv", curves, with_instrument=True)
    _write_scenario(
        "harrowgate_double",
        "# Harrowgate double: an invented two-image quasar with six seasons of light curves\n"
        '# from two telescopes. Simulated from an SIS (1.12") + shear (0.05, PA -20) at H0 = 70;\n'
        f"# the curves carry the true delay B - A = {truth[labels[1]]:+.1f} d (for checking).",
        {
            "name": "Harrowgate double",
            "lens": {"redshift": z_lens},
            "sky": {"ra": 151.2874, "dec": 3.6621},
            "family": [fam],
            "lens_light": {"x": 0.0, "y": 0.0, "sigma": 0.01},
            "transient": {
                "family": "qso",
                "seen_in": "A",
                "date": "2026-11-20",
                "date_sigma_days": 2.0,
                "magnitude": 19.8,
                "light_curves": "harrowgate_curves.ecsv",
            },
            "site": {"solar_elongation": [50.0, 130.0]},
            "model": "models/sis_shear.toml",
        },
    )


def pellory(rng):
    lens = Lens(
        (
            IsothermalEllipsoid(
                einstein_radius=1.18, axis_ratio=0.66, position_angle=-12.0, x=0.01, y=0.004
            ),
            ExternalShear(strength=0.07, position_angle=40.0),
        )
    )
    source, z_lens, z_source = (0.06, -0.035), 0.38, 1.21
    fam = simulate_family(lens, *source, label="sn", redshift=z_source, sigma=0.004, rng=rng)
    labels = [im["label"] for im in fam["image"]]
    truth = _true_delays(lens, source, z_lens, z_source, labels)
    start = 61240.0  # 2026-07-19: the campaign ends before today
    epochs = {}
    for lab in labels:
        for band in ("g", "r"):
            t = np.arange(start, start + 120.0, 3.0) + (0.0 if band == "g" else 0.03)
            epochs[(lab, band)] = t + rng.uniform(-0.3, 0.3, len(t))
    mags = {lab: im["magnitude"] for lab, im in zip(labels, fam["image"])}
    ref = min(mags.values())
    scales = {}
    for lab in labels:
        for band in ("g", "r"):  # magnification and a little chromatic microlensing
            chrom = rng.normal(0.0, 0.05)
            scales[(lab, band)] = 10 ** (-0.4 * (mags[lab] - ref + chrom))
    curves = simulate_supernova(
        epochs,
        truth,
        {"g": (1500.0, start + 14.0, 3.5, 16.0), "r": (1700.0, start + 17.0, 4.5, 26.0)},
        scales,
        0.02,
        rng,
        floor_flux=6.0,
    )
    _write_curves("scenarios/pellory_curves.ecsv", curves, with_band=True)
    text = ", ".join(f"{lab} {truth[lab]:+.1f} d" for lab in labels[1:])
    _write_scenario(
        "pellory_quad",
        "# Pellory quad: an invented four-image supernova with 120 days of light curves in\n"
        '# g and r. Simulated from an SIE (1.18", q 0.66, PA -12) + shear (0.07, PA 40) at\n'
        f"# H0 = 70; the curves carry the true delays after A: {text} (for checking).",
        {
            "name": "Pellory quad",
            "lens": {"redshift": z_lens},
            "sky": {"ra": 33.9181, "dec": -27.4402},
            "family": [fam],
            "lens_light": {"x": 0.0, "y": 0.0, "sigma": 0.01},
            "transient": {
                "family": "sn",
                "seen_in": "A",
                "date": "2026-08-02",
                "date_sigma_days": 1.0,
                "magnitude": round(mags["A"] + 1.0, 2),
                "light_curves": "pellory_curves.ecsv",
            },
            "site": {"latitude": -30.24, "longitude": -70.74, "height": 2700.0},
            "model": "models/sie_shear.toml",
        },
    )


def main():
    harrowgate(np.random.default_rng(2041))
    pellory(np.random.default_rng(2043))


if __name__ == "__main__":
    main()
