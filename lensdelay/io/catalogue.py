"""A catalogue: a folder of scenario files and/or prepared lenses, one system each.

``batch`` forecasts every system of a catalogue, ``cosmography`` combines them into one
H0; both list it and seed each system here.
"""

from __future__ import annotations

import zlib
from pathlib import Path

from lensdelay.errors import InputError, path_of

__all__ = ["list_systems", "system_seed"]


def list_systems(catalogue) -> list[tuple[str, Path]]:
    """(name, path) of every scenario file and prepared lens in ``catalogue``, by name."""
    from lensdelay.io.prepared_files import is_prepared

    folder = path_of(catalogue, "catalogue")
    if not folder.is_dir():
        raise InputError(
            "must be a folder of scenario files and/or prepared lenses, got "
            + ("a file" if folder.exists() else "nothing there"),
            str(folder),
        )
    systems = {}
    for path in sorted(folder.iterdir()):
        if path.is_file() and path.suffix == ".toml":
            name = path.stem
        elif is_prepared(path):
            name = path.name
        else:
            continue
        if name in systems:
            raise InputError(
                f"system names must be unique, got {name!r} as {systems[name].name} and "
                f"{path.name}",
                str(folder),
            )
        systems[name] = path
    if not systems:
        raise InputError(
            "must hold at least one scenario (*.toml) or prepared lens, got none", str(folder)
        )
    return sorted(systems.items())


def system_seed(name: str, seed: int) -> int:
    """The seed of system ``name``: the base seed and the name's CRC-32, through SeedSequence."""
    import numpy as np

    state = np.random.SeedSequence([int(seed), zlib.crc32(name.encode("utf-8"))]).generate_state(1)
    return int(state[0])
