"""Measuring delays from light curves: the posterior, a cross-check and an error budget.

:func:`measure_delays` measures the delays of every image after the reference with the
model of the source kind: quasars by the global search of :mod:`.search` (every pair,
every mode, nine microlensing models, systematic terms included), supernovae by sampling
the shared-shape model of :mod:`.supernova`. It reports each delay's quantiles and their
joint covariance, the flux ratios, a goodness of fit, a model-free cross-check
(:func:`dispersion_delay`) and — from simulated curves with the data's own epochs and
errors — the bias and spread a point estimate shows. A delay the data cannot carry is
reported as not measurable from these data, with the reason and no number.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np
from scipy import stats

from lensdelay.errors import InputError
from lensdelay.inference.sampling import integrated_time, potential_scale_reduction
from lensdelay.inference.summaries import quantile_summary
from lensdelay.lightcurves.search import MIN_OVERLAP_POINTS

__all__ = [
    "SUPERNOVA_MEASURABLE_SHARE",
    "SUPERNOVA_MIN_OVERLAP_SHARE",
    "CROSS_CHECK_OVERLAP",
    "BOUND_MARGIN",
    "DELAY_MAX_RHAT",
    "RUN_ON_FACTOR",
    "MIN_TAU_LENGTHS",
    "MAX_WIDENING",
    "ImageDelay",
    "MeasuredDelays",
    "dispersion_delay",
    "overlap",
    "measure_delays",
    "chain_verdicts",
    "QUASAR_RATIO_DRAWS",
]


#: A delay whose 95% interval is wider than this share of the searched range is not
#: reported as a measurement.
SUPERNOVA_MEASURABLE_SHARE = 0.5
#: Nor is one at which fewer than this share of the image's points (and fewer than
#: MIN_OVERLAP_POINTS of them) fall, shifted by the delay, near a reference point: the
#: curves then hardly overlap and any match is a coincidence of their ends.
SUPERNOVA_MIN_OVERLAP_SHARE = 0.3
#: (the quasar search's own rules, a prior on the admitted delays, are in search.py)
#: The dispersion cross-check compares curves only where nearly half of the image's points
#: find a partner: with less, a short stretch matched by its own offset beats the whole
#: curves, whose microlensing the single offset does not remove.
CROSS_CHECK_OVERLAP = 0.45
#: A delay whose posterior's 95% interval reaches within this share of the searched
#: range's edge (±max_delay) is held there by the bound, not by the data.
BOUND_MARGIN = 0.02
#: Convergence of a delay's chain (after burn-in), judged three ways: the walkers agree
#: (Gelman–Rubin R-hat, walkers as chains, below DELAY_MAX_RHAT: looser than a lens
#: fit's, as an ensemble's walkers are not independent chains), the chain is at least
#: MIN_TAU_LENGTHS integrated autocorrelation times long (emcee's estimator; Goodman &
#: Weare 2010 for the ensemble), and the ensemble has stopped widening (its spread over
#: the last tenth of the steps at most MAX_WIDENING times that over the first tenth: a
#: chain started in a small ball on a flat posterior is still diffusing).
DELAY_MAX_RHAT = 1.2
#: A supernova chain whose delays have not converged runs on, up to this many times the
#: steps asked for.
RUN_ON_FACTOR = 4
MIN_TAU_LENGTHS = 10.0
MAX_WIDENING = 2.0


@dataclass(frozen=True)
class ImageDelay:
    """One image's measured delay after the reference (days), or why there is none."""

    label: str
    measurable: bool
    delay_days: dict | None
    flux_ratio: dict | None
    cross_check_days: float | None
    statement: str = ""
    simulation_bias_days: float | None = None
    simulation_spread_days: float | None = None
    statistical_days: dict | None = None
    model_spread_days: float | None = None


@dataclass(frozen=True)
class MeasuredDelays:
    """Delays of one family measured from its light curves.

    Attributes
    ----------
    family, reference, kind : str
        The family, the reference image, ``"quasar"`` or ``"supernova"``.
    images : tuple of ImageDelay
        The other images, in the curves' order.
    covariance_labels : tuple of str
    covariance_days2 : ndarray
        Joint covariance of the measurable delays.
    goodness : dict
        ``chi2``, ``dof`` and ``p_value`` of the best fit.
    settings : dict
        Walkers, steps, the searched range, the model's options.
    notes : tuple of str
    samples : ndarray (n, n_images − 1)
        Posterior samples of the delays (all images, measurable or not).
    """

    family: str
    reference: str
    kind: str
    images: tuple
    covariance_labels: tuple
    covariance_days2: np.ndarray
    goodness: dict
    settings: dict
    notes: tuple = ()
    samples: np.ndarray = field(default=None, repr=False)
    best: np.ndarray = field(default=None, repr=False)
    model: object = field(default=None, repr=False)
    curves: object = field(default=None, repr=False)
    provenance: dict | None = None

    def __repr__(self) -> str:
        rows = ", ".join(
            f"{im.label}: {im.delay_days['median']:+.1f} d" if im.measurable else f"{im.label}: -"
            for im in self.images
        )
        family = f"family {self.family}" if self.family else "the curves"
        return f"<MeasuredDelays of {family} after {self.reference} ({self.kind}): {rows}>"

    def report(self) -> str:
        """The text the command line prints."""
        from lensdelay.report.text import delays_text

        return delays_text(self)

    def image(self, label: str) -> ImageDelay:
        """The image called ``label``."""
        for im in self.images:
            if im.label == label:
                return im
        raise KeyError(label)

    def as_dict(self) -> dict:
        """delays.json (CONVENTIONS.md, "Light curves"), with the estimator's details."""
        zero = {k: 0.0 for k in ("median", "p16", "p84", "p2.5", "p97.5")}
        images = [{"label": self.reference, "delay_days": zero, "measurable": True}]
        for im in self.images:
            images.append(
                {
                    "label": im.label,
                    "delay_days": im.delay_days,
                    "measurable": im.measurable,
                    "statement": im.statement or None,
                    "flux_ratio": im.flux_ratio,
                    "cross_check_days": im.cross_check_days,
                    "simulation_bias_days": im.simulation_bias_days,
                    "simulation_spread_days": im.simulation_spread_days,
                    "statistical_days": im.statistical_days,
                    "model_spread_days": im.model_spread_days,
                }
            )
        return {
            "reference_image": self.reference,
            "family": self.family,
            "images": images,
            "covariance_days2": {
                "labels": list(self.covariance_labels),
                "matrix": np.asarray(self.covariance_days2).tolist(),
            },
            "kind": self.kind,
            "goodness_of_fit": self.goodness,
            "settings": self.settings,
            "notes": list(self.notes),
        }


# -- the cross-check ---------------------------------------------------------------------
def dispersion_delay(curves, reference: str, image: str, grid: np.ndarray, window: float):
    """The delay minimising the dispersion of the two curves laid on each other.

    For each trial delay Δ, pairs of points (reference at t, image at t') with
    abs(t − (t' − Δ)) ≤ ``window`` days in the same band are compared after removing their
    weighted mean magnitude difference; the statistic is the weighted mean squared
    difference (the D² dispersion of Pelt et al. 1996, A&A 305, 97, eq. 8, with a flat
    window); trials pairing fewer than CROSS_CHECK_OVERLAP of the image's points (or
    MIN_OVERLAP_POINTS) are skipped. Returns the delay at the minimum, or None where no
    trial qualifies.
    """
    best, best_d = None, np.inf
    ta_all, ma_all = [], []
    for b in curves.bands:
        ra, ri = curves.select(reference, b), curves.select(image, b)
        ta_all.append((curves.time[ra], curves.mag[ra], curves.mag_err[ra]))
        ma_all.append((curves.time[ri], curves.mag[ri], curves.mag_err[ri]))
    n_img = sum(len(tb) for tb, _, _ in ma_all)
    needed = max(MIN_OVERLAP_POINTS, CROSS_CHECK_OVERLAP * n_img)
    for d in grid:
        num = den = 0.0
        n_pairs = 0
        for (ta, ma, ea), (tb, mb, eb) in zip(ta_all, ma_all):
            close = np.abs(ta[:, None] - (tb[None, :] - d)) <= window
            if not np.any(close):
                continue
            i, j = np.nonzero(close)
            w = 1.0 / (ea[i] ** 2 + eb[j] ** 2)
            diff = ma[i] - mb[j]
            offset = np.sum(w * diff) / np.sum(w)
            num += np.sum(w * (diff - offset) ** 2)
            den += np.sum(w)
            n_pairs += len(np.unique(j))  # the image's points that found a partner
        # trials where the curves barely overlap match by chance: need pairs for a good
        # share of the points (as the supernova verdict's SUPERNOVA_MIN_OVERLAP_SHARE)
        if n_pairs >= needed and den > 0 and num / den < best_d:
            best_d, best = num / den, float(d)
    return best


def overlap(curves, reference: str, image: str, delay: float, window: float) -> tuple[float, int]:
    """Share and number of ``image``'s points near a point of the reference.

    Each of the image's points is moved back by ``delay``; it counts when it lies within
    ``window`` days of a reference point (any band).
    """
    t_ref = np.sort(curves.time[curves.image == reference])
    t_img = curves.time[curves.image == image] - delay
    k = np.clip(np.searchsorted(t_ref, t_img), 1, len(t_ref) - 1)
    nearest = np.minimum(np.abs(t_img - t_ref[k - 1]), np.abs(t_img - t_ref[k]))
    close = nearest <= window
    return float(np.mean(close)) if close.size else 0.0, int(np.sum(close))


# -- sampling --------------------------------------------------------------------------
def _sample_supernova(model, rng, walkers, steps):
    """Sample with emcee (stretch move, vectorised) from a jittered maximum-posterior point."""
    import emcee

    start = model.point_estimate()
    ndim = model.n_params
    walkers = max(walkers, 2 * ndim + 2)
    scale = np.full(ndim, 1e-3)
    scale[model.n_shape : model.n_shape + model.n_images - 1] = 0.05  # delays, days
    if not np.isfinite(model.log_posterior(start[None, :])[0]):
        raise InputError(
            "supernova light curves could not be fitted by the shared-shape model (no "
            "starting point with a finite posterior); check the curves, or try kind quasar"
        )
    p0 = start + scale * rng.standard_normal((walkers, ndim))
    for _ in range(50):
        bad = ~np.isfinite(model.log_posterior(p0))
        if not np.any(bad):
            break
        # walkers outside the prior's bounds: drawn again, closer to the start
        scale = scale / 2
        p0[bad] = start + scale * rng.standard_normal((bad.sum(), ndim))
    sampler = emcee.EnsembleSampler(walkers, ndim, model.log_posterior, vectorize=True)
    sampler.random_state = np.random.RandomState(int(rng.integers(2**31))).get_state()
    sampler.run_mcmc(p0, steps, progress=False)
    k, n1 = model.n_shape, model.n_images - 1
    total = steps
    # run on while the delays' walkers disagree (R-hat over the second half), up to
    # RUN_ON_FACTOR times the steps asked for: a quad's shared shape mixes slowly
    while total < RUN_ON_FACTOR * steps:
        chain = sampler.get_chain(discard=total // 2)[:, :, k : k + n1]
        if np.all(potential_scale_reduction(chain) <= DELAY_MAX_RHAT):
            break
        sampler.run_mcmc(None, steps, progress=False)
        total += steps
    chain = sampler.get_chain(discard=total // 2)
    logp = sampler.get_log_prob(discard=total // 2)
    flat = chain.reshape(-1, ndim)
    return flat, flat[np.argmax(logp.ravel())], chain[:, :, k : k + n1], total


# -- the job ---------------------------------------------------------------------------
def measure_delays(
    curves,
    reference: str,
    *,
    family: str = "",
    kind: str = "auto",
    order: int = 2,
    max_delay: float | None = None,
    walkers: int = 32,
    steps: int = 1500,
    simulations: int = 10,
    seed: int = 1,
    images=None,
    delay_ranges: dict | None = None,
) -> MeasuredDelays:
    """Measure every image's delay after ``reference`` from ``curves`` (LightCurves).

    Parameters
    ----------
    kind : {"auto", "quasar", "supernova"}
        The source model; ``auto`` takes a supernova when the reference's curve rises
        and fades within the data (its brightest point not at either end and its ends at
        least 1 mag fainter), a quasar otherwise.
    order : int
        Quasars: polynomial order of each image's offset and microlensing trend.
    max_delay : float, optional
        Search delays within ±max_delay days (default: 0.8 × the span for quasars, the
        span for supernovae).
    walkers, steps : int
        Supernovae: emcee settings (half of the steps are discarded as burn-in). The
        quasar search (:mod:`.search`) needs none.
    simulations : int
        Simulated data sets (the data's epochs and errors, the measured values) whose
        point estimates give each delay's bias and spread; 0 skips them.
    seed : int
        Every random draw comes from generators spawned from this seed.
    images : sequence of str, optional
        Every image of the family: one the curves lack (or hold only upper limits of,
        or only in a band the model does not use) is listed as not measurable, saying
        why (default: the curves' images).
    delay_ranges : dict image -> (low, high), optional
        Quasars: ranges (days) each delay is known to lie in, e.g. a forecast's predicted
        delays; a prior on top of the curves' own overlap rule (default: none).

    Notes
    -----
    A supernova delay is reported as a measurement only when its posterior is narrower
    than SUPERNOVA_MEASURABLE_SHARE of the searched range, stays clear of the range's
    bounds, the curves overlap at it and its chain converged (:func:`chain_verdicts`); a
    quasar delay by the rules of :mod:`.search`. Otherwise the image is "not measurable
    from these data", with the reason.
    """
    from lensdelay.lightcurves.supernova import SupernovaDelayModel

    if kind not in ("auto", "quasar", "supernova"):
        raise InputError(f"kind must be auto, quasar or supernova, got {kind!r}")
    for name, value, low in (
        ("walkers", walkers, 8),
        ("steps", steps, 100),
        ("simulations", simulations, 0),
    ):
        if isinstance(value, bool) or not isinstance(value, (int, np.integer)) or value < low:
            raise InputError(f"{name} must be an integer >= {low}, got {value!r}")
    if isinstance(seed, bool) or not isinstance(seed, (int, np.integer)) or seed < 0:
        raise InputError(f"seed must be an integer >= 0, got {seed!r}")
    if max_delay is not None and not (np.isfinite(max_delay) and max_delay > 0):
        raise InputError(f"max_delay must be a number of days > 0, got {max_delay!r}")
    all_images = list(images) if images is not None else list(curves.labels)
    det = curves.detections()
    if reference not in det.labels:
        raise InputError(
            f"reference image {reference!r} must have detections in the light curves "
            f"({', '.join(det.labels)}), got none"
        )
    notes = []
    if np.any(curves.upper_limit):
        notes.append(
            f"{int(np.sum(curves.upper_limit))} non-detections (upper limits) were not used"
        )
    if kind == "auto":
        kind = _guess_kind(det, reference)
        notes.append(f"source kind taken as {kind} from the reference's light curve")
    rng_sample, rng_sims = (np.random.default_rng(s) for s in np.random.SeedSequence(seed).spawn(2))
    missing = {}  # image -> why it has no delay at all
    for lab in all_images:
        if lab == reference:
            continue
        if lab not in curves.labels:
            missing[lab] = "not measurable: the light curves hold no data of this image"
        elif lab not in det.labels:
            missing[lab] = (
                "not measurable: the light curves hold only upper limits (non-detections) "
                "of this image"
            )
    if kind == "quasar":
        if len(det.labels) < 2:
            where = f"light curves {curves.source!r} " if curves.source else "light curves "
            raise InputError(
                f"{where}must hold detections of the reference and at least one other "
                f"image, got only {', '.join(det.labels)}"
            )
        _check_variability(det)
        return _measure_quasar(
            det,
            reference,
            family=family,
            order=order,
            max_delay=max_delay,
            simulations=simulations,
            seed=seed,
            rng=rng_sample,
            rng_sims=rng_sims,
            missing=missing,
            notes=notes,
            all_images=all_images,
            delay_ranges=delay_ranges,
        )
    else:
        _one_instrument_per_image(det)
        model = SupernovaDelayModel(det, reference, max_delay=max_delay)
        flat, best, delay_chain, steps_run = _sample_supernova(model, rng_sample, walkers, steps)
        if steps_run > steps:
            notes.append(
                f"the chain ran on to {steps_run} steps (from {steps}): its walkers had not "
                "agreed on the delays"
            )
        k = model.n_shape
        n1 = model.n_images - 1
        delays = flat[:, k : k + n1]
        ratios = np.exp(flat[:, k + n1 : k + 2 * n1])
        resid = (model.flux - model.model_flux(best)[0]) / np.sqrt(
            model.flux_err**2 + (np.exp(best[-1]) * model.model_flux(best)[0]) ** 2
        )
        chi2 = float(np.sum(resid**2))
        n_par = model.n_params
    n_data = len(model.t)
    dof = max(n_data - n_par, 1)
    goodness = {"chi2": chi2, "dof": int(dof), "p_value": float(stats.chi2.sf(chi2, dof))}
    labels = model.labels
    search = 2 * model.max_delay
    window = max(2.0 * det.cadence(), 1.0)
    grid = np.arange(
        -model.max_delay, model.max_delay + 0.125 * det.cadence(), 0.25 * det.cadence()
    )
    bias = spread = None
    if simulations:
        bias, spread = _simulation_budget(model, kind, best, det, rng_sims, simulations)
    verdicts = chain_verdicts(delay_chain, steps_run, delay_chain.shape[1])
    images = []
    for i, lab in enumerate(labels[1:]):
        d = delays[:, i]
        q = quantile_summary(d)
        width = q["p97.5"] - q["p2.5"]
        share, points = overlap(det, reference, lab, q["median"], window)
        statement = ""
        edge = model.max_delay * (1.0 - BOUND_MARGIN)
        if verdicts[i]:
            statement = verdicts[i]
        elif width <= SUPERNOVA_MEASURABLE_SHARE * search and (
            q["p97.5"] > edge or q["p2.5"] < -edge
        ):
            statement = (
                f"not measurable from these data within the searched range: the posterior runs "
                f"into the bound "
                f"(95% interval {q['p2.5']:+.1f}..{q['p97.5']:+.1f} d, search ±"
                f"{model.max_delay:.0f} d); the delay may lie beyond it — widen --max-delay"
            )
        elif width > SUPERNOVA_MEASURABLE_SHARE * search:
            statement = (
                f"not measurable from these data: the posterior spreads over {width:.0f} of the "
                f"{search:.0f} days searched (the curves overlap too little, or the delay lies "
                f"beyond ±{model.max_delay:.0f} d)"
            )
        elif share < SUPERNOVA_MIN_OVERLAP_SHARE or points < MIN_OVERLAP_POINTS:
            statement = (
                f"not measurable from these data: at the best delay ({q['median']:+.0f} d) only "
                f"{points} of the image's points ({100 * share:.0f}%) overlap the reference's "
                f"curve; the delay may lie beyond what the data cover (|delay| ≳ "
                f"{model.span * (1 - SUPERNOVA_MIN_OVERLAP_SHARE):.0f} d) — longer monitoring "
                "is needed"
            )
        measurable = not statement
        images.append(
            ImageDelay(
                label=lab,
                measurable=measurable,
                delay_days=q if measurable else None,
                flux_ratio=None if ratios is None else quantile_summary(ratios[:, i]),
                cross_check_days=dispersion_delay(det, reference, lab, grid, window),
                statement=statement,
                simulation_bias_days=None if bias is None else float(bias[i]),
                simulation_spread_days=None if spread is None else float(spread[i]),
            )
        )
    for lab, why in missing.items():
        images.append(ImageDelay(lab, False, None, None, None, why))
    order_of = {lab: k for k, lab in enumerate(all_images + [im.label for im in images])}
    images.sort(key=lambda im: order_of.get(im.label, len(order_of)))
    keep = [i for i, im in enumerate(images) if im.measurable]
    column = {lab: i for i, lab in enumerate(labels[1:])}  # the samples' columns
    kept = [column[images[i].label] for i in keep]
    cov = (
        np.cov(delays[:, kept].T)
        if len(kept) > 1
        else np.array([[float(np.var(delays[:, kept[0]]))]] if kept else np.zeros((0, 0)))
    )
    return MeasuredDelays(
        family=family,
        reference=reference,
        kind=kind,
        images=tuple(images),
        covariance_labels=tuple(images[i].label for i in keep),
        covariance_days2=np.atleast_2d(cov) if keep else np.zeros((0, 0)),
        goodness=goodness,
        settings={
            "walkers": int(walkers),
            "steps": int(steps_run),
            "max_delay_days": float(model.max_delay),
            "order": int(order) if kind == "quasar" else None,
            "simulations": int(simulations),
            "seed": int(seed),
        },
        notes=tuple(notes),
        samples=delays,
        best=best,
        model=model,
        curves=det,
    )


def _one_instrument_per_image(curves) -> None:
    """Refuse supernova curves in which one image and band mix instruments.

    The supernova model fits one flux ratio per image and band; instruments with other
    zero points within one image's band would need an offset each, which only the
    quasar model fits so far.
    """
    inst = curves.instruments
    for lab in curves.labels:
        for b in curves.bands:
            names = sorted(set(inst[curves.select(lab, b)].tolist()))
            if len(names) > 1:
                where = f"light curves {curves.source!r} " if curves.source else "light curves "
                raise InputError(
                    f"{where}column 'instrument' must name one instrument per image and band "
                    f"for the supernova model (instrument offsets are fitted by the quasar "
                    f"model only, so far), got {', '.join(names)} for image {lab}"
                    + (f" band {b}" if b else "")
                )


def chain_verdicts(chain: np.ndarray, steps: int, walkers: int) -> list[str]:
    """Per delay, "" when its chain converged, or why it did not (naming the flags).

    ``chain`` holds the delays after burn-in, (steps, walkers, n_delays).
    """
    rhat = potential_scale_reduction(chain)
    out = []
    advice = f"run longer (--steps, now {steps}) or with more walkers (--walkers, now {walkers})"
    for i in range(chain.shape[2]):
        x = chain[:, :, i]
        tau = float(integrated_time(x[:, :, None])[0])
        spread = x.std(axis=1)
        tenth = max(len(spread) // 10, 1)
        early, late = float(np.mean(spread[:tenth])), float(np.mean(spread[-tenth:]))
        if np.isfinite(rhat[i]) and rhat[i] > DELAY_MAX_RHAT:
            why = f"the walkers disagree (R-hat {rhat[i]:.2f}, more than {DELAY_MAX_RHAT})"
        elif late > MAX_WIDENING * max(early, 1e-12):
            why = f"the walkers are still spreading out (their spread grew {late / early:.1f}x)"
        elif len(x) < MIN_TAU_LENGTHS * tau:
            why = (
                f"the chain is {len(x) / tau:.1f} autocorrelation times long (at least "
                f"{MIN_TAU_LENGTHS:g} are needed)"
            )
        else:
            out.append("")
            continue
        out.append(f"not measurable from this chain: it did not converge — {why}; {advice}")
    return out


def _guess_kind(curves, reference) -> str:
    """A supernova rises and fades within the data; a quasar flickers throughout."""
    for b in curves.bands:
        sel = curves.select(reference, b)
        m = curves.mag[sel]
        if m.size >= 5:
            k = int(np.argmin(m))
            if 0 < k < m.size - 1 and m[0] - m[k] >= 1.0 and m[-1] - m[k] >= 1.0:
                return "supernova"
    return "quasar"


# -- the error budget from simulated data ------------------------------------------------------
def _simulation_budget(model, kind, best, curves, rng, n):
    """Bias and spread of point estimates on ``n`` simulated data sets, per image (days).

    The data sets have the data's epochs and errors and the measured values ``best``.
    """
    from lensdelay.lightcurves.curves import FLUX_ZERO_POINT, LightCurves

    n1 = model.n_images - 1
    errors = np.zeros((n, n1))
    if kind == "supernova":
        from lensdelay.lightcurves.supernova import SupernovaDelayModel

        k = model.n_shape
        truth = best[k : k + n1]
        flux_model = model.model_flux(best)[0]
        sd = np.sqrt(model.flux_err**2 + (np.exp(best[-1]) * flux_model) ** 2)
        for s in range(n):
            f = flux_model + sd * rng.standard_normal(len(sd))
            ok = f > 0
            mag = FLUX_ZERO_POINT - 2.5 * np.log10(f[ok])
            err = 2.5 / np.log(10) * model.flux_err[ok] / f[ok]
            sim = LightCurves(
                np.array(model.labels)[model.which[ok]],
                model.t[ok],
                mag,
                err,
                np.array(model.bands)[model.band[ok]],
                np.zeros(ok.sum(), dtype=bool),
                "simulation",
            )
            m = SupernovaDelayModel(sim, model.labels[0], max_delay=model.max_delay)
            est = m.point_estimate()
            errors[s] = est[k : k + n1] - truth
    return errors.mean(axis=0), errors.std(axis=0, ddof=1) if n > 1 else np.zeros(n1)


# -- quasars: the global search (search.py) --------------------------------------------------
#: Draws of the linear terms behind a quasar's flux ratios (each solves the whole model).
QUASAR_RATIO_DRAWS = 40


def _cross_check_grid(max_delay, cadence) -> np.ndarray:
    """The dispersion cross-check's trial delays: the whole searched range, ≤ 1500 of them."""
    lo, hi = -max_delay, max_delay
    step = max(0.25 * cadence, (hi - lo) / 1500.0)
    return np.arange(lo, hi + step / 2, step)


def _check_variability(curves) -> None:
    """Refuse curves that cannot carry a delay: an image whose magnitudes never change."""
    for lab in curves.labels:
        m = curves.mag[curves.image == lab]
        if m.size > 1 and np.ptp(m) == 0:
            where = f"light curves {curves.source!r} " if curves.source else "light curves "
            raise InputError(
                f"{where}column mag of image {lab} must vary (a delay is read from "
                f"variability seen in two images), got the constant {m[0]:g} in all "
                f"{m.size} rows"
            )


def _measure_quasar(
    det,
    reference,
    *,
    family,
    order,
    max_delay,
    simulations,
    seed,
    rng,
    rng_sims,
    missing,
    notes,
    all_images,
    delay_ranges,
) -> MeasuredDelays:
    """The quasar branch of :func:`measure_delays`: the global search and its budget."""
    from lensdelay.lightcurves import search

    labels = [reference] + [lab for lab in det.labels if lab != reference]
    ranges = None
    if delay_ranges:
        unknown = sorted(set(delay_ranges) - set(labels[1:]))
        if unknown:
            raise InputError(
                f"delay_ranges must name images of the curves other than the reference "
                f"({', '.join(labels[1:])}), got {', '.join(unknown)}"
            )
        ranges = [delay_ranges.get(lab) for lab in labels[1:]]
        for lab, r in delay_ranges.items():
            if r is None or not (np.all(np.isfinite(r)) and r[0] < r[1]):
                raise InputError(
                    f"delay_ranges[{lab!r}] must be (low, high) days with low < high, got {r!r}"
                )
    found = search.search_quasar(
        det,
        reference,
        max_delay=max_delay,
        prior_ranges=ranges,
        simulations=simulations,
        rng=rng,
        rng_sims=rng_sims,
        order=order,
    )
    model = found.model
    if len(det.bands) > 1:
        notes.append(
            f"all {len(det.bands)} bands used ({', '.join(det.bands)}): each has its own "
            "intrinsic curve (same σ and τ) and its own microlensing terms; the delays are shared"
        )
    if model.instrument_columns:
        notes.append(
            f"{len(model.instrument_columns)} instrument offset(s) fitted and marginalised "
            "(an image's magnitude offset per instrument: "
            + ", ".join(f"{lab}/{name}" for lab, name in model.instrument_columns)
            + ")"
        )
    if ranges is not None:
        notes.append(
            "delays searched within the given ranges (a prior, e.g. a forecast's): "
            + ", ".join(
                f"{lab} {r[0]:+.0f}..{r[1]:+.0f} d" for lab, r in zip(labels[1:], ranges) if r
            )
        )
    else:
        notes.append(
            "delays searched wherever the curves overlap enough (no prior from a mass model)"
        )
    notes += found.notes
    g = found.goodness
    window = max(2.0 * det.cadence(), 1.0)
    images = []
    draws = found.statistical[:: max(len(found.statistical) // QUASAR_RATIO_DRAWS, 1)]
    cols = model.flux_ratio_columns()
    for i, lab in enumerate(labels[1:]):
        d = found.final[:, i]
        statement = found.verdicts[i]
        if not statement:
            q = quantile_summary(d)
        elif len(labels) > 2:
            statement += "; no chain of measurable pairs links it to the reference either"
        measurable = not statement
        ratio = None
        if measurable:
            r = []
            for row in draws[:QUASAR_RATIO_DRAWS]:
                beta = model.draw_linear(np.nan_to_num(row), *found.hyper, rng)
                if cols[i + 1] is not None and cols[0] is not None:
                    r.append(10 ** (-0.4 * (beta[cols[i + 1]] - beta[cols[0]])))
            ratio = quantile_summary(np.array(r)) if r else None
        direct = next(p for p in found.pairs if p.earlier == reference and p.later == lab)
        adm = direct.final is not None
        images.append(
            ImageDelay(
                label=lab,
                measurable=measurable,
                delay_days=q if measurable else None,
                flux_ratio=ratio,
                cross_check_days=dispersion_delay(
                    det, reference, lab, _cross_check_grid(model.max_delay, det.cadence()), window
                )
                if adm
                else None,
                statement=statement,
                simulation_bias_days=float(found.simulation_bias[i]) if simulations else None,
                simulation_spread_days=float(found.simulation_spread[i]) if simulations else None,
                statistical_days=quantile_summary(found.statistical[:, i]) if measurable else None,
                model_spread_days=float(found.model_spread[i]),
            )
        )
    for lab, why in missing.items():
        images.append(ImageDelay(lab, False, None, None, None, why))
    order_of = {lab: k for k, lab in enumerate(all_images + [im.label for im in images])}
    images.sort(key=lambda im: order_of.get(im.label, len(order_of)))
    kept = [labels.index(im.label) - 1 for im in images if im.measurable]
    cov = np.atleast_2d(np.cov(found.final[:, kept].T)) if kept else np.zeros((0, 0))
    models = {}
    for p in found.pairs:
        for ms in p.model_scans:
            models[ms.extrinsic.name] = models.get(ms.extrinsic.name, 0.0) + ms.log_evidence
    return MeasuredDelays(
        family=family,
        reference=reference,
        kind="quasar",
        images=tuple(images),
        covariance_labels=tuple(labels[k + 1] for k in kept),
        covariance_days2=cov,
        goodness=g,
        settings={
            "search": "grid over the admitted delays, every mode kept; joint posterior by "
            "importance sampling",
            "max_delay_days": float(model.max_delay),
            "order": int(order),
            "simulations": int(simulations),
            "seed": int(seed),
            "models": [
                {"model": name, "log_evidence_summed_over_pairs": round(v, 2)}
                for name, v in models.items()
            ],
            "pairs": [p.summary() for p in found.pairs],
            "delay_ranges": None
            if ranges is None
            else {lab: list(r) for lab, r in zip(labels[1:], ranges) if r is not None},
        },
        notes=tuple(notes),
        samples=np.nan_to_num(found.final),
        best=np.concatenate([found.best, found.hyper]),
        model=model,
        curves=det,
    )
