"""The H0 job: delay curves against H0 and, with measured delays, the H0 posterior.

Takes a :class:`~lensdelay.model.scenario.Scenario`; the statistics are in
:mod:`lensdelay.hubble.analysis`.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
from astropy import units as u

from lensdelay.errors import InputError, pair_of_numbers
from lensdelay.hubble.analysis import delay_curves, h0_posterior, kappa_comparison, pair_delays
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.inference.priors import kappa_prior_of
from lensdelay.inference.sampling import (
    DEFAULT_SAMPLER,
    check_sampler_settings,
    int_seed,
)
from lensdelay.inference.sequence import fit_and_sample
from lensdelay.model.cosmology import cosmology_from_class, cosmology_from_spec
from lensdelay.model.scenario import Scenario

__all__ = ["run_hubble", "HubbleResult"]


def run_hubble(
    scenario: Scenario,
    *,
    kappa_ext=(0.0, 0.05),
    om0=None,
    curves=(),
    walkers=DEFAULT_SAMPLER.walkers,
    steps=DEFAULT_SAMPLER.steps,
    seed=1,
    progress=False,
    cosmology_name=None,
    cosmology_class=None,
    class_params=None,
    prior=DEFAULT_SAMPLER.prior,
    stop=None,
) -> dict:
    """Delays against H0 and, with measured delays, the joint lens + H0 posterior.

    The curves come from the lens-model posterior; the H0 posterior is shown under
    several κ_ext priors (the mass-sheet degeneracy).

    Parameters
    ----------
    scenario : Scenario
        Observations and mass model (:func:`lensdelay.api.load_scenario` reads a file).
    kappa_ext : (mean, sigma)
        Prior of the external convergence applied to H0.
    om0 : (mean, sigma), optional
        Prior on Ωm (flat ΛCDM); default the scenario's value ± 0.02.
    curves : tuple of str
        Extra delay curves along ``"om0"`` and/or ``"w"``.
    cosmology_name, cosmology_class, class_params
        Replace the scenario's cosmology by an astropy realisation or class.
    progress : bool
        Show progress bars (off by default).
    """
    check_sampler_settings(walkers, steps, seed)
    kappa_ext = kappa_prior_of(kappa_ext)
    if om0 is not None:
        om0 = pair_of_numbers(om0, "om0")
    if om0 is not None and not (0 < om0[0] < 1 and om0[1] >= 0):
        raise InputError(f"om0 must be MEAN in (0, 1) and SIGMA >= 0, got {om0[0]:g} {om0[1]:g}")
    sc = scenario
    if cosmology_name:
        sc = replace(sc, cosmology=cosmology_from_spec({"name": cosmology_name}))
    if cosmology_class:
        sc = replace(
            sc, cosmology=cosmology_from_class(cosmology_class, class_params or {}, sc.cosmology)
        )
    for i, d in enumerate(sc.delays):
        if sc.family(d.family).redshift_free:
            # D_dt, and so H0, of a delay needs its source's distance: a free redshift
            # would make H0 and z one degenerate scale
            raise InputError(
                f"delay[{i}].family {d.family!r} must have a measured redshift for H0 "
                "(its redshift is a free parameter), got a free redshift"
            )
    # one seed for the whole run: every stage draws from its own child of it
    fit_seq, sample_seq, joint_fit_seq, joint_sample_seq, draw_seq = np.random.SeedSequence(
        seed
    ).spawn(5)
    rng = np.random.default_rng(draw_seq)
    like = ImageLikelihood(sc, sc.model, prior=prior)
    res, chain = fit_and_sample(
        like,
        walkers=walkers,
        steps=steps,
        fit_seed=int_seed(fit_seq),
        sample_seed=int_seed(sample_seq),
        progress=progress,
        stop=stop,
    )
    lens_samples = chain.samples()
    pairs = pair_delays(like, lens_samples)
    # a free redshift: the curves along Ωm or w take its posterior median
    z_s_of = {
        f.label: float(np.median(lens_samples[:, like.names.index(f"redshift[{f.label}]")]))
        if f.redshift_free
        else f.redshift
        for f in sc.families
    }
    rows = delay_curves(
        pairs,
        like.h0_ref,
        cosmology=sc.cosmology,
        z_l=sc.lens_redshift,
        z_s_of=z_s_of,
        om0_grid=np.linspace(0.15, 0.45, 31) if "om0" in curves else None,
        w_grid=np.linspace(-1.5, -0.5, 21) if "w" in curves else None,
    )
    notes = list(res.notes) + list(chain.warnings)
    om0_prior = tuple(om0) if om0 is not None else (float(sc.cosmology.Om0), 0.02)
    joint_fit = h0 = None
    comparison = ()
    if sc.delays:
        # like.scenario carries the positions' model error if the first fit needed one
        joint = ImageLikelihood(like.scenario, sc.model, use_delays=True, prior=prior)
        joint_fit, jchain = fit_and_sample(
            joint,
            walkers=walkers,
            steps=steps,
            fit_seed=int_seed(joint_fit_seq),
            sample_seed=int_seed(joint_sample_seq),
            progress=progress,
            stop=stop,
        )
        h0_eff = jchain.samples()[:, joint.h0_index]
        h0 = h0_posterior(h0_eff, joint, kappa_ext=kappa_ext, om0_prior=om0_prior, rng=rng)
        comparison = tuple(kappa_comparison(h0_eff, joint, om0_prior, extra=kappa_ext))
        notes += [f"joint fit: {n}" for n in joint_fit.notes if n not in res.notes]
        notes += jchain.warnings
    else:
        notes.append("the scenario has no measured delays: only the delay-vs-H0 curves are given")
    return HubbleResult(
        scenario=sc,
        fit=res,
        chain=chain,
        curves=tuple(rows),
        pairs=pairs,
        prior=prior,
        notes=tuple(notes),
        joint_fit=joint_fit,
        h0=h0,
        kappa_comparison=comparison,
        kappa_ext=tuple(kappa_ext),
        om0_prior=tuple(om0_prior),
    )


@dataclass(frozen=True)
class HubbleResult:
    """Delays against H0 and, with measured delays, the H0 posterior.

    Attributes
    ----------
    curves : tuple of dict
        Median and 68/95% bands of each image pair's delay along H0 (and Ωm, w).
    h0 : dict or None
        Summaries of ``H0`` (km/s/Mpc) and ``D_dt_Mpc`` (with the κ_ext prior applied)
        when the scenario has measured delays; :attr:`h0_quantity` gives H0 with units.
    kappa_comparison : tuple of dict
        H0 under several κ_ext priors side by side (the mass-sheet degeneracy).
    provenance : dict or None
        Added by :func:`lensdelay.api.infer_h0`.
    """

    scenario: Scenario
    fit: object
    chain: object = field(repr=False)
    curves: tuple = field(repr=False)
    pairs: dict = field(repr=False)
    prior: str = "flat"
    notes: tuple = ()
    joint_fit: object = None
    h0: dict | None = None
    kappa_comparison: tuple = ()
    kappa_ext: tuple = (0.0, 0.05)
    om0_prior: tuple = ()
    provenance: dict | None = None

    def __repr__(self) -> str:
        h0 = "no measured delays" if self.h0 is None else f"H0 {self.h0['H0']['median']:.1f}"
        return f"<HubbleResult of {self.scenario.name!r}: {h0} km/s/Mpc>"

    @property
    def h0_prior_text(self) -> str:
        """The prior H0 was inferred under, in words."""
        from lensdelay.inference.likelihood import H0_RANGE

        return f"flat on [{H0_RANGE[0]:g}, {H0_RANGE[1]:g}] km/s/Mpc"

    @property
    def h0_quantity(self) -> u.Quantity | None:
        """The median H0 as a Quantity (None without measured delays)."""
        return None if self.h0 is None else self.h0["H0"]["median"] * u.km / u.s / u.Mpc

    def report(self) -> str:
        """The text ``lensdelay hubble`` prints."""
        from lensdelay.report.text import hubble_text

        return hubble_text(self)
