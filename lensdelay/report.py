"""Plain-text reports, kept apart from the computation."""
from __future__ import annotations

CAUTION = ("Caution: delays and dates are model-dependent. Line-of-sight structure and the "
           "mass-sheet degeneracy rescale every delay by (1 - kappa_ext); microlensing by stars "
           "in the lens changes image brightness and can shift light-curve features.")


def images_text(result: dict) -> str:
    """Table of images from :func:`lensdelay.commands.images_command`."""
    lines = [
        f"Images of a source at ({result['source']['x']:+.4f}, {result['source']['y']:+.4f}) arcsec, "
        f"z_s = {result['source_redshift']:g}, z_l = {result['lens_redshift']:g}",
        f"D_dt = {result['time_delay_distance_Mpc']:.1f} Mpc ({result['cosmology']['name'] or result['cosmology']['class']})",
        "",
        f"{'image':>5} {'x [arcsec]':>11} {'y [arcsec]':>11} {'magnif.':>9} {'parity':>8} {'delay [d]':>10}",
    ]
    for im in result["images"]:
        lines.append(f"{im['label']:>5} {im['x']:+11.5f} {im['y']:+11.5f} {im['magnification']:+9.3f} "
                     f"{im['parity']:>8} {im['delay_days']:10.3f}")
    if not result["images"]:
        lines.append("  (no images)")
    lines += ["", "x is East, y is North; delay is after the first arrival (positive = later).",
              CAUTION]
    return "\n".join(lines)
