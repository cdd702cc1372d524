"""Regenerate the invented demo scenarios (run from the project root).

Every system here is made up: names, coordinates, redshifts and "observations" are
simulated from the true models below with seeded noise. They are demos, not data.
"""

from __future__ import annotations

import json
import sys

import numpy as np

from lensdelay.model.cosmology import DEFAULT_COSMOLOGY
from lensdelay.lensing.distances import LensDistances
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.images import find_images
from lensdelay.lensing.profiles import (
    ExternalShear,
    IsothermalEllipsoid,
    NFWHalo,
    SingularIsothermalSphere,
    TruncatedIsothermal,
)
from lensdelay.lensing.profiles.stack import ProfileStack
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
    cluster(np.random.default_rng(2031))


#: The invented cluster's true mass (arcsec; θE at the reference source redshift 3.0).
CLUSTER_TRUTH = {
    "halo": dict(
        einstein_radius=17.0, axis_ratio=0.68, position_angle=33.0, core=4.0, x=1.2, y=-0.8
    ),
    "bcg": dict(
        einstein_radius=2.4, core=0.15, cut=40.0, axis_ratio=0.78, position_angle=30.0, x=0, y=0
    ),
    "shear": dict(strength=0.035, position_angle=-25.0),
    "members": dict(reference_mag=19.0, einstein_radius=0.65, cut=14.0),
}
CLUSTER_Z, CLUSTER_Z_REF = 0.34, 3.0


def _cluster_members(rng, n=140):
    """An invented member catalogue: positions within 65", magnitudes 18.4-23.5."""
    r = 65.0 * rng.uniform(0.0, 1.0, n) ** 0.8
    phi = rng.uniform(0.0, 2 * np.pi, n)
    mag = np.clip(18.4 + rng.exponential(1.5, n), 18.4, 23.5)
    q = np.round(rng.uniform(0.5, 1.0, n), 2)
    pa = np.round(rng.uniform(-90.0, 90.0, n), 1)
    rows = [
        {
            "id": f"m{k + 1:03d}",
            "x": r[k] * np.sin(phi[k]),
            "y": r[k] * np.cos(phi[k]),
            "mag": mag[k],
            "axis_ratio": q[k],
            "position_angle": pa[k],
        }
        for k in range(n)
    ]
    # the brightest cluster galaxy at the centre: listed, and modelled on its own
    rows.insert(
        0,
        {"id": "bcg", "x": 0.0, "y": 0.0, "mag": 17.1, "axis_ratio": 0.78, "position_angle": 30.0},
    )
    return rows


def _members_table_text(rows) -> str:
    from astropy.table import Table
    import io

    table = Table(
        rows=[
            [r[k] for k in ("id", "x", "y", "mag", "axis_ratio", "position_angle")] for r in rows
        ],
        names=("id", "x", "y", "mag", "axis_ratio", "position_angle"),
    )
    for col in ("x", "y"):
        table[col].unit = "arcsec"
        table[col].format = ".3f"
    table["mag"].format = ".2f"
    buffer = io.StringIO()
    table.write(buffer, format="ascii.ecsv")
    return buffer.getvalue()


def cluster_lens(rows):
    """The true lens of the invented cluster (members from the catalogue rows)."""
    t = CLUSTER_TRUTH
    members = [r for r in rows if r["id"] != "bcg"]
    lum = 10 ** (-0.4 * (np.array([r["mag"] for r in members]) - t["members"]["reference_mag"]))
    stack = ProfileStack(
        TruncatedIsothermal,
        dict(
            einstein_radius=t["members"]["einstein_radius"] * lum**0.5,
            core=np.zeros(len(members)),
            cut=t["members"]["cut"] * lum**0.5,
            axis_ratio=np.array([r["axis_ratio"] for r in members]),
            position_angle=np.array([r["position_angle"] for r in members]),
            x=np.array([r["x"] for r in members]),
            y=np.array([r["y"] for r in members]),
        ),
    )
    return Lens(
        (
            IsothermalEllipsoid(**t["halo"]),
            TruncatedIsothermal(**t["bcg"]),
            stack,
            ExternalShear(**t["shear"]),
        )
    )


def _arrival_days(table, dist, z):
    return (table.fermat - table.fermat.min()) * dist.days_per_arcsec2(z)


def cluster(rng):
    """Tarrow cluster: an invented cluster lens, 140 members, 9 families, a lensed supernova."""
    rows = _cluster_members(rng)
    lens = cluster_lens(rows)
    dist = LensDistances(DEFAULT_COSMOLOGY, CLUSTER_Z, CLUSTER_Z_REF)
    families = []
    # the supernova: one image years before the one seen, one years after it
    z_sn = 1.49
    while True:
        bx, by = rng.uniform(-2.5, 2.5, 2)
        table = find_images(lens, [bx], [by], dist.deflection_scale(z_sn))
        table = table.select(np.abs(table.magnification) >= 0.3)
        days = np.sort(_arrival_days(table, dist, z_sn))
        if len(table) >= 3 and np.any(
            (days[1:-1] - days[0] > 2 * 365) & (days[-1] - days[1:-1] > 3 * 365)
        ):
            break
    sn = simulate_family(
        lens,
        bx,
        by,
        label="sn",
        redshift=z_sn,
        scale=dist.deflection_scale(z_sn),
        sigma=0.02,
        rng=rng,
        min_abs_mu=0.3,
    )
    days = _arrival_days(table, dist, z_sn)
    # seen in the image between the earliest and the latest
    middle = [
        k for k in range(len(days)) if days[k] - days.min() > 730 and days.max() - days[k] > 1095
    ]
    seen = sn["image"][middle[0]]
    families.append(sn)
    truth = {
        "note": "the invented Tarrow cluster's truth, for benchmarks/bench_cluster_demo.py",
        "mass": CLUSTER_TRUTH,
        "sources": {"sn": [float(bx), float(by), z_sn]},
        # true delays after the image seen, at the scenario's cosmology and kappa_ext = 0
        "sn_delays_days": {
            im["label"]: float(days[k] - days[middle[0]]) for k, im in enumerate(sn["image"])
        },
    }
    # eight arcs, at redshifts 1.2-5; the one at z = 2.71 gets no spectroscopic redshift
    for k, z in enumerate((1.21, 1.84, 2.17, 2.71, 3.0, 3.42, 4.05, 5.1)):
        while True:
            bx, by = rng.uniform(-4.0, 4.0, 2)
            fam = simulate_family(
                lens,
                bx,
                by,
                label=f"arc{k + 1}",
                redshift=z,
                scale=dist.deflection_scale(z),
                sigma=0.06,
                rng=rng,
                min_abs_mu=0.3,
                labels="abcdefgh",
            )
            if len(fam["image"]) >= 3:
                break
        for im in fam["image"]:
            del im["magnitude"]
        truth["sources"][fam["label"]] = [float(bx), float(by), z]
        if z == 2.71:
            fam["redshift"] = {"value": 2.5, "min": 1.6, "max": 5.5}
        families.append(fam)
    atomic_write_text("scenarios/tarrow_members.ecsv", _members_table_text(rows))
    atomic_write_text("scenarios/tarrow_truth.json", json.dumps(truth, indent=2) + "\n")
    t = CLUSTER_TRUTH
    header = (
        "# Tarrow cluster: an invented cluster lens (140 member galaxies in\n"
        "# tarrow_members.ecsv), eight arcs (one without a spectroscopic redshift) and a\n"
        "# lensed supernova whose first image came years before the one seen and whose\n"
        '# last is years ahead. Simulated from a cored SIE halo (theta_E 17", q 0.68,\n'
        '# core 4"), a truncated isothermal central galaxy, the members (theta_E* 0.65",\n'
        '# cut* 14" at mag 19, both scaling as L^0.5) and shear 0.035.'
    )
    write(
        "tarrow_cluster",
        header,
        {
            "name": "Tarrow cluster",
            "lens": {"redshift": CLUSTER_Z, "reference_source_redshift": CLUSTER_Z_REF},
            "sky": {"ra": 64.0381, "dec": -23.7154},
            "cosmology": {"H0": 70.0, "Om0": 0.3},
            "family": families,
            # no [lens_light]: it would pull the first luminous component, the dark
            # halo here, onto the central galaxy (the BCG's own centre is held fixed)
            "transient": {
                "family": "sn",
                "seen_in": seen["label"],
                "date": "2026-10-15",
                "date_sigma_days": 2.0,
                "magnitude": round(seen["magnitude"] + 2.0, 2),
            },
            "site": {"latitude": -24.63, "longitude": -70.40, "height": 2640.0},
            "mass": [
                {
                    "profile": "SIE",
                    "einstein_radius": {"value": 14.0, "min": 5.0, "max": 30.0},
                    "axis_ratio": {"value": 0.8, "min": 0.3, "max": 1.0},
                    "position_angle": {"value": 20.0},
                    "core": {"value": 3.0, "min": 0.5, "max": 10.0},
                    "x": {"value": 0.0, "min": -5.0, "max": 5.0},
                    "y": {"value": 0.0, "min": -5.0, "max": 5.0},
                },
                {
                    "profile": "truncated_isothermal",
                    "einstein_radius": {"value": 2.0, "min": 0.5, "max": 5.0},
                    "core": 0.15,
                    "cut": 40.0,
                    "axis_ratio": 0.78,
                    "position_angle": 30.0,
                    "x": 0.0,
                    "y": 0.0,
                },
                {
                    "profile": "shear",
                    "strength": {"value": 0.03, "min": 0.0, "max": 0.2},
                    "position_angle": {"value": 0.0},
                },
            ],
            "members": {
                "catalogue": "tarrow_members.ecsv",
                "exclude": ["bcg"],
                "reference_mag": t["members"]["reference_mag"],
                "einstein_radius": {"value": 0.5, "min": 0.1, "max": 1.5},
                "cut": {"value": 10.0, "min": 2.0, "max": 40.0},
            },
        },
    )


#: The invented lenses of the joint-H0 demo: name, (θE, γ, q, PA), shear, source,
#: z_l, z_s, whether its delays were measured.
JOINT_LENSES = (
    ("quenby", (1.12, 2.06, 0.74, 32.0), (0.05, -40.0), (0.040, 0.030), 0.38, 1.72, True),
    ("ravelstone", (0.94, 1.95, 0.81, -15.0), (0.03, 60.0), (0.030, -0.045), 0.52, 2.14, True),
    ("sorrowby", (1.31, 2.10, 0.68, 75.0), (0.06, 10.0), (-0.050, 0.020), 0.61, 2.45, True),
    ("tindle", (1.02, 1.92, 0.77, 5.0), (0.04, -75.0), (0.020, 0.055), 0.45, 1.96, True),
    ("umberlee", (0.88, 2.02, 0.85, -50.0), (0.05, 25.0), (-0.035, -0.030), 0.33, 1.58, False),
)


#: Ring radii (arcsec) of the demo's resolved kinematics.
JOINT_RINGS = (0.0, 0.3, 0.6, 1.0, 1.5)


def _resolved_kinematics(light, slope, r_ani, scale, effective_radius) -> dict:
    """[kinematics] with one dispersion per ring: σ² = scale · J_ring, 4% errors."""
    from lensdelay.lensing.kinematics import Aperture, aperture_dispersion

    noise = np.random.default_rng(31415)
    edges = JOINT_RINGS
    true = [
        np.sqrt(
            scale
            * aperture_dispersion(
                light, Aperture("annulus", 0.1, radius=b, inner=a), slope, "osipkov_merritt", r_ani
            )
        )
        for a, b in zip(edges, edges[1:])
    ]
    return {
        "velocity_dispersion": [
            round(float(v * (1 + 0.04 * noise.standard_normal())), 1) for v in true
        ],
        "velocity_dispersion_sigma": [round(float(0.04 * v), 1) for v in true],
        "aperture": "annuli",
        "bin_edges": list(edges),
        "seeing_fwhm": 0.1,
        "effective_radius": round(effective_radius, 3),
    }


def joint_catalogue(rng):
    """scenarios/joint/: invented lenses for ``lensdelay cosmography`` (H0 = 70 in truth).

    Each lens is a power law + shear; its true internal mass sheet λ_int ~ N(1, 0.05) and
    κ_ext ~ N(0, 0.03) (its [line_of_sight] prior) scale the true delays and σ² alike;
    delays carry 4% errors, dispersions 6% (Osipkov–Merritt orbits, r_a = 1.5 R_eff).
    Sorrowby has resolved kinematics instead of a slit: one dispersion per ring of
    :data:`JOINT_RINGS` in 0.1" seeing, 4% errors each (its noise from its own generator,
    so the other lenses' draws are those of the slit-only catalogue).
    """
    from pathlib import Path

    from lensdelay.lensing.kinematics import (
        ARCSEC,
        SPEED_OF_LIGHT_KMS,
        Aperture,
        LightProfile,
        aperture_dispersion,
        power_law_mass_factor,
    )
    from lensdelay.lensing.profiles import EllipticalPowerLaw

    Path("scenarios/joint").mkdir(exist_ok=True)
    truths = {}
    for name, (theta_e, slope, q, pa), shear, source, z_l, z_s, timed in JOINT_LENSES:
        lens = Lens(
            (
                EllipticalPowerLaw(
                    einstein_radius=theta_e, slope=slope, axis_ratio=q, position_angle=pa
                ),
                ExternalShear(strength=shear[0], position_angle=shear[1]),
            )
        )
        fam = simulate_family(lens, *source, label="qso", redshift=z_s, sigma=0.003, rng=rng)
        lam, kappa = rng.normal(1.0, 0.05), rng.normal(0.0, 0.03)
        dist = LensDistances(DEFAULT_COSMOLOGY, z_l, z_s)
        table = find_images(lens, [source[0]], [source[1]], 1.0)
        table = table.select(np.abs(table.magnification) >= 0.05)
        days = (table.fermat - table.fermat[0]) * dist.days_per_arcsec2(z_s) * lam * (1 - kappa)
        labels = [im["label"] for im in fam["image"]]
        light = LightProfile.from_effective_radius("hernquist", 0.9 * theta_e)
        aperture = Aperture("slit", 0.8, width=0.75, length=1.0)
        j = aperture_dispersion(light, aperture, slope, "osipkov_merritt", 1.5 * 0.9 * theta_e)
        ratio = 1.0 / dist.distance_ratio(z_s)
        sigma = np.sqrt(
            SPEED_OF_LIGHT_KMS**2
            * ratio
            * ARCSEC
            * theta_e ** (slope - 1)
            * power_law_mass_factor(slope)
            * j
            * lam
            * (1 - kappa)
        )
        kinematics = {
            "velocity_dispersion": round(float(sigma * (1 + 0.06 * rng.standard_normal())), 1),
            "velocity_dispersion_sigma": round(float(0.06 * sigma), 1),
            "aperture": "slit",
            "aperture_width": 0.75,
            "aperture_length": 1.0,
            "seeing_fwhm": 0.8,
            "effective_radius": round(0.9 * theta_e, 3),
        }
        if name == "sorrowby":
            kinematics = _resolved_kinematics(
                light, slope, 1.5 * 0.9 * theta_e, sigma**2 / j, 0.9 * theta_e
            )
        doc = {
            "name": name.capitalize(),
            "lens": {"redshift": z_l},
            "cosmology": {"H0": 70.0, "Om0": 0.3},
            "family": [fam],
            "lens_light": {"x": 0.0, "y": 0.0, "sigma": 0.01},
            "kinematics": kinematics,
            "line_of_sight": {"kappa_ext": [0.0, 0.03]},
        }
        if timed:
            doc["delay"] = [
                {
                    "family": "qso",
                    "image": labels[k],
                    "relative_to": labels[0],
                    "days": round(float(days[k] * (1 + 0.04 * rng.standard_normal())), 2),
                    "sigma": round(float(0.04 * days[k]), 2),
                }
                for k in range(1, len(labels))
            ]
        header = (
            f"# {name.capitalize()}: an invented lens for the joint-H0 demo (H0 = 70 in truth).\n"
            f"# Simulated from a power law (theta_E {theta_e}, slope {slope}) + shear; its true\n"
            f"# lambda_int {lam:.3f} and kappa_ext {kappa:+.3f} scale its delays and sigma^2."
        )
        atomic_write_text(f"scenarios/joint/{name}.toml", header + "\n" + to_toml(doc))
        print(f"wrote scenarios/joint/{name}.toml", file=sys.stderr)
        truths[name] = {"lambda_int": lam, "kappa_ext": kappa, "slope": slope}
    return truths


if __name__ == "__main__":
    if sys.argv[1:] == ["joint"]:
        joint_catalogue(np.random.default_rng(4242))
    else:
        main()
        joint_catalogue(np.random.default_rng(4242))
