"""Light-curve files in (CONVENTIONS.md, "Light curves"), delays.json out.

A light-curve file is an ECSV table, or a CSV with a header line, one row per
measurement: ``image``, ``time`` (MJD, UTC) or ``date`` (ISO 8601, UTC), ``mag`` and
``mag_err`` (or ``flux`` and ``flux_err``), optional ``band``, ``upper_limit`` and
``instrument``. Every
problem is refused in one line naming the file, the column and what is allowed.
"""

from __future__ import annotations

from pathlib import Path

import numpy as np

from lensdelay.errors import InputError, path_of
from lensdelay.io.reading import read_table
from lensdelay.lightcurves.curves import FLUX_ZERO_POINT, LightCurves

__all__ = [
    "read_light_curves",
    "delays_json",
    "COVARIANCE_MISMATCH",
    "read_delays_json",
    "FORECAST_PRIOR_WIDTHS",
    "delay_ranges_from_forecast",
]


def _column(columns: dict, name: str, where: str, unit=None, rows=None) -> np.ndarray:
    """A numeric column with no empty or non-finite cell, in ``unit`` when one is asked.

    A column with a unit (ECSV ``unit:``) is converted to ``unit``; one whose unit cannot
    be converted is refused, naming both. A column without a unit is taken to be in
    ``unit`` already (CONVENTIONS.md). ``rows`` (boolean) limits the checks to those
    rows; the others come back as NaN (upper limits need no error).
    """
    from lensdelay.model.scenario import values_in_unit

    col = columns[name]
    if rows is None:
        rows = np.ones(len(col), dtype=bool)
    mask = np.ma.getmaskarray(col) & rows
    if np.any(mask):
        row = int(np.argmax(mask))
        raise InputError(
            f"{where} column {name!r} must have no empty cells, got one in row {row + 1}"
        )
    try:
        values = np.asarray(np.ma.getdata(col), dtype=float)
    except (TypeError, ValueError) as err:
        raise InputError(f"{where} column {name!r} must hold numbers, got {col[0]!r}") from err
    values = values_in_unit(values, getattr(col, "unit", None), unit, f"{where} column {name!r}")
    values = np.where(rows, values, np.nan)
    bad = rows & ~np.isfinite(values)
    if np.any(bad):
        row = int(np.argmax(bad))
        raise InputError(
            f"{where} column {name!r} must hold finite numbers, got {values[row]} in row {row + 1}"
        )
    return values


def _times(columns: dict, where: str) -> np.ndarray:
    """MJD (UTC) from a ``time`` column (numbers, a unit, or a Time column) or ``date``."""
    from astropy.time import Time

    if "time" in columns:
        col = columns["time"]
        if isinstance(col, Time):  # an ECSV Time column: any format or scale, as UTC
            try:
                return np.asarray(col.utc.mjd, dtype=float)
            except ValueError as err:
                raise InputError(
                    f"{where} column 'time' must be convertible to UTC, got {col.scale} ({err})"
                ) from err
        return _column(columns, "time", where, unit="d")
    if "date" in columns:
        texts = [str(v) for v in columns["date"]]
        try:
            return Time(texts, scale="utc").mjd
        except ValueError:
            pass
        # dates with a UTC offset (ISO 8601 allows "+05:00"): each converted to UTC by the
        # scenario's own date reader
        from lensdelay.model.scenario import parse_date

        return Time(
            [parse_date(text, f"{where} column 'date' row {k + 1}") for k, text in enumerate(texts)]
        ).mjd
    raise InputError(f"{where} needs a column 'time' (MJD) or 'date' (ISO 8601, UTC); it has none")


def _limits(columns: dict, n: int, where: str) -> np.ndarray:
    """The ``upper_limit`` column as booleans (all false when absent)."""
    if "upper_limit" not in columns:
        return np.zeros(n, dtype=bool)
    raw = columns["upper_limit"]
    try:
        return np.asarray(
            [
                v
                if isinstance(v, (bool, np.bool_))
                else {"true": True, "false": False}[str(v).lower()]
                for v in raw
            ],
            dtype=bool,
        )
    except KeyError as err:
        raise InputError(
            f"{where} column 'upper_limit' must hold true or false, got {err}"
        ) from err


def read_light_curves(path, images=None) -> LightCurves:
    """Read and check a light-curve file.

    Units written in an ECSV header are honoured (``time`` in any unit of time or as a
    Time column, ``mag``/``mag_err`` in mag or mmag, ``flux``/``flux_err`` in any one
    unit); a unit that cannot be converted is refused. Rows marked ``upper_limit`` need
    no error (limits are not used by the estimators).

    Parameters
    ----------
    path : path
    images : sequence of str, optional
        The labels the scenario's family has; any other label is refused.
    """
    from astropy import units as u

    path = path_of(path, "light curves")
    where = f"light curves {str(path)!r}"
    if not path.is_file():
        raise InputError(f"{where} must be an existing file, got none")
    columns = read_table(path, "light curves")
    if "image" not in columns:
        raise InputError(f"{where} needs a column 'image'; it has {', '.join(columns)}")
    image = np.asarray([str(v) for v in columns["image"]])
    time = _times(columns, where)
    limit = _limits(columns, len(image), where)
    detected_rows = ~limit
    if "mag" in columns:
        if "mag_err" not in columns:
            raise InputError(f"{where} needs a column 'mag_err' beside 'mag', got none")
        mag = _column(columns, "mag", where, unit=u.mag)
        err = _column(columns, "mag_err", where, unit=u.mag, rows=detected_rows)
        if np.any(err[detected_rows] <= 0):
            bad = err[detected_rows]
            raise InputError(f"{where} column 'mag_err' must be > 0, got {bad[bad <= 0][0]:g}")
    elif "flux" in columns:
        if "flux_err" not in columns:
            raise InputError(f"{where} needs a column 'flux_err' beside 'flux', got none")
        flux = _column(columns, "flux", where)
        flux_unit = getattr(columns["flux"], "unit", None)
        ferr = _column(columns, "flux_err", where, unit=flux_unit, rows=detected_rows)
        if np.any(ferr[detected_rows] <= 0):
            bad = ferr[detected_rows]
            raise InputError(f"{where} column 'flux_err' must be > 0, got {bad[bad <= 0][0]:g}")
        if np.any(flux[detected_rows] <= 0):
            bad = flux[detected_rows]
            raise InputError(
                f"{where} column 'flux' must be > 0 (mark a non-detection with upper_limit), "
                f"got {bad[bad <= 0][0]:g}"
            )
        with np.errstate(all="ignore"):
            # a limit's flux may be <= 0 (a forced measurement): no magnitude then
            mag = np.where(flux > 0, FLUX_ZERO_POINT - 2.5 * np.log10(np.abs(flux)), np.nan)
            err = 2.5 / np.log(10) * ferr / flux
    else:
        raise InputError(
            f"{where} needs columns 'mag' and 'mag_err' (or 'flux' and 'flux_err'), got neither"
        )
    band = (
        np.asarray([str(v) for v in columns["band"]])
        if "band" in columns
        else np.full(len(image), "")
    )
    if images is not None:
        unknown = sorted(set(image) - set(images))
        if unknown:
            raise InputError(
                f"{where} column 'image' must name images of the family ({', '.join(images)}), "
                f"got {unknown[0]!r}"
            )
    for lab in dict.fromkeys(image.tolist()):
        for b in dict.fromkeys(band[image == lab].tolist()):
            t = time[(image == lab) & (band == b)]
            if np.any(np.diff(t) <= 0):
                k = int(np.argmax(np.diff(t) <= 0))
                raise InputError(
                    f"{where} column 'time' must increase within image {lab}"
                    + (f" band {b}" if b else "")
                    + f", got {t[k + 1]:.5f} after {t[k]:.5f}"
                )
    detected = sorted(set(image[~limit]))
    if len(detected) < 2:
        raise InputError(
            f"{where} must hold detections of at least two images to measure a delay, "
            f"got {len(detected)} ({', '.join(detected) or 'none'})"
        )
    instrument = None
    if "instrument" in columns:
        raw = columns["instrument"]
        mask = np.ma.getmaskarray(raw)
        if np.any(mask):
            raise InputError(
                f"{where} column 'instrument' must name the instrument of every row, got an "
                f"empty cell in row {int(np.argmax(mask)) + 1}"
            )
        instrument = np.asarray([str(v) for v in raw])
    return LightCurves(image, time, mag, err, band, limit, str(path), instrument)


def delays_json(result, provenance: dict | None = None) -> dict:
    """``delays.json`` (CONVENTIONS.md, "Light curves") plus the estimator's details."""
    return result.as_dict() | ({"provenance": provenance} if provenance else {})


#: A delays.json covariance whose standard deviations differ from the half 68% widths of
#: the same file by more than this factor is used, with a warning.
COVARIANCE_MISMATCH = 2.0


def read_delays_json(path, scenario) -> tuple[list, np.ndarray]:
    """Measured delays from a delays.json file, for a scenario's family.

    Returns the delays (``MeasuredDelay``, relative to the file's reference image, the
    measurable ones) and their covariance (days²) in the same order. Every problem is
    one :class:`InputError` naming the file and the key.
    """
    import json
    import math
    import warnings

    from lensdelay.errors import LensdelayWarning
    from lensdelay.model.scenario import MeasuredDelay

    path = path_of(path, "delays")
    where = f"delays {str(path)!r}"
    try:
        doc = json.loads(path.read_text())
    except FileNotFoundError as err:
        raise InputError(f"{where} must be an existing delays.json file, got none") from err
    except (OSError, ValueError) as err:
        raise InputError(f"{where} must be readable JSON, got: {err}") from err
    for key in ("reference_image", "family", "images"):
        if not isinstance(doc, dict) or key not in doc:
            raise InputError(
                f"{where} needs the key {key!r} (CONVENTIONS.md, Light curves), got none"
            )
    family, ref = doc["family"], doc["reference_image"]
    if not family:  # measured from curves alone: the scenario's transient's family
        family = scenario.transient.family if scenario.transient else scenario.families[0].label
    fams = {f.label: f for f in scenario.families}
    if not isinstance(family, str) or family not in fams:
        raise InputError(f"{where} family must be one of {', '.join(fams)}, got {family!r}")
    labels = fams[family].labels
    if not isinstance(ref, str) or ref not in labels:
        raise InputError(
            f"{where} reference_image must be an image of family {family} "
            f"({', '.join(labels)}), got {ref!r}"
        )
    images = doc["images"]
    if not isinstance(images, list) or not all(isinstance(im, dict) for im in images):
        raise InputError(
            f"{where} images must be a list of objects (label, delay_days), got "
            f"{type(images).__name__}" + (" of other things" if isinstance(images, list) else "")
        )
    delays, sigmas, listed = [], [], set()
    for im in images:
        lab = im.get("label")
        if lab not in labels:
            raise InputError(
                f"{where} images[].label must be an image of family {family} "
                f"({', '.join(labels)}), got {lab!r}"
            )
        if lab in listed:
            raise InputError(f"{where} images[].label must list each image once, got {lab!r} twice")
        listed.add(lab)
        d = im.get("delay_days")
        if lab == ref or d is None:
            continue  # the reference, or a delay the curves could not measure
        try:
            median, p16, p84 = (float(d[k]) for k in ("median", "p16", "p84"))
        except (KeyError, TypeError, ValueError) as err:
            raise InputError(
                f"{where} images[{lab}].delay_days must have numbers median, p16 and p84, got {d!r}"
            ) from err
        if not all(math.isfinite(v) for v in (median, p16, p84)):
            raise InputError(
                f"{where} images[{lab}].delay_days must hold finite numbers, got {d!r}"
            )
        if not (p16 < p84 and p16 <= median <= p84):
            raise InputError(
                f"{where} images[{lab}].delay_days must have p16 <= median <= p84 with "
                f"p16 < p84 (an interval of positive width), got p16 {p16:g}, median "
                f"{median:g}, p84 {p84:g}"
            )
        sigma = 0.5 * (p84 - p16)
        delays.append(MeasuredDelay(family, lab, ref, median, sigma))
        sigmas.append(sigma)
    if not delays:
        raise InputError(f"{where} holds no measured delay (every image unmeasurable), got none")
    cov = np.diag(np.square(sigmas))
    block = doc.get("covariance_days2")
    if block:
        try:
            order = list(block["labels"])
            matrix = np.asarray(block["matrix"], dtype=float)
        except (KeyError, TypeError, ValueError) as err:
            raise InputError(
                f"{where} covariance_days2 needs labels and a matrix of numbers, got {block!r}"
            ) from err
        if matrix.shape != (len(order), len(order)):
            raise InputError(
                f"{where} covariance_days2.matrix must be {len(order)} x {len(order)}, got "
                f"{matrix.shape}"
            )
        if not np.all(np.isfinite(matrix)):
            raise InputError(f"{where} covariance_days2.matrix must hold finite numbers, got NaN")
        if not np.allclose(matrix, matrix.T, rtol=1e-9, atol=1e-12):
            raise InputError(
                f"{where} covariance_days2.matrix must be symmetric, got a difference of "
                f"{np.max(np.abs(matrix - matrix.T)):.3g} days^2"
            )
        if np.any(np.diag(matrix) <= 0):
            k = int(np.argmax(np.diag(matrix) <= 0))
            raise InputError(
                f"{where} covariance_days2.matrix variances must be > 0, got "
                f"{matrix[k, k]:g} for {order[k]!r}"
            )
        if np.min(np.linalg.eigvalsh(matrix)) <= 0:
            raise InputError(
                f"{where} covariance_days2.matrix must be positive definite, got eigenvalues "
                f"down to {np.min(np.linalg.eigvalsh(matrix)):.3g} days^2"
            )
        pos = {lab: k for k, lab in enumerate(order)}
        idx = [pos.get(d.image) for d in delays]
        if None in idx:
            missing = delays[idx.index(None)].image
            raise InputError(
                f"{where} covariance_days2.labels must include {missing!r}, got {order}"
            )
        cov = matrix[np.ix_(idx, idx)]
        ratio = np.sqrt(np.diag(cov)) / np.asarray(sigmas)
        if np.any((ratio > COVARIANCE_MISMATCH) | (ratio < 1 / COVARIANCE_MISMATCH)):
            k = int(np.argmax(np.abs(np.log(ratio))))
            warnings.warn(
                f"{where}: the covariance gives {delays[k].image} a sigma of "
                f"{np.sqrt(cov[k, k]):.3g} d, but its p16-p84 half width is {sigmas[k]:.3g} d; "
                "the covariance is used",
                LensdelayWarning,
                stacklevel=2,
            )
        delays = [
            MeasuredDelay(d.family, d.image, d.relative_to, d.days, float(np.sqrt(cov[k, k])))
            for k, d in enumerate(delays)
        ]
    return delays, cov


#: A forecast's 95% interval of a delay, widened by this many of its own widths on each
#: side, bounds the light-curve search (about ±6σ for a Gaussian).
FORECAST_PRIOR_WIDTHS = 1.0


def delay_ranges_from_forecast(path, reference: str, family: str | None = None) -> dict:
    """Per image, (low, high) days after ``reference`` from a forecast.json's delays.

    The forecast gives each image's delay after the image the transient was seen in; the
    range after ``reference`` is the widest difference of the two intervals, each widened
    by FORECAST_PRIOR_WIDTHS of its width on both sides.
    """
    import json

    where = str(path)
    try:
        doc = json.loads(Path(path).read_text())
        images = doc["images"]
    except (OSError, ValueError, KeyError, TypeError) as err:
        raise InputError(
            "must be a forecast.json with an 'images' list (lensdelay forecast --out), got "
            f"{type(err).__name__}",
            where,
        ) from err
    ranges = {}
    for k, im in enumerate(images if isinstance(images, list) else []):
        try:
            if family and im.get("family") not in (None, family):
                continue
            d = im["delay_days"]
            lo, hi = float(d["p2.5"]), float(d["p97.5"])
        except (KeyError, TypeError, ValueError, AttributeError) as err:
            raise InputError(
                f"images[{k}].delay_days must hold numbers p2.5 and p97.5, got "
                f"{type(err).__name__}",
                where,
            ) from err
        if not (np.isfinite(lo) and np.isfinite(hi) and lo <= hi):
            raise InputError(
                f"images[{k}].delay_days must have finite p2.5 <= p97.5, got {lo}, {hi}", where
            )
        pad = FORECAST_PRIOR_WIDTHS * max(hi - lo, 0.5)
        ranges[str(im.get("label"))] = (lo - pad, hi + pad)
    if reference not in ranges:
        raise InputError(
            f"images must include the reference image {reference!r} (of the same system), "
            f"got {', '.join(sorted(ranges)) or 'none'}",
            where,
        )
    ref_lo, ref_hi = ranges.pop(reference)
    return {lab: (lo - ref_hi, hi - ref_lo) for lab, (lo, hi) in ranges.items()}
