"""Is the posterior computed right? Simulation-based calibration on the recipe's own priors.

Truths are drawn from the default galaxy recipe's own priors (power-law slope, axis
ratio, shear, m = 3 and m = 4 multipoles, κ_ext and H0 as the forecast assumes; no
satellite): for such a population an exact posterior puts the truth at a uniformly
distributed quantile of the posterior (Cook, Gelman & Rubin 2006, J. Comput. Graph.
Stat. 15, 675; Talts et al. 2018, arXiv:1804.06788), so the 68% and 95% windows must
hold 68% and 95% of the true delays whatever the misfit -- a shortfall here is the
sampler's, not the recipe's. The quantile is taken for the lens-model delay alone (at
H0 = 70, κ_ext = 0) and for the full delay.

For doubles (more parameters than constraints) a reference posterior is computed
independently of the sampler when ``--reference`` is given: importance sampling in
which every parameter the images cannot pin (slope, axis ratio, angles, shear,
multipoles) is drawn from its prior and the rest (Einstein radius, centre, source) from
a Student-t Laplace approximation at its conditional best fit (a few Gauss-Newton
steps); weight = posterior / proposal. The reference's windows and the sampler's are
compared (width ratio) and both calibrated.

Run:  python benchmarks/bench_posterior_check.py [--n 60] [--reference 20000]
      [--steps 1500] [--jobs 2] [--seed 78]
"""

from __future__ import annotations

import argparse
import warnings
from concurrent.futures import ProcessPoolExecutor

import numpy as np
from astropy.time import Time
from scipy import special, stats

from lensdelay.errors import LensdelayWarning
from lensdelay.inference.fit import fit
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.lensing.distances import LensDistances
from lensdelay.lensing.images import find_images
from lensdelay.lensing.lens import Lens
from lensdelay.lensing.profiles import EllipticalPowerLaw, ExternalShear, IsothermalMultipole
from lensdelay.model.cosmology import DEFAULT_COSMOLOGY
from lensdelay.model.recipe import (
    AXIS_RATIO_PRIOR,
    MULTIPOLE_PRIOR,
    SHEAR_MAX,
    SHEAR_PRIOR,
    SLOPE_BOUNDS,
    SLOPE_PRIOR,
)
from lensdelay.model.scenario import parse_scenario

Z_L, Z_S = 0.5, 2.0
SIGMA = 0.005
KAPPA, H0 = (0.0, 0.05), (70.0, 5.0)  # the forecast's default priors


def truncated_normal(rng, mean, sigma, low, high):
    """One draw of N(mean, sigma) truncated to [low, high] (inverse CDF)."""
    a, b = special.ndtr((low - mean) / sigma), special.ndtr((high - mean) / sigma)
    return float(mean + sigma * special.ndtri(rng.uniform(a, b)))


def draw_truth(rng):
    """A lens drawn from the default recipe's priors and a source with ≥ 2 bright images."""
    te = rng.uniform(0.7, 1.6)
    parts = [
        EllipticalPowerLaw(
            einstein_radius=te,
            slope=truncated_normal(rng, *SLOPE_PRIOR, *SLOPE_BOUNDS),
            axis_ratio=truncated_normal(rng, *AXIS_RATIO_PRIOR, 0.2, 1.0),
            position_angle=rng.uniform(-90, 90),
        ),
        ExternalShear(
            strength=truncated_normal(rng, *SHEAR_PRIOR, 0.0, SHEAR_MAX),
            position_angle=rng.uniform(-90, 90),
        ),
    ]
    for m in (3, 4):
        c, s = rng.normal(0.0, MULTIPOLE_PRIOR * te, 2)
        parts.append(IsothermalMultipole(order=m, cosine=c, sine=s))
    lens = Lens(tuple(parts))
    while True:
        radius = 0.35 * te * np.sqrt(rng.uniform())
        angle = rng.uniform(0, 2 * np.pi)
        table = find_images(lens, [radius * np.sin(angle)], [radius * np.cos(angle)])
        table = table.select(np.abs(table.magnification) >= 0.3)
        if len(table) >= 2:
            return lens, table


def scenario_for(rng, table):
    """The blind scenario of a drawn system (positions with noise, lens light)."""
    labels = "ABCDEFGH"
    images = [
        {
            "label": labels[k],
            "sigma": SIGMA,
            "x": float(table.x[k] + rng.normal(0, SIGMA)),
            "y": float(table.y[k] + rng.normal(0, SIGMA)),
        }
        for k in range(len(table))
    ]
    doc = {
        "name": "check",
        "lens": {"redshift": Z_L},
        "cosmology": {"H0": 70.0, "Om0": 0.3},
        "family": [{"label": "s", "redshift": Z_S, "image": images}],
        "lens_light": {
            "x": float(rng.normal(0, 0.01)),
            "y": float(rng.normal(0, 0.01)),
            "sigma": 0.01,
        },
        "transient": {"family": "s", "seen_in": "A", "date": "2027-01-10", "date_sigma_days": 0.01},
    }
    return parse_scenario(doc, "check.toml"), labels[: len(table)]


def weighted_quantiles(x, w, q):
    """Quantiles q of x with weights w."""
    order = np.argsort(x)
    c = np.cumsum(w[order])
    return np.interp(q, c / c[-1], x[order])


def reference_lens_days(like, best, n_draws, rng, image):
    """Importance-sampled lens-model delay of ``image`` (days at H0 = 70, κ_ext = 0).

    Returns (delays, weights, effective sample size).
    """
    names = like.names
    pinned = [
        i
        for i, nm in enumerate(names)
        if nm.startswith("source")
        or nm.endswith(".einstein_radius")
        or (nm.startswith("mass[0].") and nm.rsplit(".", 1)[1] in ("x", "y"))
    ]
    drawn = [i for i in range(len(names)) if i not in pinned]
    rows = np.repeat(best[None, :], n_draws, axis=0)
    log_prior_drawn = np.zeros(n_draws)
    for i in drawn:
        if i in like.priors:
            mean, sig = like.priors[i]
            a = special.ndtr((like.lower[i] - mean) / sig)
            b = special.ndtr((like.upper[i] - mean) / sig)
            z = special.ndtri(rng.uniform(a, b, n_draws))
            rows[:, i] = mean + sig * z
            log_prior_drawn += -0.5 * z * z
        elif like.periods[i]:
            rows[:, i] = rng.uniform(0, like.periods[i], n_draws)
        else:
            rows[:, i] = rng.uniform(like.lower[i], like.upper[i], n_draws)
    # conditional best fit of the pinned parameters: Levenberg-Marquardt, all rows at once
    damping = np.full(n_draws, 1e-3)
    logp, res, jac = like.evaluate(rows)
    cost = np.where(np.isfinite(logp), np.sum(res**2, axis=1), np.inf)
    k = len(pinned)
    for _ in range(30):
        jp = jac[:, :, pinned]
        normal = np.einsum("pmi,pmj->pij", jp, jp)
        grad = np.einsum("pmi,pm->pi", jp, res)
        system = normal + damping[:, None, None] * np.einsum("pii->pi", normal)[
            :, :, None
        ] * np.eye(k)
        with np.errstate(all="ignore"):
            step = -np.linalg.pinv(system) @ grad[..., None]
        trial = rows.copy()
        trial[:, pinned] += np.where(np.isfinite(step[..., 0]), step[..., 0], 0.0)
        t_logp, t_res, t_jac = like.evaluate(trial)
        t_cost = np.where(np.isfinite(t_logp), np.sum(t_res**2, axis=1), np.inf)
        better = t_cost < cost
        rows[better], cost[better], res[better], jac[better] = (
            trial[better],
            t_cost[better],
            t_res[better],
            t_jac[better],
        )
        damping = np.where(better, np.maximum(damping / 3, 1e-9), np.minimum(damping * 5, 1e9))
    jp = jac[:, :, pinned]
    lam, vec = np.linalg.eigh(np.einsum("pmi,pmj->pij", jp, jp))
    good = np.isfinite(cost) & (lam[:, 0] > 1e-10 * lam[:, -1]) & (lam[:, 0] > 0)
    lam = np.where(good[:, None], lam, 1.0)
    root = vec * (1.0 / np.sqrt(lam))[:, None, :]  # covariance = root rootᵀ
    df = 5.0
    t = rng.standard_normal((n_draws, k)) / np.sqrt(rng.chisquare(df, n_draws) / df)[:, None]
    rows[:, pinned] += np.einsum("pij,pj->pi", root, t)
    log_q = stats.multivariate_t.logpdf(t, loc=np.zeros(k), shape=np.eye(k), df=df)
    log_q += 0.5 * np.sum(np.log(lam), axis=1)
    log_w = np.full(n_draws, -np.inf)
    ok = good & np.all(np.isfinite(rows), axis=1)
    log_w[ok] = like.log_probability(rows[ok]) - log_prior_drawn[ok] - log_q[ok]
    log_w[~np.isfinite(log_w)] = -np.inf
    w = np.exp(log_w - np.max(log_w))
    keep = w > 0
    fermat = like.predict(rows[keep])[0]["fermat"]
    days = like.families[0].days_per_arcsec2
    delays = (fermat[:, image] - fermat[:, 0]) * days
    w = w[keep]
    return delays, w, float(np.sum(w) ** 2 / np.sum(w**2))


def one_system(args):
    """Forecast one system; per delay (n_images, PIT lens, PIT, ref PIT, width ratio, ESS)."""
    import logging

    from lensdelay.api import forecast_scenario

    logging.getLogger("emcee").setLevel(logging.ERROR)
    index, seed, steps, n_reference = args
    rng = np.random.default_rng(seed)
    lens, table = draw_truth(rng)
    h0, kappa = rng.normal(*H0), rng.normal(*KAPPA)
    sc, labels = scenario_for(rng, table)
    days = LensDistances(DEFAULT_COSMOLOGY, Z_L, Z_S).days_per_arcsec2(Z_S)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        res = forecast_scenario(
            sc,
            budget=False,
            n_samples=4000,
            steps=steps,
            walkers=32,
            seed=seed % 2**31,
            progress=False,
            now=Time("2027-01-11", scale="utc"),
        )
        like = ImageLikelihood(sc, sc.model, prior="flat")
        best = fit(like, seed=1).values if n_reference and len(table) == 2 else None
    rows = []
    for im in res.images:
        if im.label == "A" or im.label not in labels:
            continue
        k = labels.index(im.label)
        lens_truth = (table.fermat[k] - table.fermat[0]) * days
        truth = lens_truth * 70.0 / h0 * (1.0 - kappa)
        s = im.samples
        w = s.weights / np.sum(s.weights)
        pit_lens = float(np.sum(w * (s.lens_days < lens_truth)))
        pit = float(np.sum(w * (s.delay < truth)))
        ref_pit = ratio = ess = np.nan
        if best is not None:
            with warnings.catch_warnings():
                warnings.simplefilter("ignore")
                d, rw, ess = reference_lens_days(like, best, n_reference, rng, k)
            ref_pit = float(np.sum(rw * (d < lens_truth)) / np.sum(rw))
            q_ref = weighted_quantiles(d, rw, [0.16, 0.84])
            q_mc = weighted_quantiles(s.lens_days, w, [0.16, 0.84])
            ratio = float((q_mc[1] - q_mc[0]) / (q_ref[1] - q_ref[0]))
        rows.append((len(table), pit_lens, pit, ref_pit, ratio, ess))
    return index, rows


def coverage(pit):
    """Shares inside the central 68% and 95% intervals."""
    pit = np.asarray(pit)
    return np.mean(np.abs(pit - 0.5) <= 0.34), np.mean(np.abs(pit - 0.5) <= 0.475)


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=60)
    parser.add_argument("--reference", type=int, default=0, help="reference draws per double")
    parser.add_argument("--steps", type=int, default=1500)
    parser.add_argument("--jobs", type=int, default=2)
    parser.add_argument("--seed", type=int, default=78)
    args = parser.parse_args()
    seeds = np.random.SeedSequence(args.seed).generate_state(args.n)
    tasks = [(i, int(s), args.steps, args.reference) for i, s in enumerate(seeds)]
    rows = []
    with ProcessPoolExecutor(args.jobs) as pool:
        for index, r in pool.map(one_system, tasks):
            rows += r
            for x in r:
                print(f"system {index:3d}: " + " ".join(f"{v:.3f}" for v in x), flush=True)
    a = np.array(rows, dtype=float)
    print()
    print(f"{args.n} systems drawn from the default recipe's priors, {len(a)} delays")
    for kind, mask in (("doubles", a[:, 0] == 2), ("quads", a[:, 0] > 2), ("all", a[:, 0] > 0)):
        if not np.any(mask):
            continue
        b = a[mask]
        c_lens, c_all = coverage(b[:, 1]), coverage(b[:, 2])
        print(
            f"{kind} ({len(b)} delays): sampler windows hold {100 * c_all[0]:.0f}% / "
            f"{100 * c_all[1]:.0f}% of the true delays (lens-model part alone "
            f"{100 * c_lens[0]:.0f}% / {100 * c_lens[1]:.0f}%)"
        )
        ref = b[np.isfinite(b[:, 3])]
        if len(ref):
            c_ref = coverage(ref[:, 3])
            print(
                f"  reference (importance sampling, median ESS {np.median(ref[:, 5]):.0f}): "
                f"lens-model windows hold {100 * c_ref[0]:.0f}% / {100 * c_ref[1]:.0f}%; "
                f"sampler's 68% width / reference's: median {np.median(ref[:, 4]):.2f}"
            )


if __name__ == "__main__":
    main()
