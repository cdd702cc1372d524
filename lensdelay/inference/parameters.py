"""The parameter space of a likelihood: names, bounds, Gaussian priors, periodic angles.

One row of parameters is laid out as: the mass model's free parameters (in the order
of :attr:`lensdelay.model.recipe.MassModel.free`), each family's source position
(``source[LABEL].x``, ``.y``), each free family redshift (``redshift[LABEL]``) — all
that image positions depend on — then, when timing data are fitted, ``H0`` and
``kappa_ext``. :class:`ParameterSpace` owns that layout, so that the likelihood only
computes; the model's own parameters come from the recipe
(:class:`lensdelay.model.recipe.ModelParameter`, with value, bounds, prior and whether
it varies, as lmfit's ``Parameter`` has).
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from lensdelay.errors import InputError

__all__ = ["H0_RANGE", "PRIOR_CHOICES", "ParameterSpace"]

#: Mass-model priors a likelihood can take: Jeffreys' (parametrisation-invariant) or flat in
#: the recipe's own parameters within their bounds.
PRIOR_CHOICES = ("jeffreys", "flat")
#: Bounds of H0 when it is a free parameter, km/s/Mpc (far beyond any measured value).
H0_RANGE = (10.0, 200.0)


@dataclass
class ParameterSpace:
    """The layout of a parameter row and what is known of each entry a priori.

    Attributes
    ----------
    names : list of str
        One per entry of a row.
    lower, upper : ndarray
        Bounds (a flat prior within them, unless a Gaussian prior is given).
    priors : dict
        Entry index -> (mean, sigma) of its Gaussian prior.
    periods : list of float or None
        Period of an angle (degrees), None for every other entry.
    n_model : int
        The mass model's free parameters (the first entries).
    n_positional : int
        The entries image positions depend on (model, sources, redshifts).
    redshift_index : dict
        Family label -> entry of its free redshift.
    h0_index, kappa_index : int or None
        Entries of H0 and κ_ext when free.
    h0_fixed, kappa_fixed : float
        Their values when not free.
    scale_start : list of float
        Starting values of the free delay-scale entries (H0, then κ_ext).
    """

    names: list
    lower: np.ndarray
    upper: np.ndarray
    priors: dict
    periods: list
    n_model: int
    n_positional: int
    redshift_index: dict = field(default_factory=dict)
    h0_index: int | None = None
    kappa_index: int | None = None
    h0_fixed: float = 70.0
    kappa_fixed: float = 0.0
    scale_start: list = field(default_factory=list)

    @classmethod
    def build(
        cls,
        model,
        families,
        observed_families,
        *,
        h0_ref: float,
        use_delays: bool = False,
        h0_prior=None,
        kappa_prior=None,
    ) -> ParameterSpace:
        """The layout for ``model`` fitted to ``families`` (with timing data or not).

        Parameters
        ----------
        model : MassModel
        families : sequence
            The likelihood's family data (``label``, observed ``x``, ``y``): the source
            positions are bounded at twice the farthest image's distance plus 1″.
        observed_families : sequence of Family
            The scenario's families (their ``redshift_parameter`` when free).
        h0_ref : float
            The scenario cosmology's H0 (its value when H0 is fixed).
        use_delays : bool
            Add H0 and κ_ext (timing data are fitted).
        h0_prior : None, "fixed" or (mean, sigma)
            H0 free and flat within :data:`H0_RANGE`, fixed at ``h0_ref``, or Gaussian.
        kappa_prior : (mean, sigma) or None
            κ_ext's Gaussian prior (sigma 0: fixed at the mean; None: fixed at 0).
        """
        free = model.free
        names = [p.name for p in free]
        lo = [p.min for p in free]
        hi = [p.max for p in free]
        for fam in families:
            names += [f"source[{fam.label}].x", f"source[{fam.label}].y"]
            reach = 2.0 * float(np.max(np.hypot(fam.x, fam.y))) + 1.0
            lo += [-reach, -reach]
            hi += [reach, reach]
        priors = {i: p.prior for i, p in enumerate(free) if p.prior is not None}
        redshift_index = {}
        for fam, obs in zip(families, observed_families):
            zp = obs.redshift_parameter
            if zp is None:
                continue
            redshift_index[fam.label] = len(names)
            names.append(f"redshift[{fam.label}]")
            lo.append(zp.min)
            hi.append(zp.max)
            if zp.prior is not None:
                priors[len(names) - 1] = zp.prior
        n_positional = len(names)
        h0_index = kappa_index = None
        kappa_fixed = 0.0
        scale_start = []
        if use_delays:
            if isinstance(h0_prior, str):
                if h0_prior != "fixed":
                    raise InputError(
                        f"h0_prior must be None, 'fixed' or (mean, sigma), got {h0_prior!r}"
                    )
            else:
                h0_index = len(names)
                names.append("H0")
                lo.append(H0_RANGE[0])
                hi.append(H0_RANGE[1])
                if h0_prior is not None:
                    priors[h0_index] = (float(h0_prior[0]), float(h0_prior[1]))
                scale_start.append(h0_ref if h0_prior is None else float(h0_prior[0]))
            if kappa_prior is not None:
                mean, sigma = float(kappa_prior[0]), float(kappa_prior[1])
                if sigma > 0:
                    kappa_index = len(names)
                    names.append("kappa_ext")
                    # κ_ext ≥ 1 would turn delays around: bounded below 1
                    lo.append(max(-1.0, mean - 10 * sigma))
                    hi.append(min(0.95, mean + 10 * sigma))
                    priors[kappa_index] = (mean, sigma)
                    scale_start.append(mean)
                else:
                    kappa_fixed = mean
        periods = [p.period for p in free] + [None] * (len(names) - len(free))
        return cls(
            names,
            np.array(lo),
            np.array(hi),
            priors,
            periods,
            len(free),
            n_positional,
            redshift_index,
            h0_index,
            kappa_index,
            h0_ref,
            kappa_fixed,
            scale_start,
        )
