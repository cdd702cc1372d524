"""Invented systems for demos and injection-recovery tests.

Given a known lens and source, compute the images, add Gaussian astrometric noise
(seeded), and describe the result as a scenario document (a dict ready for
:func:`lensdelay.model.scenario.parse_scenario`, or TOML text for a demo file).
"""

from __future__ import annotations

import numpy as np

from lensdelay.lensing.images import find_images
from lensdelay.lensing.lens import Lens

__all__ = ["simulate_family", "to_toml"]


def simulate_family(
    lens: Lens,
    beta_x: float,
    beta_y: float,
    *,
    label: str,
    redshift: float,
    scale: float = 1.0,
    sigma: float = 0.003,
    rng=None,
    min_abs_mu: float = 0.05,
    labels: str = "ABCDEFGH",
) -> dict:
    """A ``[[family]]`` table with noisy images of one source (brightest first kept).

    Images fainter than ``min_abs_mu`` (e.g. central images) are left out, as an
    observer would miss them. Labels follow arrival order.
    """
    rng = np.random.default_rng(0) if rng is None else rng
    table = find_images(lens, [beta_x], [beta_y], scale)
    keep = np.abs(table.magnification) >= min_abs_mu
    table = table.select(keep)
    images = []
    for k in range(len(table)):
        images.append(
            {
                "label": labels[k],
                "sigma": sigma,
                "x": float(table.x[k] + rng.normal(0, sigma)),
                "y": float(table.y[k] + rng.normal(0, sigma)),
                "magnitude": float(22.0 - 2.5 * np.log10(abs(table.magnification[k]))),
            }
        )
    return {"label": label, "redshift": redshift, "image": images}


def to_toml(doc: dict) -> str:
    """Minimal TOML writer for scenario documents (tables, arrays of tables, scalars)."""
    lines: list[str] = []

    def scalar(v):
        if isinstance(v, bool):
            return "true" if v else "false"
        if isinstance(v, str):
            return '"' + v.replace("\\", "\\\\").replace('"', '\\"') + '"'
        if isinstance(v, (list, tuple)):
            return "[" + ", ".join(scalar(x) for x in v) + "]"
        if isinstance(v, dict):
            return "{ " + ", ".join(f"{k} = {scalar(x)}" for k, x in v.items()) + " }"
        if isinstance(v, (float, np.floating)):
            return repr(round(float(v), 9))
        if isinstance(v, np.integer):
            return repr(int(v))
        return repr(v)

    def emit(prefix, table):
        for k, v in table.items():
            # a parameter table ({ value = , min = , ... }) is written inline, here with
            # the scalars: skipping it in both passes lost it
            if (isinstance(v, dict) and _inline(v)) or not (
                isinstance(v, dict) or (isinstance(v, list) and v and isinstance(v[0], dict))
            ):
                lines.append(f"{k} = {scalar(v)}")
        for k, v in table.items():
            name = f"{prefix}.{k}" if prefix else k
            if isinstance(v, dict) and not _inline(v):
                lines.append("")
                lines.append(f"[{name}]")
                emit(name, v)
            elif isinstance(v, list) and v and isinstance(v[0], dict):
                for item in v:
                    lines.append("")
                    lines.append(f"[[{name}]]")
                    emit(name, item)

    def _inline(v):
        return set(v) <= {"value", "min", "max", "prior", "vary"}

    emit("", doc)
    return "\n".join(lines).strip() + "\n"
