"""Readers of the external light-curve sets in ../shared/data (benchmarks only).

TDC1 (Liao et al. 2015, ApJ 800, 11): columns time, flux A, error, flux B, error in
nanomaggies; m = 22.5 − 2.5 log10 f (SOURCE.md). True delays dt = t_B − t_A.

Real monitoring curves (``light-curves-real``): tab-separated, a header and a line of
dashes, ``mhjd``, ``mag_X``, ``magerr_X`` per image and an optional ``telescope``;
published delays Δt_XY = t_X − t_Y (SOURCE.md).
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from lensdelay.lightcurves.curves import LightCurves

DATA = Path(__file__).resolve().parents[2] / "shared" / "data"
TDC = DATA / "tdc1"
REAL = DATA / "light-curves-real"


def _assemble(image, time, mag, err, source, instrument=None) -> LightCurves:
    """LightCurves from per-image lists of arrays (one band, detections only)."""
    n = sum(len(x) for x in time)
    return LightCurves(
        np.concatenate(image),
        np.concatenate(time),
        np.concatenate(mag),
        np.concatenate(err),
        np.full(n, ""),
        np.zeros(n, dtype=bool),
        str(source),
        None if instrument is None else np.concatenate(instrument),
    )


def read_tdc(path) -> LightCurves:
    """One TDC1 pair as LightCurves (images A and B); non-positive fluxes dropped."""
    d = np.loadtxt(path, comments="#")
    t = d[:, 0]
    image, time, mag, err = [], [], [], []
    for lab, f, e in (("A", d[:, 1], d[:, 2]), ("B", d[:, 3], d[:, 4])):
        ok = (f > 0) & (e > 0) & np.isfinite(f)
        image.append(np.full(ok.sum(), lab))
        time.append(t[ok])
        mag.append(22.5 - 2.5 * np.log10(f[ok]))
        err.append(2.5 / np.log(10) * e[ok] / f[ok])
    return _assemble(image, time, mag, err, path)


def tdc_truths(rung: int) -> dict:
    """File name -> true delay t_B − t_A (days), placeholders dropped."""
    out = {}
    for line in (TDC / "truth" / f"truth{rung}.txt").read_text().splitlines():
        if line.startswith("#") or not line.strip():
            continue
        name, dt = line.split()[:2]
        if name.startswith("tdc1_"):
            out[name] = float(dt)
    return out


def read_rdb(path, images=None) -> LightCurves:
    """A monitoring programme's .rdb table as LightCurves (instrument from ``telescope``)."""
    lines = Path(path).read_text().splitlines()
    header = lines[0].split("\t")
    rows = []
    for line in lines[1:]:
        fields = line.split("\t")
        try:
            float(fields[0])
        except ValueError:
            continue
        rows.append(fields)
    col = {name.strip(): k for k, name in enumerate(header)}
    t = np.array([float(r[col["mhjd"]]) for r in rows])
    labels = [name[4:] for name in col if name.startswith("mag_")]
    if images is not None:
        labels = [lab for lab in labels if lab in images]
    tel = [r[col["telescope"]].strip() for r in rows] if "telescope" in col else None
    image, time, mag, err, inst = [], [], [], [], []
    for lab in labels:
        m = np.array([float(r[col[f"mag_{lab}"]]) for r in rows])
        e = np.array([float(r[col[f"magerr_{lab}"]]) for r in rows])
        ok = np.isfinite(m) & np.isfinite(e) & (e > 0)
        image.append(np.full(ok.sum(), lab))
        time.append(t[ok])
        mag.append(m[ok])
        err.append(e[ok])
        if tel is not None:
            inst.append(np.array(tel)[ok])
    return _assemble(image, time, mag, err, path, inst if tel is not None else None)
