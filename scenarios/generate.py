"""Regenerate the invented demo scenarios (run from the project root).

Every system here is made up: names, coordinates, redshifts and "observations" are
simulated from the true models below with seeded noise. They are demos, not data.
"""

from __future__ import annotations

import sys

import numpy as np

from lensdelay.model.cosmology import DEFAULT_COSMOLOGY
from lensdelay.lensing.distances import LensDistances
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles import (
    ExternalShear,
    IsothermalEllipsoid,
    NFWHalo,
    SingularIsothermalSphere,
)
from lensdelay.model.simulate import simulate_family, to_toml
from lensdelay.io.storage import atomic_write_text


def write(name, header, doc):
    atomic_write_text(f"scenarios/{name}.toml", header + "\n" + to_toml(doc))
    print(f"wrote scenarios/{name}.toml", file=sys.stderr)


def main():
    rng = np.random.default_rng(2027)
    # 1. galaxy-scale quad with a lensed supernova
    lens = Lens(
        (
            IsothermalEllipsoid(
                einstein_radius=1.05, axis_ratio=0.72, position_angle=28.0, x=0.012, y=-0.008
            ),
            ExternalShear(strength=0.055, position_angle=-35.0),
        )
    )
    fam = simulate_family(lens, 0.035, 0.045, label="sn", redshift=1.42, sigma=0.004, rng=rng)
    seen = fam["image"][1]
    write(
        "vellmar_quad",
        "# Vellmar quad: an invented galaxy-scale quad with a lensed supernova.\n"
        '# Simulated from an SIE (theta_E 1.05", q 0.72, PA 28) + shear (0.055, PA -35).',
        {
            "name": "Vellmar quad",
            "lens": {"redshift": 0.41},
            "sky": {"ra": 187.3311, "dec": -12.4518},
            "cosmology": {"H0": 70.0, "Om0": 0.3},
            "family": [fam],
            "lens_light": {"x": 0.0, "y": 0.0, "sigma": 0.01},
            "transient": {
                "family": "sn",
                "seen_in": seen["label"],
                "date": "2026-11-28",
                "date_sigma_days": 1.5,
                "magnitude": round(seen["magnitude"] + 1.3, 2),
            },
            "site": {"latitude": -30.24, "longitude": -70.74, "height": 2700.0},
            "model": "models/sie_shear.toml",
        },
    )
    # 2. a double-imaged variable quasar with one measured delay
    lens = Lens(
        (
            SingularIsothermalSphere(einstein_radius=0.92, x=-0.01, y=0.015),
            ExternalShear(strength=0.04, position_angle=60.0),
        )
    )
    fam = simulate_family(lens, 0.21, -0.13, label="qso", redshift=2.05, sigma=0.003, rng=rng)
    dist = LensDistances(DEFAULT_COSMOLOGY, 0.36, 2.05)
    from lensdelay.lensing.images import find_images

    t = find_images(lens, [0.21], [-0.13])
    true_delay = float((t.fermat[1] - t.fermat[0]) * dist.days_per_arcsec2(2.05))
    write(
        "ostrin_double",
        "# Ostrin double: an invented two-image quasar with a measured delay.\n"
        '# Simulated from an SIS (0.92") + shear (0.04, PA 60) at H0 = 70.',
        {
            "name": "Ostrin double",
            "lens": {"redshift": 0.36},
            "sky": {"ra": 44.0917, "dec": 8.2206},
            "family": [fam],
            "lens_light": {"x": 0.0, "y": 0.0, "sigma": 0.01},
            "transient": {
                "family": "qso",
                "seen_in": "A",
                "date": "2026-11-16",
                "date_sigma_days": 2.0,
                "magnitude": 20.4,
            },
            "delay": [
                {
                    "family": "qso",
                    "image": "B",
                    "relative_to": "A",
                    "days": round(true_delay + rng.normal(0, 0.02 * true_delay), 2),
                    "sigma": round(0.02 * true_delay, 2),
                }
            ],
            "site": {"solar_elongation": [50.0, 130.0]},
            "model": "models/sis_shear.toml",
        },
    )
    # 3. group-scale system, two families at two redshifts, delays of years
    lens = Lens(
        (
            NFWHalo(kappa_s=0.42, scale_radius=25.0, x=0.6, y=-0.4),
            IsothermalEllipsoid(einstein_radius=1.6, axis_ratio=0.75, position_angle=-50.0),
            ExternalShear(strength=0.04, position_angle=20.0),
        )
    )
    dist = LensDistances(DEFAULT_COSMOLOGY, 0.52, 2.4)
    fam1 = simulate_family(
        lens,
        0.35,
        -0.25,
        label="sn",
        redshift=1.9,
        scale=dist.deflection_scale(1.9),
        sigma=0.02,
        rng=rng,
    )
    fam2 = simulate_family(
        lens, -0.5, 0.6, label="arc", redshift=2.4, scale=1.0, sigma=0.03, rng=rng, labels="PQRSTU"
    )
    write(
        "kessoway_group",
        "# Kessoway group: an invented group-scale lens with a supernova family\n"
        "# and a second, more distant family. Simulated from NFW + SIE + shear.",
        {
            "name": "Kessoway group",
            "lens": {"redshift": 0.52, "reference_source_redshift": 2.4},
            "sky": {"ra": 215.7702, "dec": 31.0645},
            "family": [fam1, fam2],
            "lens_light": {"x": 0.0, "y": 0.0, "sigma": 0.02},
            "transient": {
                "family": "sn",
                "seen_in": fam1["image"][0]["label"],
                "date": "2026-10-03",
                "date_sigma_days": 3.0,
                "magnitude": 23.1,
            },
            "site": {"latitude": 19.82, "longitude": -155.47, "height": 4200.0},
            "model": "models/nfw_sie_shear.toml",
        },
    )


if __name__ == "__main__":
    main()
