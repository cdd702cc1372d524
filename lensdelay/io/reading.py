"""Reading files: TOML documents in, plain mappings out, every failure one line.

This is the only place that opens user files. Physics modules never read files.
"""

from __future__ import annotations

import hashlib
import os
import tomllib
from pathlib import Path

from lensdelay.errors import InputError, path_of
from lensdelay.model.recipe import MassModel, parse_mass_entries

__all__ = [
    "read_toml",
    "file_hash",
    "load_model",
    "model_file",
    "catalogue_file",
    "load_scenario",
    "read_table",
    "self_contained_document",
]


def read_toml(path: str | os.PathLike) -> dict:
    """Parse a TOML file, turning every failure into an :class:`InputError`."""
    path = path_of(path)
    where = str(path)
    if not path.exists():
        raise InputError("file does not exist", where)
    if path.is_dir():
        raise InputError("is a directory, expected a TOML file", where)
    try:
        raw = path.read_bytes()
    except OSError as err:
        raise InputError(f"cannot be read ({err.strerror})", where) from err
    try:
        text = raw.decode("utf-8")
    except UnicodeDecodeError as err:
        raise InputError(
            f"must be UTF-8 text, got undecodable byte at offset {err.start}", where
        ) from err
    if not text.strip():
        raise InputError("is empty, expected a TOML document", where)
    try:
        doc = tomllib.loads(text)
    except tomllib.TOMLDecodeError as err:
        raise InputError(f"is not valid TOML: {err}", where) from err
    if not doc:
        raise InputError("is empty, expected a TOML document (only comments or blank lines)", where)
    return doc


def file_hash(*paths: str | os.PathLike) -> str:
    """SHA-256 over the bytes of the input files (provenance of outputs)."""
    digest = hashlib.sha256()
    for p in paths:
        digest.update(Path(p).read_bytes())
    return digest.hexdigest()


def load_model(path: str | os.PathLike) -> tuple[MassModel, dict]:
    """Read a model file: its ``[[mass]]`` recipe and the whole document."""
    doc = read_toml(path)
    try:
        if "mass" not in doc:
            raise InputError("mass is required: at least one [[mass]] table, got nothing")
        model = parse_mass_entries(doc["mass"], label=Path(path).stem)
    except InputError as err:
        raise err.with_source(str(path)) from err.__cause__
    return model, doc


def model_file(scenario_path: Path, ref: str) -> Path:
    """Where a scenario's ``model = ref`` lives.

    Next to the scenario, in the folder above it (where ``models/`` sits), or in the
    working directory.
    """
    for base in (scenario_path.parent, scenario_path.parent.parent, Path.cwd()):
        candidate = base / ref
        if candidate.is_file():
            return candidate
    raise InputError(
        f"model refers to {ref!r}, which does not exist next to the scenario "
        "or in the working directory"
    )


def catalogue_file(scenario_path: Path, ref: str) -> Path:
    """Where a scenario's ``[members] catalogue = ref`` lives: next to the scenario."""
    candidate = scenario_path.parent / ref
    if not candidate.is_file():
        raise InputError(
            f"members.catalogue refers to {ref!r}, which does not exist next to the scenario"
        )
    return candidate


def load_scenario(path: str | os.PathLike, model_paths=None):
    """Read and validate a scenario; ``model_paths`` (a list) replaces its mass model.

    A ``model = "..."`` reference is looked up relative to the scenario's folder,
    then the folder above it (where ``models/`` sits), then the working directory.
    Returns the scenario and the list of input files (for the provenance hash).
    """
    from lensdelay.model.scenario import parse_scenario

    path = path_of(path, "scenario")
    doc = read_toml(path)
    used = [path]

    def resolve(ref: str) -> MassModel:
        candidate = model_file(path, ref)
        used.append(candidate)
        return load_model(candidate)[0]

    def table(ref: str) -> dict:
        candidate = catalogue_file(path, ref)
        used.append(candidate)
        return read_table(candidate, "members.catalogue", text_columns=("id",))

    if model_paths:
        doc = {k: v for k, v in doc.items() if k not in ("mass", "model")}
        doc["model"] = "<command line>"
        scenario = parse_scenario(
            doc,
            str(path),
            load_model=lambda ref: load_model(model_paths[0])[0],
            load_table=table,
        )
        used.append(Path(model_paths[0]))
    else:
        scenario = parse_scenario(doc, str(path), load_model=resolve, load_table=table)
    return scenario, used


def read_table(path: str | os.PathLike, field: str, text_columns=()) -> dict:
    """Columns of an ECSV table (or a CSV with a header line) as name -> array.

    Empty cells come back masked. ``text_columns`` of a CSV are read as strings, as
    written (an id ``01`` stays ``01``; an ECSV declares its own types). Raises
    InputError naming ``field`` when the file is not such a table.
    """
    from astropy.io import ascii as ascii_io
    from astropy.table import Table

    path = Path(path)
    fmt = "ascii.ecsv" if path.suffix.lower() == ".ecsv" else "ascii.csv"
    extra = {}
    if fmt == "ascii.csv" and text_columns:
        extra["converters"] = {name: [ascii_io.convert_numpy(str)] for name in text_columns}
    try:
        tab = Table.read(path, format=fmt, **extra)
    except Exception as err:  # astropy raises many kinds for a malformed table
        reason = str(err).splitlines()[0] if str(err) else type(err).__name__
        raise InputError(
            f"{field} {str(path)!r} must be an ECSV table or a CSV with a header, got an "
            f"unreadable file ({reason})"
        ) from err
    if len(tab) == 0:
        raise InputError(f"{field} {str(path)!r} must have at least one row, got none")
    return {name: tab[name] for name in tab.colnames}


def self_contained_document(path: str | os.PathLike, model_path=None) -> tuple[dict, dict]:
    """A scenario document that needs no other file but those returned with it.

    The mass model (``model = "..."``, or ``model_path`` in its place) is written inline
    as ``[[mass]]`` entries; a ``[members]`` catalogue is returned as bytes under a fixed
    name the document refers to; a transient's ``light_curves`` reference is dropped (a
    prepared lens is forecast from a given alert). Dates become ISO strings. Returns the
    document and ``{file name: bytes}``.
    """
    import datetime as _dt

    path = Path(path)
    doc = read_toml(path)
    files = {}
    try:
        if model_path is not None or "model" in doc:
            candidate = Path(model_path) if model_path else model_file(path, str(doc["model"]))
            doc = {k: v for k, v in doc.items() if k not in ("mass", "model")}
            doc["mass"] = read_toml(candidate).get("mass", [])
        members = doc.get("members")
        source = None
        if isinstance(members, dict) and isinstance(members.get("catalogue"), str):
            source = catalogue_file(path, members["catalogue"])
    except InputError as err:
        raise err.with_source(str(path)) from err.__cause__
    if source is not None:
        name = "members" + (".ecsv" if source.suffix.lower() == ".ecsv" else ".csv")
        files[name] = source.read_bytes()
        doc["members"] = {**members, "catalogue": name}
    if isinstance(doc.get("transient"), dict):
        doc["transient"] = {k: v for k, v in doc["transient"].items() if k != "light_curves"}

    def plain(value):
        if isinstance(value, dict):
            return {k: plain(v) for k, v in value.items()}
        if isinstance(value, list):
            return [plain(v) for v in value]
        if isinstance(value, (_dt.datetime, _dt.date, _dt.time)):
            return value.isoformat()
        return value

    return plain(doc), files
