"""Scenarios: the observations of one lens system, parsed and validated.

A scenario (TOML) holds what was measured -- lens redshift, sky position, image
families, lens-light centre, the transient, measured delays, the observing site --
and names its mass model inline (``[[mass]]``) or by a file in ``models/``. This
module turns the parsed document into frozen dataclasses; it reads no files itself
(the model file, if any, comes through a callback from :mod:`lensdelay.io.reading`).
"""

from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, field
from typing import Any, Callable

from astropy import units as u
from astropy.coordinates import SkyCoord
from astropy.cosmology import FLRW
from astropy.time import Time

import numpy as np

from lensdelay.model.cosmology import cosmology_from_spec
from lensdelay.model.kinematics import (
    KINEMATICS_KEYS,
    LINE_OF_SIGHT_KEYS,
    Kinematics,
    parse_kinematics,
    parse_line_of_sight,
)
from lensdelay.errors import InputError, LensdelayWarning, choices_text, suggest
from lensdelay.model.recipe import (
    MEMBER_KEYS,
    MassModel,
    MemberGroup,
    ModelParameter,
    default_galaxy_recipe,
    parse_mass_entries,
    parse_member_parameters,
    parse_parameter,
)

__all__ = [
    "MAX_DATE_SIGMA_DAYS",
    "MANY_MEMBERS",
    "MEMBER_STEP_SECONDS",
    "ImageObs",
    "Family",
    "LensLight",
    "Transient",
    "MeasuredDelay",
    "Site",
    "Scenario",
    "parse_date",
    "site_from_table",
    "MIN_REDSHIFT_GAP",
    "TOP_KEYS",
    "MEMBERS_KEYS",
    "parse_scenario",
    "values_in_unit",
]


#: The largest 1-σ error of a date the tool accepts (detection, alert or sighting): ten
#: years; a date known worse than that is no date to forecast from.
MAX_DATE_SIGMA_DAYS = 3650.0
#: Above this many member galaxies a scenario is warned about the cost of a fit; the
#: cost per member and sampler step of 64 walkers on two cores (benchmarks/bench_cluster.py:
#: 3.5 ms per member per step with 40 images).
MANY_MEMBERS = 500
MEMBER_STEP_SECONDS = 3.5e-3


@dataclass(frozen=True)
class ImageObs:
    """One measured image: label, position (arcsec), 1-σ per coordinate, brightness."""

    label: str
    x: float
    y: float
    sigma: float
    flux: float | None = None
    magnitude: float | None = None


@dataclass(frozen=True)
class Family:
    """The images of one multiply imaged source."""

    label: str
    redshift: float  # the measured redshift, or the start value of a free one
    images: tuple[ImageObs, ...]
    #: A redshift not measured: a free parameter (bounds, optional Gaussian prior);
    #: None when ``redshift`` is measured (CONVENTIONS.md, "Families of unknown redshift").
    redshift_parameter: ModelParameter | None = None

    @property
    def redshift_free(self) -> bool:
        """True when the redshift is a free parameter of the fit."""
        return self.redshift_parameter is not None

    def image(self, label: str) -> ImageObs:
        """The image called ``label``."""
        for im in self.images:
            if im.label == label:
                return im
        raise KeyError(label)

    @property
    def labels(self) -> list[str]:
        """Image labels in the file's order."""
        return [im.label for im in self.images]


@dataclass(frozen=True)
class LensLight:
    """The measured centre of the lens light and its 1-σ error (arcsec)."""

    x: float
    y: float
    sigma: float


@dataclass(frozen=True)
class Transient:
    """What was seen: in which image of which family, when, how bright."""

    family: str
    seen_in: str
    date: Time
    date_sigma_days: float = 0.0
    magnitude: float | None = None
    light_curves: str | None = None  # a light-curve file, relative to the scenario


@dataclass(frozen=True)
class MeasuredDelay:
    """Δt = t_image − t_relative_to, in days, with 1-σ error."""

    family: str
    image: str
    relative_to: str
    days: float
    sigma: float


@dataclass(frozen=True)
class Site:
    """A ground site (latitude, longitude, height) or a space observatory (elongation range)."""

    kind: str  # "ground" or "space"
    latitude: float = 0.0
    longitude: float = 0.0
    height: float = 0.0
    twilight: float = -12.0  # Sun altitude limit, degrees
    min_altitude: float = 30.0  # target altitude limit, degrees
    min_hours: float = 1.0  # needed per night
    solar_elongation: tuple[float, float] = (0.0, 180.0)


@dataclass(frozen=True)
class Scenario:
    """All observations of one system, plus the mass model it names."""

    name: str
    source: str
    lens_redshift: float
    reference_source_redshift: float
    sky: SkyCoord | None
    cosmology: FLRW
    families: tuple[Family, ...]
    model: MassModel
    lens_light: LensLight | None = None
    transient: Transient | None = None
    delays: tuple[MeasuredDelay, ...] = ()
    site: Site | None = None
    extra: dict = field(default_factory=dict)
    #: Covariance (days²) of ``delays``, in their order, when they were measured together
    #: (from light curves: CONVENTIONS.md "Light curves"); None: independent, each its sigma.
    delay_covariance: np.ndarray | None = field(default=None, repr=False)
    #: Model error of image positions (arcsec), added in quadrature to every image's
    #: sigma; set after a poor fit (see :mod:`lensdelay.inference.misfit`), 0 as read.
    position_floor: float = 0.0
    #: The main lens galaxy's measured velocity dispersion (``[kinematics]``), or None.
    kinematics: Kinematics | None = None
    #: This lens's external-convergence prior (mean, sigma) from ``[line_of_sight]``, or
    #: None (the caller's prior applies).
    kappa_ext_prior: tuple[float, float] | None = None

    def family(self, label: str) -> Family:
        """The family called ``label``."""
        for f in self.families:
            if f.label == label:
                return f
        raise KeyError(label)

    @property
    def n_images(self) -> int:
        """Number of observed images over all families."""
        return sum(len(f.images) for f in self.families)


# -- a small validating reader ---------------------------------------------------------
class _Table:
    """Reads typed fields from one TOML table and refuses unknown keys."""

    def __init__(self, data: Any, where: str, allowed: tuple[str, ...]):
        if data is None:
            raise InputError(
                f"{where} is required ([{where}] with {', '.join(allowed[:2])}), got nothing"
            )
        if not isinstance(data, dict):
            raise InputError(f"{where} must be a table, got {data!r}")
        self.data, self.where, self.allowed = data, where, allowed
        for key in data:
            if key not in allowed:
                raise InputError(
                    f"{where}.{key} is not a known key{suggest(key, allowed)}; "
                    f"allowed: {choices_text(allowed)}, got {key!r}"
                )

    def name(self, key):
        return f"{self.where}.{key}"

    def number(self, key, default: Any = ..., *, lo=None, hi=None, lo_open=False, hi_open=False):
        if key not in self.data:
            if default is ...:
                raise InputError(f"{self.name(key)} is required, got nothing")
            return default
        v = self.data[key]
        if isinstance(v, bool) or not isinstance(v, (int, float)):
            raise InputError(f"{self.name(key)} must be a number, got {v!r}")
        v = float(v)
        if not math.isfinite(v):
            raise InputError(f"{self.name(key)} must be finite, got {v}")
        if lo is not None and (v < lo or (lo_open and v == lo)):
            raise InputError(
                f"{self.name(key)} must be {'>' if lo_open else '>='} {lo:g}, got {v:g}"
            )
        if hi is not None and (v > hi or (hi_open and v == hi)):
            raise InputError(
                f"{self.name(key)} must be {'<' if hi_open else '<='} {hi:g}, got {v:g}"
            )
        return v

    def text(self, key, default: Any = ...):
        if key not in self.data:
            if default is ...:
                raise InputError(f"{self.name(key)} is required, got nothing")
            return default
        v = self.data[key]
        if not isinstance(v, str) or not v.strip():
            raise InputError(f"{self.name(key)} must be a non-empty string, got {v!r}")
        return v

    def label(self, key) -> str:
        """A family or image label: a string every output can carry as written.

        Control characters (line breaks, tabs), braces and double quotes are refused:
        they would end a line of a table or calendar, or a text field of a region file.
        """
        v = self.text(key)
        bad = [c for c in v if c in '{}"' or ord(c) < 32 or ord(c) == 127]
        if bad:
            raise InputError(
                f"{self.name(key)} must not contain braces, double quotes or control "
                f"characters (they cannot be written into every output), got {v!r}"
            )
        return v

    def pair(self, key, shape: str) -> tuple[float, float]:
        """A two-number list ``[a, b]``; ``shape`` says what it holds, for the message."""
        v = self.data.get(key)
        if not (
            isinstance(v, list)
            and len(v) == 2
            and all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v)
        ):
            raise InputError(f"{self.name(key)} must be {shape}, got {v!r}")
        return float(v[0]), float(v[1])

    def numbers(self, key, *, lo=None, hi=None, lo_open=False) -> tuple[float, ...]:
        """A non-empty list of finite numbers, each within [lo, hi] (lo open if asked)."""
        v = self.data.get(key)
        if v is None:
            raise InputError(f"{self.name(key)} is required, got nothing")
        if not (
            isinstance(v, list)
            and v
            and all(isinstance(x, (int, float)) and not isinstance(x, bool) for x in v)
            and all(math.isfinite(x) for x in v)
        ):
            raise InputError(f"{self.name(key)} must be a non-empty list of numbers, got {v!r}")
        for x in v:
            if (lo is not None and (x < lo or (lo_open and x == lo))) or (
                hi is not None and x > hi
            ):
                rule = f"{'>' if lo_open else '>='} {lo:g}" if lo is not None else ""
                rule += (" and " if rule and hi is not None else "") + (
                    f"<= {hi:g}" if hi is not None else ""
                )
                raise InputError(f"{self.name(key)} must hold numbers {rule}, got {v!r}")
        return tuple(float(x) for x in v)

    def table_list(self, key, required=False) -> list:
        v = self.data.get(key, [])
        if required and not v:
            raise InputError(f"{self.name(key)} needs at least one [[{key}]] table, got nothing")
        if not isinstance(v, list):
            raise InputError(f"{self.name(key)} must be a list of [[{key}]] tables, got {v!r}")
        return v


def parse_date(value, where: str) -> Time:
    """An ISO 8601 date or date-time as a UTC astropy Time.

    ``2027-03-04``, ``2027-03-04T06:00:00Z``; a date-time with a UTC offset
    (``2027-03-04T01:00:00-05:00``) is converted to UTC, whatever the offset's sign.
    """
    import datetime as _dt

    if isinstance(value, (_dt.datetime, _dt.date)):
        value = value.isoformat()
    if not isinstance(value, str):
        raise InputError(f"{where} must be an ISO 8601 date such as 2027-03-04, got {value!r}")
    text = value.strip()
    if text.endswith(("Z", "z")):
        text = text[:-1] + "+00:00"
    try:
        parsed = _dt.datetime.fromisoformat(text)
    except ValueError as err:
        raise InputError(
            f"{where} must be an ISO 8601 date such as 2027-03-04, got {value!r}"
        ) from err
    if parsed.tzinfo is not None:
        parsed = parsed.astimezone(_dt.timezone.utc).replace(tzinfo=None)
    return Time(parsed, scale="utc")


#: Smallest source-minus-lens redshift accepted (common practice: a source this close
#: behind the lens is not lensed by it to any measurable degree).
MIN_REDSHIFT_GAP = 0.01

TOP_KEYS = (
    "name",
    "description",
    "lens",
    "sky",
    "cosmology",
    "family",
    "lens_light",
    "transient",
    "delay",
    "site",
    "mass",
    "model",
    "members",
    "kinematics",
    "line_of_sight",
)
MEMBERS_KEYS = ("catalogue", "exclude", *MEMBER_KEYS)


def parse_scenario(
    doc: dict,
    source: str,
    load_model: Callable[[str], MassModel] | None = None,
    load_table: Callable[[str], dict] | None = None,
) -> Scenario:
    """Validate a parsed scenario document.

    Parameters
    ----------
    doc : dict
        The parsed TOML.
    source : str
        The file name, for messages.
    load_model : callable, optional
        Reads ``model = "..."`` references; required when the scenario uses one.
    load_table : callable, optional
        Reads ``[members] catalogue = "..."``: returns column name -> array (masked
        where cells are empty); required when the scenario has members.
    """
    try:
        return _parse(doc, source, load_model, load_table)
    except InputError as err:
        raise err.with_source(source) from err.__cause__


def _column(columns: dict, name: str, ref: str, n: int, default=None, unit=None) -> np.ndarray:
    """A float column of a members table; masked or missing cells take ``default``.

    A column that carries a unit (ECSV ``unit:``) is converted to ``unit``; one whose
    unit cannot be converted is refused. Without a unit the column is taken to be in
    ``unit`` (CONVENTIONS.md: arcsec, degrees, mag).
    """
    if name not in columns:
        if default is None:
            raise InputError(
                f"members.catalogue {ref!r} needs a column {name!r}; "
                f"it has {choices_text(list(columns))}"
            )
        return np.full(n, float(default))
    try:
        col = np.ma.masked_invalid(np.ma.asarray(columns[name], dtype=float))
    except (TypeError, ValueError) as err:
        raise InputError(
            f"members.catalogue {ref!r} column {name!r} must hold numbers, "
            f"got {list(columns[name])[:3]!r}"
        ) from err
    if default is None and np.any(np.ma.getmaskarray(col)):
        raise InputError(f"members.catalogue {ref!r} column {name!r} has empty cells")
    values = np.asarray(col.filled(default if default is not None else np.nan), dtype=float)
    given = getattr(columns[name], "unit", None)
    return values_in_unit(values, given, unit, f"members.catalogue {ref!r} column {name!r}")


def values_in_unit(values: np.ndarray, given, unit, what: str) -> np.ndarray:
    """``values`` (in unit ``given``, as a table column declares it) converted to ``unit``.

    No conversion when either is None (a column without a unit is taken to be in the
    unit CONVENTIONS.md states). A unit that does not convert is refused, naming ``what``.
    """
    if unit is None or given is None:
        return values
    try:
        return (values * u.Unit(given)).to_value(unit)
    except (u.UnitsError, ValueError, TypeError) as err:
        raise InputError(f"{what} must have a unit convertible to {unit}, got {given}") from err


def _parse_members(raw, load_table, sky) -> MemberGroup:
    """``[members]``: the catalogue's galaxies and their shared scaling parameters."""
    tab = _Table(raw, "members", MEMBERS_KEYS)
    ref = tab.text("catalogue")
    if load_table is None:
        raise InputError(f"members.catalogue = {ref!r} needs a file loader, got none")
    exclude = raw.get("exclude", [])
    if not isinstance(exclude, list):
        raise InputError(f"members.exclude must be a list of ids, got {exclude!r}")
    exclude = {str(e) for e in exclude}
    params = parse_member_parameters({k: v for k, v in raw.items() if k in MEMBER_KEYS})
    columns = load_table(ref)
    if "id" not in columns:
        raise InputError(
            f"members.catalogue {ref!r} needs a column 'id'; it has {choices_text(list(columns))}"
        )
    ids = [str(v) for v in columns["id"]]
    n = len(ids)
    seen_ids = set()
    for i in ids:
        if i in seen_ids:
            raise InputError(
                f"members.catalogue {ref!r} column 'id' must name each member once, got {i!r} twice"
            )
        seen_ids.add(i)
    if "x" in columns and "y" in columns:
        x = _column(columns, "x", ref, n, unit=u.arcsec)
        y = _column(columns, "y", ref, n, unit=u.arcsec)
    elif "ra" in columns and "dec" in columns:
        if sky is None:
            raise InputError(
                f"members.catalogue {ref!r} gives ra, dec: the scenario needs [sky] ra, dec "
                "(its origin) to place them, got nothing"
            )
        where = SkyCoord(
            _column(columns, "ra", ref, n, unit=u.deg) * u.deg,
            _column(columns, "dec", ref, n, unit=u.deg) * u.deg,
        )
        east, north = sky.spherical_offsets_to(where)
        x, y = east.to_value(u.arcsec), north.to_value(u.arcsec)
    else:
        raise InputError(
            f"members.catalogue {ref!r} needs columns x, y (arcsec) or ra, dec (degrees); "
            f"it has {choices_text(list(columns))}"
        )
    mag = _column(columns, "mag", ref, n, unit=u.mag)
    q = _column(columns, "axis_ratio", ref, n, default=1.0, unit=u.dimensionless_unscaled)
    pa = _column(columns, "position_angle", ref, n, default=0.0, unit=u.deg)
    if np.any((q <= 0) | (q > 1)):
        raise InputError(
            f"members.catalogue {ref!r} column 'axis_ratio' must be in (0, 1], "
            f"got {q[(q <= 0) | (q > 1)][0]:g}"
        )
    unknown = sorted(exclude - set(ids))
    if unknown:
        raise InputError(
            f"members.exclude must name ids of members.catalogue {ref!r}, got "
            f"{', '.join(repr(u) for u in unknown[:5])}, not in it (its ids begin "
            f"{', '.join(repr(i) for i in ids[:5])})"
        )
    keep = np.array([i not in exclude for i in ids])
    if not np.any(keep):
        raise InputError(f"members.catalogue {ref!r} has no member left after exclude, got none")
    return MemberGroup(
        params,
        tuple(i for i, k in zip(ids, keep) if k),
        x[keep],
        y[keep],
        mag[keep],
        q[keep],
        pa[keep],
    )


def _family_redshift(raw, where: str, z_l: float) -> tuple[float, ModelParameter | None]:
    """A family's redshift: a number (measured) or a free-parameter table (unknown).

    A free redshift's bounds must lie behind the lens by at least ``MIN_REDSHIFT_GAP``
    over their whole range: the deflection scale D_ls/D_s falls to zero at the lens.
    """
    gap = (
        f"must exceed lens.redshift {z_l:g} by at least {MIN_REDSHIFT_GAP:g} "
        "(closer, D_ls -> 0 and delays diverge)"
    )
    if raw is None:
        raise InputError(f"{where} is required (a number, or {{ value, min, max }}), got nothing")
    if isinstance(raw, dict) and not {"min", "max"} <= set(raw):
        missing = " and ".join(k for k in ("min", "max") if k not in raw)
        raise InputError(
            f"{where} must give min and max (the range of an unknown redshift; or a number "
            f"for a measured one), got no {missing}"
        )
    param = parse_parameter("redshift", raw, where)
    if param.vary and isinstance(raw, dict) and not param.max - param.min > 1e-3:
        raise InputError(
            f"{where}.max must exceed min by more than 0.001 (for a known redshift give a "
            f"number), got min {param.min:g}, max {param.max:g}"
        )
    if param.vary and isinstance(raw, dict):
        if not math.isfinite(param.min) or param.min < z_l + MIN_REDSHIFT_GAP:
            raise InputError(f"{where}.min {gap}, got {param.min:g}")
        if not math.isfinite(param.max) or param.max > 20.0:
            raise InputError(f"{where}.max must be finite and at most 20, got {param.max:g}")
        return param.value, param
    if not param.value <= 20.0:
        raise InputError(f"{where} must be at most 20, got {param.value:g}")
    if param.value < z_l + MIN_REDSHIFT_GAP:
        raise InputError(f"{where} {gap}, got {param.value:g}")
    return param.value, None


def _parse(doc, source, load_model, load_table=None):
    top = _Table(doc, "scenario", TOP_KEYS)
    name = top.text("name", default=source.rsplit("/", 1)[-1].removesuffix(".toml"))
    lens_tab = _Table(doc.get("lens"), "lens", ("redshift", "reference_source_redshift"))
    z_l = lens_tab.number("redshift", lo=0.0, lo_open=True, hi=20.0)

    sky = None
    if "sky" in doc:
        st = _Table(doc["sky"], "sky", ("ra", "dec"))
        sky = SkyCoord(
            st.number("ra", lo=0.0, hi=360.0) * u.deg,
            st.number("dec", lo=-90.0, hi=90.0) * u.deg,
            frame="icrs",
        )

    cosmo = cosmology_from_spec(_check_cosmology(doc.get("cosmology")))

    families = []
    seen_fam = set()
    for i, fam_raw in enumerate(top.table_list("family", required=True)):
        ft = _Table(fam_raw, f"family[{i}]", ("label", "redshift", "image"))
        label = ft.label("label")
        if label in seen_fam:
            raise InputError(f"family[{i}].label must be unique, got {label!r} twice")
        seen_fam.add(label)
        z_s, z_free = _family_redshift(fam_raw.get("redshift"), f"family[{i}].redshift", z_l)
        images, labels = [], set()
        for j, im_raw in enumerate(ft.table_list("image", required=True)):
            it = _Table(
                im_raw, f"family[{i}].image[{j}]", ("label", "x", "y", "sigma", "flux", "magnitude")
            )
            lab = it.label("label")
            if lab in labels:
                raise InputError(
                    f"family[{i}].image[{j}].label must be unique within family "
                    f"{label!r}, got {lab!r} twice"
                )
            labels.add(lab)
            x = it.number("x", lo=-3600.0, hi=3600.0)
            y = it.number("y", lo=-3600.0, hi=3600.0)
            sigma = it.number("sigma", lo=0.0, lo_open=True, hi=60.0)
            if sigma < 1e-5:
                warnings.warn(
                    f"{source}: family[{i}].image[{j}].sigma = {sigma:g} arcsec is below "
                    "0.01 mas; is it in arcsec?",
                    LensdelayWarning,
                    stacklevel=2,
                )
            flux = it.number("flux", default=None, lo=0.0, lo_open=True)
            mag = it.number("magnitude", default=None, lo=-30.0, hi=40.0)
            for other in images:
                if math.hypot(x - other.x, y - other.y) < 1e-6:
                    raise InputError(
                        f"family[{i}].image[{j}] must not lie where image {other.label!r} lies "
                        f"(two images of one source are distinct), got ({x:g}, {y:g}) twice"
                    )
            images.append(ImageObs(lab, x, y, sigma, flux, mag))
        families.append(Family(label, z_s, tuple(images), z_free))
    fixed = [f.redshift for f in families if not f.redshift_free]
    if not fixed and "reference_source_redshift" not in lens_tab.data:
        raise InputError(
            "lens.reference_source_redshift is needed when no family has a measured "
            "redshift (the mass parameters are defined at it), got nothing"
        )
    z_ref = lens_tab.number(
        "reference_source_redshift", default=fixed[0] if fixed else None, hi=20.0
    )
    if z_ref <= z_l:
        raise InputError(
            f"lens.reference_source_redshift must be greater than lens.redshift "
            f"{z_l:g}, got {z_ref:g}"
        )

    lens_light = None
    if "lens_light" in doc:
        lt = _Table(doc["lens_light"], "lens_light", ("x", "y", "sigma"))
        lens_light = LensLight(
            lt.number("x"), lt.number("y"), lt.number("sigma", lo=0.0, lo_open=True)
        )

    fam_by = {f.label: f for f in families}
    transient = None
    if "transient" in doc:
        tt = _Table(
            doc["transient"],
            "transient",
            ("family", "seen_in", "date", "date_sigma_days", "magnitude", "light_curves"),
        )
        fam = tt.text("family", default=families[0].label)
        if fam not in fam_by:
            raise InputError(
                f"transient.family must name a family ({choices_text(fam_by)}), got {fam!r}"
            )
        seen = tt.text("seen_in")
        if seen not in fam_by[fam].labels:
            raise InputError(
                f"transient.seen_in must be an image of family {fam!r} "
                f"({choices_text(fam_by[fam].labels)}), got {seen!r}"
            )
        if "date" not in tt.data:
            raise InputError("transient.date is required (ISO 8601, UTC), got nothing")
        date = parse_date(tt.data["date"], "transient.date")
        transient = Transient(
            fam,
            seen,
            date,
            tt.number("date_sigma_days", 0.0, lo=0.0, hi=MAX_DATE_SIGMA_DAYS),
            tt.number("magnitude", None, lo=-30.0, hi=40.0),
            tt.text("light_curves", default=None),
        )

    delays = []
    for k, d_raw in enumerate(top.table_list("delay")):
        dt = _Table(d_raw, f"delay[{k}]", ("family", "image", "relative_to", "days", "sigma"))
        fam = dt.text("family", default=families[0].label)
        if fam not in fam_by:
            raise InputError(
                f"delay[{k}].family must name a family ({choices_text(fam_by)}), got {fam!r}"
            )
        labels = fam_by[fam].labels
        for key in ("image", "relative_to"):
            if dt.text(key) not in labels:
                raise InputError(
                    f"delay[{k}].{key} must be an image of family {fam!r} "
                    f"({choices_text(labels)}), got {dt.text(key)!r}"
                )
        if dt.text("image") == dt.text("relative_to"):
            raise InputError(
                f"delay[{k}].relative_to must differ from delay[{k}].image, got "
                f"{dt.text('image')!r} for both"
            )
        delays.append(
            MeasuredDelay(
                fam,
                dt.text("image"),
                dt.text("relative_to"),
                dt.number("days", lo=-1e6, hi=1e6),
                dt.number("sigma", lo=0.0, lo_open=True),
            )
        )

    site = site_from_table(doc["site"]) if "site" in doc else None
    kinematics = (
        parse_kinematics(_Table(doc["kinematics"], "kinematics", KINEMATICS_KEYS))
        if "kinematics" in doc
        else None
    )
    kappa_ext = (
        parse_line_of_sight(_Table(doc["line_of_sight"], "line_of_sight", LINE_OF_SIGHT_KEYS))
        if "line_of_sight" in doc
        else None
    )

    if "mass" in doc and "model" in doc:
        raise InputError(
            'scenario must give either [[mass]] entries or model = "models/NAME.toml" '
            "(or neither, for the default galaxy recipe), got both"
        )
    if "mass" not in doc and "model" not in doc:
        # the default galaxy-scale recipe: power law with the population slope prior + shear
        model = default_galaxy_recipe(
            np.concatenate([[im.x for im in f.images] for f in families]),
            np.concatenate([[im.y for im in f.images] for f in families]),
            (lens_light.x, lens_light.y) if lens_light is not None else (0.0, 0.0),
        )
    elif "mass" in doc:
        model = parse_mass_entries(doc["mass"], label=f"{name}-inline")
    else:
        ref = top.text("model")
        if load_model is None:
            raise InputError(f"model = {ref!r} needs a file loader, got none")
        model = load_model(ref)

    if "members" in doc:
        members = _parse_members(doc["members"], load_table, sky)
        if len(members.ids) > MANY_MEMBERS:
            # the cost of a fit grows with members x images x walkers x steps
            hours = len(members.ids) * MEMBER_STEP_SECONDS * 2000 / 3600.0
            warnings.warn(
                f"{source}: members.catalogue lists {len(members.ids)} member galaxies; a fit "
                f"and forecast evaluates every one at every image for each walker and step "
                f"(about {hours:.0f} h for 2000 sampler steps on two cores): keep the members "
                "near the images, or expect a long run",
                LensdelayWarning,
                stacklevel=2,
            )
        model = model.with_members(members)

    return Scenario(
        name,
        source,
        z_l,
        z_ref,
        sky,
        cosmo,
        tuple(families),
        model,
        lens_light,
        transient,
        tuple(delays),
        site,
        kinematics=kinematics,
        kappa_ext_prior=kappa_ext,
    )


def _check_cosmology(spec):
    if spec is None:
        return None
    if not isinstance(spec, dict):
        raise InputError(f"cosmology must be a table, got {spec!r}")
    _Table(spec, "cosmology", ("H0", "Om0", "name"))
    return spec


def site_from_table(raw) -> Site:
    """A :class:`Site` from a scenario's ``[site]`` table (a dict), checked as the file is.

    ``latitude``, ``longitude``, ``height`` (and ``twilight``, ``min_altitude``,
    ``min_hours``) for a ground site, or ``solar_elongation = [min, max]`` for a space
    observatory; a bad value is one :class:`InputError` naming ``site.<key>``.
    """
    st = _Table(
        raw,
        "site",
        (
            "latitude",
            "longitude",
            "height",
            "twilight",
            "min_altitude",
            "min_hours",
            "solar_elongation",
        ),
    )
    if "solar_elongation" in st.data:
        if any(k in st.data for k in ("latitude", "longitude", "height")):
            raise InputError(
                "site must be either a ground site (latitude, longitude, height) or "
                "a space observatory (solar_elongation), got both"
            )
        el = st.data["solar_elongation"]
        lo, hi = st.pair("solar_elongation", "[min, max] in degrees")
        if not (0.0 <= lo < hi <= 180.0):
            raise InputError(
                f"site.solar_elongation must satisfy 0 <= min < max <= 180 degrees, got {el!r}"
            )
        return Site("space", solar_elongation=(lo, hi))
    return Site(
        "ground",
        st.number("latitude", lo=-90.0, hi=90.0),
        st.number("longitude", lo=-180.0, hi=360.0),
        st.number("height", 0.0, lo=-500.0, hi=9000.0),
        st.number("twilight", -12.0, lo=-90.0, hi=0.0),
        st.number("min_altitude", 30.0, lo=0.0, hi=90.0, hi_open=True),
        st.number("min_hours", 1.0, lo=0.0, lo_open=True, hi=24.0),
    )
