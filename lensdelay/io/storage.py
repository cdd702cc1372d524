"""Files the tool writes: text, JSON without NaN, figures and whole output sets, each atomically."""

from __future__ import annotations

from lensdelay.atomic import atomic_save_npz, atomic_write_bytes

import json
import os
from pathlib import Path

import numpy as np

__all__ = [
    "atomic_write_text",
    "json_ready",
    "atomic_write_json",
    "figure_bytes",
    "atomic_savefig",
    "save_figures",
    "MANIFEST",
    "PartialOutputError",
    "write_output_set",
]


def atomic_write_text(path, text: str) -> None:
    """Write UTF-8 text atomically."""
    atomic_write_bytes(path, text.encode("utf-8"))


def json_ready(obj):
    """Replace NaN and infinities by null and numpy scalars/arrays by plain Python values."""
    if isinstance(obj, dict):
        return {str(k): json_ready(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [json_ready(v) for v in obj]
    if isinstance(obj, np.ndarray):
        return json_ready(obj.tolist())
    if isinstance(obj, (np.floating, float)):
        return float(obj) if np.isfinite(obj) else None
    if isinstance(obj, np.integer):
        return int(obj)
    if isinstance(obj, np.bool_):
        return bool(obj)
    return obj


def atomic_write_json(path, obj) -> None:
    """JSON with no NaN (written as null), atomically."""
    atomic_write_text(path, json.dumps(json_ready(obj), indent=2, allow_nan=False) + "\n")


def figure_bytes(fig, ext: str = "png") -> bytes:
    """A matplotlib figure as PNG or PDF bytes, as every output figure is saved."""
    import io

    buf = io.BytesIO()
    # no creation date or software version in the files: identical runs, identical bytes
    metadata = {"CreationDate": None} if ext == "pdf" else {"Software": None}
    fig.savefig(buf, format=ext, dpi=130, bbox_inches="tight", metadata=metadata)
    return buf.getvalue()


def _built(fig):
    """A figure, or the one a builder (a function of no arguments) makes."""
    return fig() if callable(fig) and not hasattr(fig, "savefig") else fig


def atomic_savefig(fig, stem, rendered=None) -> list[str]:
    """Save a matplotlib figure as PNG and PDF, each atomically. Returns the paths.

    ``fig`` may be a builder of the figure (a function of no arguments), called here.

    ``rendered``: bytes already made by :func:`figure_bytes` for some of the formats
    (``{"png": ...}``, e.g. the PNG a report page embeds), written as they are.
    """
    rendered = rendered or {}
    fig = _built(fig) if any(ext not in rendered for ext in ("png", "pdf")) else fig
    out = []
    for ext in ("png", "pdf"):
        path = f"{stem}.{ext}"
        data = rendered.get(ext)
        atomic_write_bytes(path, figure_bytes(fig, ext) if data is None else data)
        out.append(path)
    return out


#: Lists the files of a command's last complete output set in a folder (one manifest per
#: command, named after its JSON), so a later run can remove what it no longer writes.
MANIFEST = ".lensdelay-outputs-{stem}.json"


class PartialOutputError(KeyboardInterrupt):
    """Interrupted while new outputs replaced old ones: says which are new."""

    def __init__(self, folder, replaced, total):
        super().__init__(f"{folder}: {len(replaced)} of {total} files were replaced")
        self.folder, self.replaced, self.total = folder, list(replaced), total


def _may_fork() -> bool:
    """Whether a child process may render figures: POSIX fork, no other thread running.

    A thread of the parent (a progress bar's, a scheduler's) would be frozen mid-state in
    the child; then the figures are rendered in this process only.
    """
    import threading

    return hasattr(os, "fork") and threading.active_count() == 1


def save_figures(figures: dict, folder, rendered=None) -> list[str]:
    """Every figure as PNG and PDF into ``folder`` (each file atomically); returns the paths.

    ``rendered`` maps a figure's stem to bytes of it already rendered, by format (see
    :func:`atomic_savefig`): those files are written, not rendered again.

    Rendering, not drawing the figures, is most of a forecast's output time (the finder
    chart's celestial axes most of all), so with two or more figures a forked child
    renders every second one while this process renders the rest: on two cores the wall
    time of the step nearly halves. A figure may be given as its builder (a function of
    no arguments): the process that renders it then draws it too, so drawing (and the
    plotting libraries' imports, when the builder imports them) is shared as well. The
    child shares nothing but the files it writes; if it fails for any reason, this
    process renders its figures again, so the files and their bytes never depend on the
    split.
    """
    import signal

    folder = Path(folder)
    rendered = rendered or {}
    items = list(figures.items())
    theirs = items[1::2]
    child = 0
    if theirs and _may_fork():
        child = os.fork()
        if child == 0:  # the child: its share, then out without the parent's clean-up
            code = 1
            try:
                for stem, fig in theirs:
                    atomic_savefig(fig, folder / stem, rendered.get(stem))
                code = 0
            finally:
                os._exit(code)
    written = []
    try:
        for stem, fig in items[::2] if child else items:
            written += atomic_savefig(fig, folder / stem, rendered.get(stem))
    except BaseException:
        if child:  # no child left writing behind an error or an interruption
            os.kill(child, signal.SIGKILL)
            os.waitpid(child, 0)
        raise
    if child:
        _, status = os.waitpid(child, 0)
        paths = [f"{folder / stem}.{ext}" for stem, _ in theirs for ext in ("png", "pdf")]
        if os.waitstatus_to_exitcode(status) != 0 or not all(map(os.path.exists, paths)):
            for stem, fig in theirs:
                atomic_savefig(fig, folder / stem, rendered.get(stem))
        written += paths
    return written


def write_output_set(
    out,
    *,
    json_name: str,
    doc: dict,
    texts=None,
    figures=None,
    arrays=None,
    binaries=None,
    rendered=None,
    inputs=(),
) -> list[str]:
    """Write one command's outputs into folder ``out`` as one set.

    Every file is first written in full into a staging folder inside ``out``; only then
    are they moved into place (renames, the JSON last), files of the previous set that
    this run does not write are removed, and the manifest is updated. Leftovers of an
    interrupted run (staging folders, ``.part`` files) are cleared first. Refuses (before
    writing anything) to overwrite any of ``inputs``. An interruption while moving
    raises :class:`PartialOutputError` naming what was replaced. ``rendered``: figure
    bytes already made (see :func:`save_figures`), written instead of rendered again.
    """
    import shutil
    import tempfile

    from lensdelay.errors import InputError, LensdelayError

    out = Path(out)
    names = [*(texts or {}), *(arrays or {}), *(binaries or {})]
    names += [f"{stem}.{ext}" for stem in (figures or {}) for ext in ("png", "pdf")]
    names.append(json_name)
    protected = {Path(p).resolve() for p in inputs}
    for n in names:
        if (out / n).resolve() in protected:
            raise InputError(
                f"out {out} would overwrite the input {out / n}; choose another folder"
            )
    out.mkdir(parents=True, exist_ok=True)
    for stale in list(out.glob(".lensdelay-staging-*")) + list(out.glob(".*.part")):
        shutil.rmtree(stale, ignore_errors=True) if stale.is_dir() else stale.unlink(
            missing_ok=True
        )
    staging = Path(tempfile.mkdtemp(prefix=".lensdelay-staging-", dir=out))
    try:
        try:
            for name, text in (texts or {}).items():
                atomic_write_text(staging / name, text)
            for name, arrs in (arrays or {}).items():
                atomic_save_npz(staging / name, **arrs)
            for name, data in (binaries or {}).items():
                atomic_write_bytes(staging / name, data)
            save_figures(figures or {}, staging, rendered)
            atomic_write_json(staging / json_name, doc)
        except OSError as err:
            # a full disk or a vanished folder: the previous outputs are untouched
            raise LensdelayError(
                f"out {out} could not be written ({err.strerror or err}); "
                "the previous outputs there are unchanged"
            ) from err
        manifest = out / MANIFEST.format(stem=Path(json_name).stem)
        previous = _read_manifest(manifest)
        replaced = []
        try:
            for name in names:
                os.replace(staging / name, out / name)
                replaced.append(name)
        except BaseException as err:
            if isinstance(err, (KeyboardInterrupt, OSError)) and replaced:
                raise PartialOutputError(out, replaced, len(names)) from err
            raise
        for name in previous - set(names):
            if (out / name).resolve() not in protected:
                (out / name).unlink(missing_ok=True)
        atomic_write_json(manifest, {"files": names})
    finally:
        shutil.rmtree(staging, ignore_errors=True)
    return names


def _read_manifest(manifest: Path) -> set[str]:
    """File names of the previous output set (empty if none is recorded)."""
    try:
        files = json.loads(manifest.read_text()).get("files", [])
    except (OSError, ValueError, AttributeError):
        return set()
    # only plain names inside the folder: a manifest never reaches elsewhere
    return {f for f in files if isinstance(f, str) and "/" not in f and f not in ("", ".", "..")}
