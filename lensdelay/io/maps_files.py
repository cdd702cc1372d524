"""FITS images of a fitted lens (``lensdelay maps``): one file per quantity, with a WCS.

Each file's primary HDU holds the best-fit map; with posterior samples two image
extensions follow, ``MEDIAN`` and ``SPREAD`` (half the 16–84% range). Every HDU has a
gnomonic (TAN) celestial WCS centred on the scenario's ``[sky]`` origin (ICRS), RA
increasing to the left (CDELT1 < 0) so that the image shows North up and East left,
the unit in BUNIT, and the model, its best-fit parameters and the cosmology in the
header (long keywords as HIERARCH cards).
"""

from __future__ import annotations

import io

import numpy as np
from astropy.io import fits
from astropy.wcs import WCS

from lensdelay.model.cosmology import describe_cosmology
from lensdelay.version import __version__

__all__ = ["map_wcs", "maps_fits", "maps_json"]


def map_wcs(sky, maps) -> WCS:
    """The celestial WCS of a map grid: the origin at its centre pixel, RA to the left."""
    w = WCS(naxis=2)
    n = len(maps.x)
    w.wcs.ctype = ["RA---TAN", "DEC--TAN"]
    w.wcs.crval = [float(sky.ra.deg), float(sky.dec.deg)]
    # the origin sits on the centre pixel (an odd count); FITS pixels count from 1
    w.wcs.crpix = [(n + 1) / 2, (len(maps.y) + 1) / 2]
    w.wcs.cdelt = [-maps.pixel / 3600.0, maps.pixel / 3600.0]
    w.wcs.cunit = ["deg", "deg"]
    w.wcs.radesys = "ICRS"
    return w


def _header(scenario, maps, quantity: str, cosmology, what: str) -> fits.Header:
    header = map_wcs(scenario.sky, maps).to_header()
    header["BUNIT"] = (maps.units[quantity], maps.meanings[quantity][:47])
    header["QUANTITY"] = (quantity, "lensdelay map")
    header["MAPKIND"] = (what, "best fit, posterior median or spread")
    header["ORIGIN"] = "lensdelay"
    header["SOFTWARE"] = (f"lensdelay {__version__}", "program that wrote this file")
    header["OBJECT"] = scenario.name[:68]
    header["MODEL"] = (maps.model_label[:68], "mass model")
    header["LENS_Z"] = (float(scenario.lens_redshift), "lens redshift")
    header["SRC_Z"] = (maps.source_redshift, f"source redshift (family {maps.family})")
    header["REFIMAGE"] = (maps.reference, "arrival time zero: this image's position")
    header["NSAMPLES"] = (maps.n_samples, "posterior samples behind MEDIAN/SPREAD")
    header["PIXSCALE"] = (maps.pixel, "arcsec per pixel")
    cosmo = describe_cosmology(cosmology)
    header["COSMO"] = (str(cosmo.get("name") or cosmo["class"])[:40], f"{cosmo['class']}")
    header["H0"] = (float(cosmo["H0"]), "km/s/Mpc, of the arrival times")
    if "Om0" in cosmo:
        header["OM0"] = (float(cosmo["Om0"]), "matter density today")
    for name, value in maps.parameters.items():
        header[f"HIERARCH PAR {name}"[:70]] = float(value)
    header.add_comment(
        "Maps are model-dependent: line-of-sight mass and the mass-sheet degeneracy "
        "rescale kappa and every delay; microlensing is not included."
    )
    return header


def maps_fits(scenario, maps, cosmology) -> dict[str, bytes]:
    """``<quantity>.fits`` file contents for every map of ``maps`` (:class:`LensMaps`)."""
    files = {}
    for quantity, best in maps.best.items():
        hdus = [
            fits.PrimaryHDU(
                np.asarray(best, dtype=np.float32),
                header=_header(scenario, maps, quantity, cosmology, "best fit"),
            )
        ]
        if maps.median is not None:
            for extname, source, what in (
                ("MEDIAN", maps.median, "posterior median"),
                ("SPREAD", maps.spread, "posterior half 16-84% range"),
            ):
                hdu = fits.ImageHDU(
                    np.asarray(source[quantity], dtype=np.float32),
                    header=_header(scenario, maps, quantity, cosmology, what),
                    name=extname,
                )
                hdus.append(hdu)
        buf = io.BytesIO()
        fits.HDUList(hdus).writeto(buf, output_verify="exception")
        files[f"{quantity}.fits"] = buf.getvalue()
    return files


def maps_json(scenario, maps, files, provenance: dict) -> dict:
    """``maps.json``: what was mapped, where and from which model."""
    return {
        "scenario": scenario.name,
        "sky_origin": {
            "ra_deg": float(scenario.sky.ra.deg),
            "dec_deg": float(scenario.sky.dec.deg),
        },
        "pixel_arcsec": maps.pixel,
        "shape": [len(maps.y), len(maps.x)],
        "family": maps.family,
        "source_redshift": maps.source_redshift,
        "reference_image": maps.reference,
        "model": maps.model_label,
        "parameters": maps.parameters,
        "samples": maps.n_samples,
        "files": {name: maps.meanings[name.removesuffix(".fits")] for name in files},
        "units": maps.units,
        "provenance": provenance,
    }
