"""H0 benchmark (issue 5): the H0 posterior of the demo double with 1e5 samples.

Run: python benchmarks/bench_hubble.py
"""

from __future__ import annotations

import time
import warnings

import numpy as np

from lensdelay.errors import LensdelayWarning
from lensdelay.inference.fit import fit
from lensdelay.hubble.analysis import h0_posterior, kappa_comparison
from lensdelay.inference.likelihood import ImageLikelihood
from lensdelay.io.reading import load_scenario
from lensdelay.inference.sampling import sample


def main():
    warnings.simplefilter("ignore", LensdelayWarning)
    t0 = time.perf_counter()
    sc, _ = load_scenario("scenarios/ostrin_double.toml")
    like = ImageLikelihood(sc, sc.model, use_delays=True)
    res = fit(like)
    t_fit = time.perf_counter() - t0
    t0 = time.perf_counter()
    chain = sample(like, res.values, walkers=32, steps=2000, progress=False, scales=res.errors)
    t_mcmc = time.perf_counter() - t0
    rng = np.random.default_rng(0)
    h0_eff = chain.samples()[:, -1]
    draws = h0_eff[rng.integers(0, len(h0_eff), 100_000)]
    t0 = time.perf_counter()
    post = h0_posterior(draws, like, kappa_ext=(0.0, 0.05), om0_prior=(0.3, 0.02), rng=rng)
    kappa_comparison(draws, like, (0.3, 0.02))
    t_post = time.perf_counter() - t0
    total = t_fit + t_mcmc + t_post
    h = post["H0"]
    print(
        f"H0 posterior, 1e5 samples: {total:.1f} s in all (goal < 10 s): fit {t_fit:.1f} s, joint "
        f"lens+H0 sampling (32x2000) {t_mcmc:.1f} s, kappa_ext/Om0 priors and 6 kappa_ext "
        f"comparisons on 1e5 samples {t_post:.2f} s; H0 = {h['median']:.1f} "
        f"[{h['p16']:.1f}, {h['p84']:.1f}] (truth 70)"
    )


if __name__ == "__main__":
    main()
