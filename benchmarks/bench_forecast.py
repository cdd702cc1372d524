"""Forecast benchmark (issue 4): a quad with 1e5 samples, end to end including figures
(the timeline and the finder chart).

Run: python benchmarks/bench_forecast.py
"""

from __future__ import annotations

import time
import warnings

import numpy as np
from astropy.time import Time

from lensdelay.errors import LensdelayWarning
from lensdelay.report.figures import timeline_figure
from lensdelay.io.forecast_files import forecast_ics, forecast_json, forecast_table, table_text
from lensdelay.lensing.images import newton_polish


def main():
    warnings.simplefilter("ignore", LensdelayWarning)
    import lensdelay.forecast.pipeline as fr
    import lensdelay.inference.sampling as sampling
    from lensdelay.api import forecast_scenario

    marks = {}
    # the sampler is reached through fit_and_sample, which looks ``sample`` up in its module
    original_sample, original_model = sampling.sample, fr.solve_samples

    def timed(name, fn):
        def wrapper(*a, **k):
            t0 = time.perf_counter()
            out = fn(*a, **k)
            marks[name] = marks.get(name, 0.0) + time.perf_counter() - t0
            return out

        return wrapper

    sampling.sample = timed("posterior (emcee 32x2000)", original_sample)
    fr.solve_samples = timed("images+delays for all samples", original_model)
    fr.build_calendar = timed("observability calendar", fr.build_calendar)
    t0 = time.perf_counter()
    res = forecast_scenario("scenarios/vellmar_quad.toml", n_samples=100_000, budget=False)
    t_run = time.perf_counter() - t0
    t1 = time.perf_counter()
    forecast_json(res)
    table_text(forecast_table(res))
    forecast_ics(res)
    import io

    from lensdelay.report.finder import finder_chart, region_text

    region_text(res)
    for fig in (timeline_figure(res), finder_chart(res)):
        for ext in ("png", "pdf"):
            fig.savefig(io.BytesIO(), format=ext, dpi=130)
    t_out = time.perf_counter() - t1
    total = t_run + t_out
    print(f"quad forecast, 1e5 samples, end to end: {total:.1f} s (goal < 30 s)")
    fit_time = t_run - sum(marks.values())
    for k, v in marks.items():
        print(f"  {k}: {v:.2f} s")
    print(f"  fit and the rest: {fit_time:.2f} s;  outputs and figures: {t_out:.2f} s")

    sampling.sample, fr.solve_samples = original_sample, original_model
    # the default galaxy recipe (power law with the slope prior + shear; issue 13) on the same quad
    from dataclasses import replace

    from lensdelay.io.reading import load_scenario as _load
    from lensdelay.model.recipe import default_galaxy_recipe

    sc, _ = _load("scenarios/vellmar_quad.toml")
    xs = np.concatenate([[im.x for im in f.images] for f in sc.families])
    ys = np.concatenate([[im.y for im in f.images] for f in sc.families])
    centre = (sc.lens_light.x, sc.lens_light.y) if sc.lens_light else (0.0, 0.0)
    t0 = time.perf_counter()
    res_default = forecast_scenario(
        replace(sc, model=default_galaxy_recipe(xs, ys, centre)), n_samples=100_000, budget=False
    )
    forecast_json(res_default)
    for fig in (timeline_figure(res_default), finder_chart(res_default)):
        for ext in ("png", "pdf"):
            fig.savefig(io.BytesIO(), format=ext, dpi=130)
    t_default = time.perf_counter() - t0
    print(
        f"the same quad with the default galaxy recipe (power law + shear), with JSON, timeline "
        f"and finder chart: {t_default:.1f} s (SIE + shear: {total:.1f} s; goal < 30 s)"
    )
    # the update routes, timed end to end (1e5 samples): a sighting that agrees with the
    # prediction (importance weights) and one 12 sigma away (a new joint posterior sample)
    for label, seen in (
        ("sighting that agrees (re-weighting)", "C=2026-12-01T00:00±1"),
        ("sighting 12 sigma away (resampling)", "D=2027-01-15±1.5"),
    ):
        t0 = time.perf_counter()
        upd = forecast_scenario(
            "scenarios/vellmar_quad.toml",
            n_samples=100_000,
            budget=False,
            seen=[seen],
            now=Time("2027-02-01", scale="utc"),  # after the sightings (they have happened)
        )
        route = upd.timing.models[0]
        print(
            f"forecast with a {label}: {time.perf_counter() - t0:.1f} s, route {route.route}, "
            f"{route.effective_samples:.0f} effective samples"
        )

    # vectorised per-sample solve vs a loop over samples
    from lensdelay.forecast.samples import image_tracks
    from lensdelay.io.reading import load_scenario
    from lensdelay.inference.likelihood import ImageLikelihood

    sc, _ = load_scenario("scenarios/vellmar_quad.toml")
    like = ImageLikelihood(sc, sc.model)
    chain = res.chains[0].samples()
    rows = chain[np.random.default_rng(0).integers(0, len(chain), 2000)]
    fam = like.families[0]
    tracks, _ = image_tracks(like, res.fits[0].values, "sn")
    starts_x = np.array([t.x for t in tracks])
    starts_y = np.array([t.y for t in tracks])
    t0 = time.perf_counter()
    lens = like.lens_for(rows)
    newton_polish(
        lens,
        np.broadcast_to(starts_x, (len(rows), 4)),
        np.broadcast_to(starts_y, (len(rows), 4)),
        rows[:, -2:-1],
        rows[:, -1:],
        fam.scale,
        max_step=0.05,
    )
    t_vec = (time.perf_counter() - t0) / len(rows)
    t0 = time.perf_counter()
    n_loop = 300
    for r in rows[:n_loop]:
        single = like.model.lens(r[: like.n_model])
        newton_polish(single, starts_x, starts_y, r[-2], r[-1], fam.scale, max_step=0.05)
    t_loop = (time.perf_counter() - t0) / n_loop
    print(
        f"per-sample image solve: vectorised {t_vec * 1e6:.1f} us/sample, loop {t_loop * 1e6:.0f} "
        f"us/sample: "
        f"ratio {t_loop / t_vec:.0f}x"
    )


if __name__ == "__main__":
    main()
