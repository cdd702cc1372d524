"""The joint-H0 job: lenses' evidence in, the population's posterior out, blinded until asked.

:func:`joint_h0` samples the hierarchical model of :mod:`lensdelay.hubble.joint` and
summarises it per lens and for the population. Blinding (:class:`Blinding`) multiplies
every H0 by a hidden factor and divides every time-delay distance by it, so a team can
freeze the analysis before looking; the factor comes from a key the caller keeps (the
command line keeps it in the output folder) and only its SHA-256 is shown.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass, field, replace

import numpy as np

from lensdelay.cautions import CAUTION
from lensdelay.hubble.joint import (
    JointChain,
    JointLikelihood,
    Population,
    lens_h0_curve,
    sample_joint,
)
from lensdelay.inference.summaries import quantile_summary

__all__ = [
    "OrbitAlternative",
    "orbit_models_side_by_side",
    "BLIND_RANGE",
    "Blinding",
    "LensSummary",
    "JointH0Result",
    "joint_h0",
]

#: A quantile of 1/H0 is the mirrored quantile of H0.
_MIRROR = {"median": "median", "p16": "p84", "p84": "p16", "p2.5": "p97.5", "p97.5": "p2.5"}
#: The blinding factor is 10^u with u uniform in ±BLIND_RANGE (about ±12%): wider than any
#: joint H0's error, so a blinded value says nothing about the true one.
BLIND_RANGE = 0.05


@dataclass(frozen=True)
class Blinding:
    """A hidden factor on H0 (and its inverse on distances), drawn from a secret key."""

    key: bytes = field(repr=False)

    @property
    def key_sha256(self) -> str:
        """The key's SHA-256 (what reports show: the same hash, the same blinding)."""
        return hashlib.sha256(self.key).hexdigest()

    @property
    def factor(self) -> float:
        """The factor itself (read it only to unblind)."""
        digest = hashlib.sha256(b"lensdelay-blinding" + self.key).digest()
        seed = int.from_bytes(digest[:8], "big")
        return float(10.0 ** np.random.default_rng(seed).uniform(-BLIND_RANGE, BLIND_RANGE))


@dataclass(frozen=True)
class LensSummary:
    """One lens in the joint analysis.

    ``h0`` is the lens's own H0 posterior (uniform prior) with the population's other
    parameters at the joint medians, ``time_delay_distance_mpc`` the same as D_Δt of its
    first measured delay's source (both None without delays). The dispersions are per
    aperture (one for a slit or circle, one per ring of resolved kinematics: ``rings``
    gives their inner and outer radii in arcsec, empty otherwise): measured, its error,
    and the dispersion the population predicts (km/s quantiles over the lens's draws).
    """

    name: str
    has_delays: bool
    has_kinematics: bool
    n_delays: int
    h0: dict | None
    time_delay_distance_mpc: dict | None
    dispersion_measured: tuple[float, ...] | None
    dispersion_error: tuple[float, ...] | None
    dispersion_predicted: tuple[dict, ...] | None
    kappa_prior: tuple[float, float]
    notes: tuple[str, ...] = ()
    rings: tuple[tuple[float, float], ...] = ()


@dataclass(frozen=True)
class OrbitAlternative:
    """The joint H0 under another orbit model, all else the same (blinded alike).

    One aperture dispersion per lens cannot measure the stars' orbits, so H0 leans on
    their model and prior: these say by how much.
    """

    anisotropy: str
    h0: dict
    parameters: dict

    def as_dict(self) -> dict:
        """JSON-ready."""
        return {"anisotropy": self.anisotropy, "H0": self.h0, "parameters": self.parameters}


@dataclass(frozen=True)
class JointH0Result:
    """The joint H0 of a catalogue: population posterior, per-lens summaries, diagnostics.

    Every H0 and distance here is blinded when :attr:`blinded` is True.
    """

    population: Population
    lenses: tuple[LensSummary, ...]
    chain: JointChain = field(repr=False)
    parameters: dict
    blinded: bool
    blinding_key_sha256: str | None
    notes: tuple[str, ...]
    settings: dict
    provenance: dict | None = None
    #: the same analysis under the other orbit models (:func:`orbit_models_side_by_side`)
    orbit_alternatives: tuple["OrbitAlternative", ...] = ()

    @property
    def h0(self) -> dict:
        """The H0 posterior's quantiles (km/s/Mpc; blinded when :attr:`blinded`)."""
        return self.parameters["H0"]

    def __repr__(self) -> str:
        h = self.h0
        tag = " (blinded)" if self.blinded else ""
        return (
            f"<JointH0Result of {len(self.lenses)} lenses: H0 = {h['median']:.1f} "
            f"+{h['p84'] - h['median']:.1f}/-{h['median'] - h['p16']:.1f}{tag}>"
        )

    def report(self) -> str:
        """The text the command line prints."""
        from lensdelay.report.text import joint_h0_text

        return joint_h0_text(self)


def _lens_summaries(like: JointLikelihood, medians: dict, blind: float) -> list[LensSummary]:
    """Each lens's own H0 and D_Δt, and the dispersion the population predicts for it."""
    out = []
    at = np.array([medians[n] for n in like.names])
    for k, (lens, term) in enumerate(zip(like.lenses, like.terms)):
        curve = lens_h0_curve(like, k, at)
        h0 = ddt = None
        if curve is not None:
            h0 = {q: v * blind for q, v in curve.items()}
            # D_Δt ∝ 1/H0 at fixed Ωm: the lens's first delay's distance at each quantile
            factors = like.cosmic(like.cosmology_values(at[None, :]))
            d70 = float(term.ddt_ratio(factors)[0, 0]) * lens.reference_ddt_mpc[0]
            ddt = {q: d70 * 70.0 / curve[_MIRROR[q]] / blind for q in curve}
        predicted = None
        if term.kinematics:
            draws = like.predicted_dispersion(k, at)[0]  # (n, apertures)
            predicted = tuple(quantile_summary(draws[:, b]) for b in range(draws.shape[1]))
        kin = lens.kinematics
        out.append(
            LensSummary(
                name=lens.name,
                has_delays=lens.has_delays,
                has_kinematics=lens.has_kinematics,
                n_delays=len(lens.measured_days),
                h0=h0,
                time_delay_distance_mpc=ddt,
                dispersion_measured=None if kin is None else tuple(kin.dispersions().tolist()),
                dispersion_error=None if kin is None else tuple(kin.errors().tolist()),
                dispersion_predicted=predicted,
                kappa_prior=tuple(lens.kappa_prior),
                notes=tuple(lens.notes),
                rings=() if kin is None else tuple(kin.rings()),
            )
        )
    return out


def joint_h0(
    lenses,
    population: Population,
    *,
    walkers: int = 32,
    steps: int = 3000,
    seed: int = 1,
    blinding: Blinding | None = None,
) -> JointH0Result:
    """The joint H0 of ``lenses`` (:class:`lensdelay.hubble.lens_evidence.LensEvidence`).

    Parameters
    ----------
    lenses : sequence of LensEvidence
        Each from its own positions-only posterior; at least one with delays.
    population : Population
        Anisotropy model, whether λ_int is free, Ωm fixed or with its prior.
    walkers, steps, seed : int
        The sampler's settings (emcee, differential-evolution moves; a third of the steps
        are burn-in).
    blinding : Blinding, optional
        When given, every H0 and distance in the result is blinded.
    """
    draws_seed, sample_seed = np.random.SeedSequence(seed).spawn(2)
    like = JointLikelihood(lenses, population, np.random.default_rng(draws_seed))
    chain = sample_joint(
        like, walkers=walkers, steps=steps, seed=int(sample_seed.generate_state(1)[0])
    )
    medians = {n: float(np.median(chain.column(n))) for n in chain.names}
    blind = blinding.factor if blinding is not None else 1.0
    samples = chain.samples.copy()
    samples[:, chain.names.index("H0")] *= blind
    shown = JointChain(
        names=chain.names,
        samples=samples,
        autocorrelation=chain.autocorrelation,
        acceptance=chain.acceptance,
        steps=chain.steps,
        walkers=chain.walkers,
        burn=chain.burn,
    )
    summaries = _lens_summaries(like, medians, blind)
    notes = _notes(chain, lenses)
    return JointH0Result(
        population=population,
        lenses=tuple(summaries),
        chain=shown,
        parameters={n: shown.summary(n) for n in shown.names},
        blinded=blinding is not None,
        blinding_key_sha256=None if blinding is None else blinding.key_sha256,
        notes=tuple(notes),
        settings={
            "walkers": chain.walkers,
            "steps": steps,
            "seed": seed,
            "draws_per_lens": int(len(lenses[0].model_days)),
            "caution": CAUTION,
        },
    )


def _notes(chain: JointChain, lenses) -> list[str]:
    notes = []
    kept = chain.steps - chain.burn
    tau = float(np.nanmax(chain.autocorrelation))
    if not np.isfinite(tau) or kept < 50 * tau:
        notes.append(
            f"the chain is {kept} steps after burn-in, fewer than 50 autocorrelation times "
            f"(max tau {tau:.0f} steps): run longer (--joint-steps) before trusting the tails"
        )
    n_kin = sum(lens.has_kinematics for lens in lenses)
    if n_kin == 0:
        notes.append(
            "no lens has kinematics: the internal mass sheet is constrained by its prior "
            "alone, and so is H0's width"
        )
    return notes


def orbit_models_side_by_side(
    result: JointH0Result,
    lenses,
    *,
    walkers: int = 32,
    steps: int = 3000,
    seed: int = 1,
    blinding: Blinding | None = None,
) -> JointH0Result:
    """``result`` with the joint H0 under each other orbit model of :data:`ANISOTROPY_POPULATIONS`.

    Every lens's dispersion is tabulated again for the model
    (:func:`lensdelay.hubble.lens_evidence.with_anisotropy`) and the joint stage run with
    the same population otherwise, the same seed and the same blinding.
    """
    from lensdelay.hubble.joint import ANISOTROPY_POPULATIONS
    from lensdelay.hubble.lens_evidence import with_anisotropy

    out = []
    for model in ANISOTROPY_POPULATIONS:
        if model == result.population.anisotropy:
            continue
        other = joint_h0(
            [with_anisotropy(lens, model) for lens in lenses],
            replace(result.population, anisotropy=model),
            walkers=walkers,
            steps=steps,
            seed=seed,
            blinding=blinding,
        )
        out.append(OrbitAlternative(model, other.h0, other.parameters))
    return replace(result, orbit_alternatives=tuple(out))
