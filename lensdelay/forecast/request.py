"""What a forecast is asked for: one request object, validated on construction.

The command line, the Python interface, a catalogue run and a prepared lens all build a
:class:`ForecastRequest`; :func:`lensdelay.forecast.pipeline.run_forecast` takes it. Every
default is defined once: here for the request's own choices, in
:class:`~lensdelay.forecast.samples.ForecastSettings` for the priors, and in
:class:`~lensdelay.inference.sampling.SamplerSettings` for the sampler.
"""

from __future__ import annotations

from dataclasses import dataclass, field, fields, replace

from astropy.time import Time

from lensdelay.errors import InputError, choices_text, is_real, pair_of_numbers
from lensdelay.forecast.perturbers import PerturberPopulation
from lensdelay.forecast.samples import WEIGHTINGS, ForecastSettings, check_sample_count
from lensdelay.inference.priors import check_kappa_prior, kappa_prior_of
from lensdelay.inference.sampling import SamplerSettings, check_sampler_settings
from lensdelay.model.scenario import Site, parse_date, site_from_table

__all__ = ["ForecastRequest", "perturber_population"]


@dataclass(frozen=True)
class ForecastRequest:
    """The choices of one forecast (``lensdelay forecast``'s options), checked when made.

    Attributes
    ----------
    n_samples : int
        Posterior samples of every image's delay and date.
    seed : int
        The one seed every stage's random numbers are spawned from.
    h0, kappa_ext : (float, float) or None
        Gaussian priors (mean, sigma) on H0 (km/s/Mpc) and the external convergence;
        None: the defaults, N(70, 5) and N(0, 0.05).
    cosmology_name : str or None
        An astropy realisation ("Planck18"): its own H0 is then used, fixed.
    microlensing, depth : float or None
        Microlensing scatter of the magnitudes and the survey depth (mag); None: defaults.
    unseen : (float, float), PerturberPopulation or None
        Unseen perturbers (share of the convergence, detection mass in Msun; ``(0, 0)``
        off), or a whole population; None: the default population.
    weighting : str
        How several models are weighted (one of ``WEIGHTINGS``).
    seen : tuple of str, or str
        Sightings of further images, ``[FAMILY/]LABEL=DATE[±SIGMA]`` (one string: one
        sighting).
    site : Site, dict or None
        The observing site (default: the scenario's own); a dict is read as a scenario's
        ``[site]`` table (``latitude``, ``longitude``, ``height``, or
        ``solar_elongation``).
    now : Time, str, datetime or None
        The moment statuses are judged at (default: the time the forecast runs); an ISO
        8601 date or date-time (``"2027-03-04"``, ``"2027-03-04T06:00Z"``) or a
        ``datetime`` is read as UTC and kept as a ``Time``.
    sampler : SamplerSettings
        Walkers, steps and mass-model prior of the posterior sampling.
    """

    n_samples: int = 20000
    seed: int = 1
    h0: tuple[float, float] | None = None
    cosmology_name: str | None = None
    kappa_ext: tuple[float, float] | None = None
    microlensing: float | None = None
    depth: float | None = None
    unseen: tuple[float, float] | PerturberPopulation | None = None
    weighting: str = "bic"
    seen: tuple[str, ...] = ()
    site: Site | None = None
    now: Time | str | None = None
    sampler: SamplerSettings = field(default_factory=SamplerSettings)

    def __post_init__(self):
        # the Python interface's values in the command line's types first
        if self.h0 is not None:
            object.__setattr__(self, "h0", pair_of_numbers(self.h0, "h0"))
        if self.kappa_ext is not None:
            object.__setattr__(self, "kappa_ext", kappa_prior_of(self.kappa_ext))
        for name in ("microlensing", "depth"):
            value = getattr(self, name)
            if value is not None:
                if not is_real(value):
                    raise InputError(f"{name} must be a number, got {value!r}")
                object.__setattr__(self, name, float(value))
        if isinstance(self.seen, str):
            object.__setattr__(self, "seen", (self.seen,))
        if self.site is not None and not isinstance(self.site, Site):
            if not isinstance(self.site, dict):
                raise InputError(
                    "site must be a Site or a dict of [site]'s keys (latitude, longitude, "
                    f"height; or solar_elongation), got {self.site!r}"
                )
            object.__setattr__(self, "site", site_from_table(self.site))
        # the checks in the order the command line has always made them
        check_sampler_settings(self.sampler.walkers, self.sampler.steps, self.seed)
        if self.h0 is not None:
            if not self.h0[1] > 0:
                raise InputError(f"h0 sigma must be > 0, got {self.h0[1]:g}")
            if not 10 <= self.h0[0] <= 200:
                raise InputError(f"h0 mean must be between 10 and 200 km/s/Mpc, got {self.h0[0]:g}")
        if self.microlensing is not None and self.microlensing < 0:
            raise InputError(f"microlensing must be >= 0 mag, got {self.microlensing:g}")
        if self.unseen is not None:
            perturber_population(self.unseen)
        check_sample_count(self.n_samples)
        if self.weighting not in WEIGHTINGS:
            raise InputError(
                f"weighting must be one of {choices_text(WEIGHTINGS)}, got {self.weighting!r}"
            )
        object.__setattr__(self, "seen", tuple(self.seen or ()))
        if self.now is not None:
            object.__setattr__(self, "now", _moment(self.now))

    @classmethod
    def from_options(cls, **options) -> ForecastRequest:
        """A request from keyword options (the Python interface's keywords).

        The request's fields, and ``walkers``, ``steps`` and ``prior`` for its sampler.
        """
        sampler = {k: options.pop(k) for k in ("walkers", "steps", "prior") if k in options}
        known = {f.name for f in fields(cls)}
        unknown = sorted(set(options) - known)
        if unknown:
            allowed = sorted(known - {"sampler"} | {"walkers", "steps", "prior"})
            raise InputError(
                f"forecast options must be among {choices_text(allowed)}, got {unknown[0]!r}"
            )
        base = options.pop("sampler", SamplerSettings())
        return cls(sampler=replace(base, **sampler) if sampler else base, **options)

    def settings(self, sightings=()) -> ForecastSettings:
        """The resolved choices the forecast runs with (and reports)."""
        out = ForecastSettings()
        if self.cosmology_name is not None:
            out = replace(out, h0_prior=None)  # a named cosmology means its own H0
        if self.h0 is not None:
            out = replace(out, h0_prior=(float(self.h0[0]), float(self.h0[1])))
        if self.kappa_ext is not None:
            out = replace(out, kappa_ext=check_kappa_prior(*self.kappa_ext))
        if self.microlensing is not None:
            out = replace(out, microlensing_mag=float(self.microlensing))
        if self.depth is not None:
            out = replace(out, depth=float(self.depth))
        if self.unseen is not None:
            out = replace(out, perturbers=perturber_population(self.unseen))
        return replace(
            out,
            n_samples=int(self.n_samples),
            seed=int(self.seed),
            weighting=self.weighting,
            model_prior=self.sampler.prior,
            sightings=tuple(sightings),
        )


def _moment(now) -> Time:
    """``now`` as one UTC instant: a scalar ``Time`` as it is, else an ISO 8601 date."""
    if isinstance(now, Time):
        if not now.isscalar:
            raise InputError(f"now must be one moment, got {now.size} of them")
        return now
    return parse_date(now, "now")


def perturber_population(unseen) -> PerturberPopulation:
    """The unseen perturbers from (f_sub, detection mass) or a population as given."""
    if isinstance(unseen, PerturberPopulation):
        return unseen
    try:
        fraction, limit = (float(v) for v in unseen)
    except (TypeError, ValueError) as err:
        raise InputError(
            f"unseen must be two numbers (mass fraction, detection mass in Msun), got {unseen!r}"
        ) from err
    if fraction == 0.0:
        return PerturberPopulation(mass_fraction=0.0)
    low = PerturberPopulation().mass_range[0]
    if not limit > low:
        raise InputError(
            f"unseen detection mass must be above the smallest perturber mass {low:.0e} Msun, "
            f"got {limit:g}"
        )
    return PerturberPopulation(mass_fraction=fraction, mass_range=(low, limit))
