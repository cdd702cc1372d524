"""Joint-H0 calibration and speed (issue 30).

A mock population (lensdelay.hubble.mock): 40 lenses with delays (5% errors) and
kinematics (5-10%), H0 = 70, truths outside each lens's posterior (slope scatter 0.1,
κ_ext ~ N(0, 0.05) from each lens's prior, λ_int ~ N(1, 0.05)). Over many realisations:
the coverage of the joint 68% and 95% intervals, the mean bias in units of the 1σ width,
and the width, with λ_int inferred; then the same mocks with λ_int fixed at 1 (the
precision bought by assuming the mass profile), a truth the orbits' prior does not favour,
and 200 more lenses that have kinematics only. Speed: one invented demo lens's
positions-only posterior and dispersion table (scenarios/joint), and the joint stage for
40 lenses.

Run: python benchmarks/bench_joint_h0.py [--realisations 20] [--fixed 5] [--sensitivity 5]
         [--resolved 20] [--rings 0,0.3,0.6,1.0,1.5] [--first 0]
         [--only aperture|resolved|sbc|wilks|ridge|mle] [--hold r_ani_mean] [--no-scatter]
         [--mle 200] [--more-draws 2000]

The orbits' population is drawn from the joint stage's own prior for the calibration (one
aperture dispersion per lens cannot measure it, so the answer leans on that prior); a
second set keeps it at r_a = 1.5 R_eff, near the prior's lower end, to show how far.
The resolved set gives every lens spatially resolved kinematics instead — one dispersion
per ring of ``--rings`` (arcsec, R_eff = 1"), each with the lens's 5-10% error, in 0.1"
seeing (an integral-field spectrograph with adaptive optics, or from space) — the same
mocks otherwise, with λ_int inferred and, for ``--fixed`` of them, fixed at 1.

The likelihood check (``--only wilks``) asks of the same resolved mocks whether the joint
likelihood itself is right, apart from priors and sampler: by Wilks' theorem (Wilks 1938,
Ann. Math. Stat. 9, 60) −2 Δln L between the truth and the maximum follows χ² with as
many degrees of freedom as parameters are free (5 when none is held: mean 5, 68% below
5.89), and the profile in H0 at the truth χ² with 1 (mean 1; above 1 in 32% of mocks:
the profile-likelihood 68% interval missing the truth). The maximum is found by
Nelder-Mead (scipy) from the truth; parameters on a bound (a scatter at 0) make the
quantities a little smaller than χ².

The maximum-likelihood check (``--only mle``) is cheap (seconds a mock, no sampler): over
many resolved mocks (``--mle``, the calibration's realisations and seeds) the mean offset
of the maximum-likelihood H0 from the truth tells whether the joint likelihood, its Monte
Carlo integration included, leans at a fixed truth; with ``--more-draws N`` each mock is
made with N draws per lens and its maximum found twice on the same data, with the first
``--draws`` of them and with all N (the Monte Carlo integration's part, paired).
"""

from __future__ import annotations

import argparse
import time
import warnings
from dataclasses import replace

import numpy as np

from lensdelay.errors import LensdelayWarning
from lensdelay.hubble.cosmography import joint_h0
from lensdelay.hubble.joint import Population
from lensdelay.hubble.mock import MockSettings, mock_population

TRUE_H0 = 70.0


def _score(res, truth: float = TRUE_H0) -> dict:
    h = res.h0
    sigma = 0.5 * (h["p84"] - h["p16"])
    return {
        "median": h["median"],
        "in68": h["p16"] <= truth <= h["p84"],
        "in95": h["p2.5"] <= truth <= h["p97.5"],
        "bias_sigma": (h["median"] - truth) / sigma,
        "width_percent": 100.0 * sigma / h["median"],
    }


def _summary(label: str, scores: list[dict]) -> None:
    n = len(scores)
    c68 = np.mean([s["in68"] for s in scores])
    c95 = np.mean([s["in95"] for s in scores])
    err68 = np.sqrt(0.68 * 0.32 / n)
    bias = np.mean([s["bias_sigma"] for s in scores])
    bias_err = np.std([s["bias_sigma"] for s in scores]) / np.sqrt(n)
    width = np.mean([s["width_percent"] for s in scores])
    print(
        f"{label}: {n} realisations; 68% interval holds the truth {100 * c68:.0f}% "
        f"(binomial error ±{100 * err68:.0f}%), 95% interval {100 * c95:.0f}%; mean bias "
        f"{bias:+.2f} ± {bias_err:.2f} of the 1-sigma width; 1-sigma width {width:.1f}% of H0"
    )


def _demo_lens_timing() -> None:
    from lensdelay.api import load_scenario
    from lensdelay.hubble.lens_evidence import lens_evidence, posterior_of_positions

    sc = load_scenario("scenarios/joint/quenby.toml")
    t0 = time.perf_counter()
    like, chain = posterior_of_positions(sc)
    t1 = time.perf_counter()
    lens_evidence(
        "quenby",
        sc,
        like,
        chain.samples(),
        anisotropy="osipkov_merritt",
        n_samples=600,
        rng=np.random.default_rng(1),
    )
    t2 = time.perf_counter()
    print(
        f"one demo lens (scenarios/joint/quenby.toml, default recipe): positions-only "
        f"posterior {t1 - t0:.1f} s, delays and dispersion table {t2 - t1:.1f} s "
        f"(goal < 120 s together)"
    )


def _run(settings: MockSettings, seed: int, population: Population, steps: int) -> dict:
    lenses, truths = mock_population(settings, np.random.default_rng(1000 + seed))
    t0 = time.perf_counter()
    res = joint_h0(lenses, population, steps=steps, seed=seed + 1)
    score = _score(res, truths[0]["h0"]) | {"seconds": time.perf_counter() - t0}
    score["r_ani_true"] = truths[0]["r_ani_mean"]
    score["r_ani_post"] = res.parameters.get("r_ani_mean", {}).get("median", np.nan)
    return score


def _line(label: str, r: int, s: dict) -> None:
    print(
        f"  {label} {r:2d}: H0 {s['median']:.2f} (width {s['width_percent']:.1f}%, bias "
        f"{s['bias_sigma']:+.2f} sigma; r_ani true {s['r_ani_true']:.2f}, posterior median "
        f"{s['r_ani_post']:.2f}), {s['seconds']:.0f} s",
        flush=True,
    )


def main() -> None:
    parser = argparse.ArgumentParser()
    parser.add_argument("--realisations", type=int, default=20)
    parser.add_argument("--fixed", type=int, default=5, help="of them also with λ_int = 1")
    parser.add_argument("--sensitivity", type=int, default=5, help="with r_ani/R_eff = 1.5")
    parser.add_argument("--extra", type=int, default=2, help="with +200 kinematics-only")
    parser.add_argument("--steps", type=int, default=2500)
    parser.add_argument("--draws", type=int, default=400)
    parser.add_argument("--resolved", type=int, default=20, help="with resolved kinematics")
    parser.add_argument("--rings", default="0,0.3,0.6,1.0,1.5", help="ring radii, arcsec")
    parser.add_argument("--sbc", type=int, default=20, help="simulation-based calibration")
    parser.add_argument(
        "--only", choices=("aperture", "resolved", "sbc", "wilks", "ridge", "mle"), help="one set"
    )
    parser.add_argument(
        "--first", type=int, default=0, help="number of the first realisation (more mocks)"
    )
    parser.add_argument(
        "--hold", default="", help="wilks, mle: hyper-parameters held at their truths"
    )
    parser.add_argument(
        "--no-scatter", action="store_true", help="wilks, mle: mocks without λ_int or orbit scatter"
    )
    parser.add_argument("--mle", type=int, default=200, help="mocks of the likelihood's maximum")
    parser.add_argument(
        "--more-draws", type=int, default=0, help="mle: also with this many draws, paired"
    )
    args = parser.parse_args()
    warnings.simplefilter("ignore", LensdelayWarning)
    if args.only in (None, "aperture"):
        _aperture_sets(args)
    if args.only in (None, "resolved"):
        _resolved_set(args)
    if args.only in (None, "sbc"):
        _sbc_set(args)
    if args.only in (None, "wilks"):
        _wilks_set(args)
    if args.only in (None, "ridge"):
        _ridge(args)
    if args.only in (None, "mle"):
        _mle_set(args)


def _calibration_likelihood(lenses, seed: int):
    """The joint likelihood with the Monte Carlo draws ``joint_h0(..., seed=seed)`` makes."""
    from lensdelay.hubble.joint import JointLikelihood

    draws_seed, _ = np.random.SeedSequence(seed).spawn(2)
    return JointLikelihood(lenses, Population(), np.random.default_rng(draws_seed))


def _nelder_mead(f, start):
    """The minimum of ``f`` from ``start``: Nelder-Mead (scipy), restarted once where it stopped."""
    from scipy.optimize import minimize

    options = {"maxiter": 4000, "xatol": 1e-5, "fatol": 1e-5}
    first = minimize(f, start, method="Nelder-Mead", options=options)
    return minimize(f, first.x, method="Nelder-Mead", options=options)


def _ridge(args) -> None:
    """The likelihood along r_a: pinned with the rest at the truth, a ridge when freed.

    (1) Eight resolved mocks with a true r_a of 2 R_eff: −Δln L on a grid of r_a with H0,
    λ̄ and the scatters at their truths, summed. (2) Resolved realisation 37 of the
    calibration (true r_a 1.95): the profile likelihood of r_a, every other parameter at
    its best (Nelder-Mead), and the H0 and λ̄ there.
    """
    from lensdelay.hubble.joint import JointLikelihood

    rings = _rings(args)
    grid = np.array([1.0, 1.5, 2.0, 2.5, 3.0, 3.5, 4.0, 4.5, 5.0])
    total = np.zeros(len(grid))
    for r in range(8):
        st = MockSettings(n_lenses=40, n_samples=args.draws, r_ani_mean=2.0, rings=rings)
        lenses, _ = mock_population(st, np.random.default_rng(5000 + r))
        like = JointLikelihood(lenses, Population(), np.random.default_rng(r))
        theta = np.tile([TRUE_H0, 1.0, 0.05, 0.0, 0.2], (len(grid), 1))
        theta[:, 3] = grid
        log_l = like(theta)
        total += log_l.max() - log_l
    total -= total.min()
    print(
        "likelihood along r_a with H0, lambda-bar and the scatters at their truths (8 mocks, "
        "true r_a 2.0): -dlnL " + ", ".join(f"{g:.1f}: {v:.1f}" for g, v in zip(grid, total))
    )
    settings = MockSettings(n_lenses=40, n_samples=args.draws, r_ani_mean=None, rings=rings)
    lenses, truths = mock_population(settings, np.random.default_rng(1000 + 37))
    like = _calibration_likelihood(lenses, 38)  # realisation 37's joint seed
    profile = []
    for r_a in (truths[0]["r_ani_mean"], *grid[2:]):

        def minus(p, r_a=r_a):
            return -float(like(np.array([[p[0], p[1], p[2], r_a, p[3]]]))[0])

        res = _nelder_mead(minus, [TRUE_H0, 1.0, 0.05, 0.3])
        profile.append((r_a, res.fun, res.x[0], res.x[1]))
    best = min(p[1] for p in profile)
    print(
        f"realisation 37 (true r_a {truths[0]['r_ani_mean']:.2f}), profile likelihood of r_a "
        "(-dlnL, H0, lambda-bar at the best of the rest): "
        + "; ".join(f"{r:.2f}: {f - best:.1f}, {h:.1f}, {lam:.3f}" for r, f, h, lam in profile)
    )


def _wilks_set(args) -> None:
    """The resolved mocks' likelihood at the truth against its maximum (Wilks 1938).

    ``--hold`` keeps hyper-parameters at their truths (not maximised; the degrees of
    freedom drop by as many); ``--no-scatter`` makes mocks without scatter in λ_int and
    in the orbits and holds both scatters at zero — the population integrals then
    trivial, so what remains is the delays', rings' and per-lens nuisances' part.
    """
    rings = _rings(args)
    settings = MockSettings(n_lenses=40, n_samples=args.draws, r_ani_mean=None, rings=rings)
    settings, names, held, free = _held(args, settings)
    whole, profile = [], []
    for r in range(args.first, args.first + args.resolved):
        lenses, truths = mock_population(settings, np.random.default_rng(1000 + r))
        like = _calibration_likelihood(lenses, r + 1)  # the calibration's joint seed
        t = truths[0]
        truth = np.array([t[name] if name != "H0" else t["h0"] for name in names])

        def minus(x):
            theta = truth.copy()
            theta[free] = x
            return -float(like(theta[None, :])[0])

        top = _nelder_mead(minus, truth[free])
        # H0 is the first parameter: held at its truth, the rest maximised
        at_h0 = _nelder_mead(lambda rest: minus(np.concatenate([truth[:1], rest])), truth[free][1:])
        whole.append(2.0 * (minus(truth[free]) - top.fun))
        profile.append(2.0 * (at_h0.fun - top.fun))
        print(
            f"  wilks {r:2d}: -2 dlnL truth {whole[-1]:.1f}, profile at the true H0 "
            f"{profile[-1]:.1f} (maximum at H0 {top.x[0]:.2f})",
            flush=True,
        )
    whole, profile = np.array(whole), np.array(profile)
    n, dof = len(whole), len(free)
    from scipy.stats import chi2

    p68 = chi2.ppf(0.6827, dof)
    print(
        f"likelihood check, {n} resolved mocks ({len(rings) - 1} rings; held: "
        f"{', '.join(sorted(held)) or 'none'}): -2 dlnL at the truth mean {whole.mean():.1f} "
        f"± {whole.std() / np.sqrt(n):.1f} (chi2 with {dof} dof: {dof}), below {p68:.2f} in "
        f"{100 * np.mean(whole < p68):.0f}% (68%); profile in H0 mean {profile.mean():.2f} "
        f"± {profile.std() / np.sqrt(n):.2f} (chi2 with 1 dof: 1), below 1 in "
        f"{100 * np.mean(profile < 1.0):.0f}% (68%)"
    )


def _held(args, settings):
    """``--hold`` and ``--no-scatter`` applied: (settings, names, held names, free columns).

    H0 stays free (the profile and the offsets are taken in it).
    """
    names = Population().names
    held = set(filter(None, args.hold.split(",")))
    if args.no_scatter:
        settings = replace(settings, lambda_scatter=0.0, r_ani_scatter=0.0)
        held |= {"lambda_scatter", "r_ani_scatter"}
    if not held <= set(names[1:]):
        raise SystemExit(f"--hold must name some of {list(names[1:])}, got {sorted(held)}")
    free = np.array([k for k, name in enumerate(names) if name not in held])
    return settings, names, held, free


def _mle_set(args) -> None:
    """The maximum-likelihood H0 of many resolved mocks against the truth (and variants).

    Every hyper-parameter is free; the maximum is found by Nelder-Mead from the truth.
    With ``--hold`` each mock is also maximised with those hyper-parameters at their
    truths, and with ``--no-scatter`` the mocks have no λ_int or orbit scatter and both
    scatters are held at zero in the variant (the paired difference: what leaving them
    free does to H0). With ``--more-draws`` the mocks carry that many draws per lens and
    the variant uses all of them, the first fit only ``--draws`` (same data; the κ_ext,
    λ_int and orbit draws drawn afresh): the difference is the Monte Carlo integration's.
    """
    rings = _rings(args)
    many = max(args.more_draws, args.draws)
    settings = MockSettings(n_lenses=40, n_samples=many, r_ani_mean=None, rings=rings)
    settings, names, held, free = _held(args, settings)
    variant = bool(held) or args.more_draws > 0
    offsets, paired = [], []
    for r in range(args.first, args.first + args.mle):
        lenses, truths = mock_population(settings, np.random.default_rng(1000 + r))
        t = truths[0]
        truth = np.array([t[name] if name != "H0" else t["h0"] for name in names])
        like = _calibration_likelihood([_first_draws(lens, args.draws) for lens in lenses], r + 1)
        best = [_nelder_mead(lambda x, like=like: -float(like(x[None, :])[0]), truth).x[0]]
        if variant:
            like = _calibration_likelihood([_first_draws(lens, many) for lens in lenses], r + 1)

            def minus(x, like=like):
                theta = truth.copy()
                theta[free] = x
                return -float(like(theta[None, :])[0])

            best.append(_nelder_mead(minus, truth[free]).x[0])
            paired.append(best[0] - best[1])
        offsets.append(best[0] - truth[0])
        line = f"  mle {r:3d}: H0 {best[0]:.3f} (true r_a {t['r_ani_mean']:.2f})"
        if variant:
            line += f", variant {best[1]:.3f}"
        print(line, flush=True)
    offsets = np.array(offsets)
    n = len(offsets)
    print(
        f"maximum-likelihood H0 of {n} resolved mocks ({len(rings) - 1} rings, {args.draws} "
        f"draws{', no scatter' if args.no_scatter else ''}): offset from the truth mean "
        f"{offsets.mean():+.3f} ± {offsets.std() / np.sqrt(n):.3f} km/s/Mpc (rms "
        f"{offsets.std():.3f})"
    )
    if paired:
        paired = np.array(paired)
        what = f"held {', '.join(sorted(held))}" if held else ""
        what += (" and " if held and args.more_draws else "") + (
            f"{many} draws" if args.more_draws else ""
        )
        print(
            f"the same mocks, all free with {args.draws} draws minus the variant ({what}): "
            f"mean {paired.mean():+.4f} ± {paired.std() / np.sqrt(n):.4f} km/s/Mpc (rms "
            f"{paired.std():.4f})"
        )


def _first_draws(lens, n: int):
    """``lens`` with its first ``n`` posterior draws (all of them if it has no more)."""
    return replace(
        lens,
        model_days=lens.model_days[:n],
        slope=lens.slope[:n],
        einstein_radius=lens.einstein_radius[:n],
    )


def _sbc_set(args) -> None:
    """Simulation-based calibration: the population's truths drawn from the priors.

    The fixed-truth sets above test the answer at one population; here every
    realisation draws the population from the joint stage's own priors (H0 and λ̄
    inside their flat ranges), with resolved kinematics, so the 68% and 95% intervals
    must hold the truth 68% and 95% of the time if the likelihood, the Monte Carlo
    integration and the sampler are right: it tests the machinery, not the priors.
    """
    rings = _rings(args)
    settings = MockSettings(n_lenses=40, n_samples=args.draws, rings=rings, hyper_from_prior=True)
    scores = []
    for r in range(args.first, args.first + args.sbc):
        scores.append(_run(settings, 500 + r, Population(), args.steps))
        _line("sbc", r, scores[-1])
    print()
    _summary(
        f"simulation-based calibration (population from the priors, {len(rings) - 1} rings; "
        "goal 68 ± 10% and 95 ± 5% coverage)",
        scores,
    )


def _rings(args) -> tuple[float, ...]:
    """The ring radii of ``--rings`` (arcsec)."""
    return tuple(float(x) for x in args.rings.split(","))


def _free_and_fixed(settings: MockSettings, n: int, args, label: str):
    """``n`` realisations with λ_int inferred; the first ``--fixed`` also with λ_int = 1."""
    free, fixed = [], []
    for r in range(args.first, args.first + n):
        free.append(_run(settings, r, Population(), args.steps))
        _line(label, r, free[-1])
        if r < args.first + args.fixed:
            fixed.append(_run(settings, r, Population(lambda_int=False), args.steps))
            _line(f"  {label}, lambda_int = 1", r, fixed[-1])
    return free, fixed


def _resolved_set(args) -> None:
    """The calibration with resolved kinematics (every lens: one dispersion per ring)."""
    rings = _rings(args)
    settings = MockSettings(n_lenses=40, n_samples=args.draws, r_ani_mean=None, rings=rings)
    free, fixed = _free_and_fixed(settings, args.resolved, args, "resolved")
    print()
    times = [s["seconds"] for s in free]
    print(
        f"joint stage with resolved kinematics ({len(rings) - 1} rings), 40 lenses x "
        f"{args.draws} draws, {args.steps} steps: median {np.median(times):.0f} s "
        "(goal < 120 s)"
    )
    _summary(
        f'resolved kinematics ({len(rings) - 1} rings {list(rings)}"), lambda_int inferred, '
        "orbits from the prior (goal: 68 ± 10% coverage, |bias| < 0.25, width <= 2%)",
        free,
    )
    if fixed:
        _summary("the same mocks with lambda_int fixed at 1", fixed)


def _aperture_sets(args) -> None:
    """The calibration with one aperture dispersion per lens, and its variants."""
    _demo_lens_timing()
    # A. calibration: the orbits' population drawn from the joint stage's own prior
    prior_orbits = MockSettings(n_lenses=40, n_samples=args.draws, r_ani_mean=None)
    free, fixed = _free_and_fixed(prior_orbits, args.realisations, args, "calibration")
    # B. a truth the orbits' prior does not favour (r_a = 1.5 R_eff, near its lower end)
    edge = MockSettings(n_lenses=40, n_samples=args.draws, r_ani_mean=1.5)
    sensitivity = []
    for r in range(args.sensitivity):
        sensitivity.append(_run(edge, 100 + r, Population(), args.steps))
        _line("r_ani = 1.5", r, sensitivity[-1])
    # C. 200 more lenses with kinematics only
    many = MockSettings(n_lenses=40, n_kinematics_only=200, n_samples=args.draws, r_ani_mean=None)
    extra = []
    for r in range(args.extra):
        extra.append(_run(many, r, Population(), args.steps))
        _line("+200 kinematics-only", r, extra[-1])
    print()
    times = [s["seconds"] for s in free]
    print(
        f"joint stage, 40 lenses x {args.draws} draws, {args.steps} steps: median "
        f"{np.median(times):.0f} s (goal < 120 s)"
    )
    _summary(
        "lambda_int inferred, orbits from the prior (goal: 68 ± 10% coverage, |bias| < 0.25, "
        "width <= 2%)",
        free,
    )
    if fixed:
        _summary("the same mocks with lambda_int fixed at 1 (the profile assumed)", fixed)
    if sensitivity:
        _summary(
            "lambda_int inferred, true r_ani/R_eff = 1.5 (orbits' prior flat in 0.5-5)", sensitivity
        )
    if extra:
        _summary("lambda_int inferred, + 200 lenses with kinematics only", extra)


if __name__ == "__main__":
    main()
