"""``lensdelay hubble``: delay-vs-H0 curves and, with measured delays, the H0 posterior."""
from __future__ import annotations

import sys
import warnings

import numpy as np

from lensdelay.errors import InputError, LensdelayWarning


def run_hubble(scenario_path, model_paths=None, *, kappa_ext=(0.0, 0.05), om0=None, curves=(),
               walkers=32, steps=2000, seed=1, progress=True, cosmology_name=None,
               cosmology_class=None, class_params=None, prior="flat") -> dict:
    from dataclasses import replace

    from lensdelay.cli.commands import provenance
    from lensdelay.model.cosmology import cosmology_from_spec
    from lensdelay.inference.fit import fit
    from lensdelay.hubble.analysis import delay_curves, h0_posterior, kappa_comparison, pair_delays
    from lensdelay.inference.likelihood import ImageLikelihood
    from lensdelay.io.reading import load_scenario
    from lensdelay.inference.sampling import sample

    if not kappa_ext[0] < 1:
        raise InputError(f"--kappa-ext mean must be < 1, got {kappa_ext[0]:g}")
    if kappa_ext[1] < 0:
        raise InputError(f"--kappa-ext sigma must be >= 0, got {kappa_ext[1]:g}")
    if om0 is not None and not (0 < om0[0] < 1 and om0[1] >= 0):
        raise InputError(f"--om0 must be MEAN in (0, 1) and SIGMA >= 0, got {om0[0]:g} {om0[1]:g}")
    sc, used = load_scenario(scenario_path, model_paths[:1] if model_paths else None)
    if cosmology_name:
        sc = replace(sc, cosmology=cosmology_from_spec({"name": cosmology_name}))
    if cosmology_class:
        from lensdelay.model.cosmology import cosmology_from_class

        sc = replace(sc, cosmology=cosmology_from_class(cosmology_class, class_params or {}, sc.cosmology))
    rng = np.random.default_rng(seed)
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", LensdelayWarning)
        like = ImageLikelihood(sc, sc.model, prior=prior)
        try:
            res = fit(like, seed=seed)
        except InputError as err:
            raise err.with_source(scenario_path) from err
        chain = sample(like, res.values, walkers=walkers, steps=steps, seed=int(rng.integers(2 ** 31)),
                       progress=progress, scales=res.errors)
    lens_samples = chain.samples()
    pairs = pair_delays(like, lens_samples)
    z_s_of = {f.label: f.redshift for f in sc.families}
    rows = delay_curves(pairs, like.h0_ref, cosmology=sc.cosmology, z_l=sc.lens_redshift, z_s_of=z_s_of,
                        om0_grid=np.linspace(0.15, 0.45, 31) if "om0" in curves else None,
                        w_grid=np.linspace(-1.5, -0.5, 21) if "w" in curves else None)
    out = {"scenario": sc, "fit": res, "chain": chain, "curves": rows, "pairs": pairs, "prior": prior,
           "provenance": provenance(used, sc.cosmology, seed), "notes": list(res.notes + chain.warnings)}
    om0_prior = tuple(om0) if om0 is not None else (float(sc.cosmology.Om0), 0.02)
    if sc.delays:
        joint = ImageLikelihood(sc, sc.model, use_delays=True, prior=prior)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", LensdelayWarning)
            jres = fit(joint, seed=seed)
            jchain = sample(joint, jres.values, walkers=walkers, steps=steps,
                            seed=int(rng.integers(2 ** 31)), progress=progress, scales=jres.errors)
        h0_eff = jchain.samples()[:, -1]
        out["joint_fit"] = jres
        out["h0"] = h0_posterior(h0_eff, joint, kappa_ext=kappa_ext, om0_prior=om0_prior, rng=rng)
        out["kappa_comparison"] = kappa_comparison(h0_eff, joint, om0_prior, extra=kappa_ext)
        out["notes"] += jchain.warnings
    else:
        out["notes"].append("the scenario has no measured delays: only the delay-vs-H0 curves are given")
    out["kappa_ext"] = list(kappa_ext)
    out["om0_prior"] = list(om0_prior)
    return out


def hubble_json(res) -> dict:
    from lensdelay.model.cosmology import describe_cosmology
    from lensdelay.report.text import CAUTION

    doc = {"cosmology": describe_cosmology(res["scenario"].cosmology), "kappa_ext": res["kappa_ext"],
           "Om0_prior": res["om0_prior"],
           "H0": res["h0"]["H0"] if "h0" in res else None,
           "D_dt_Mpc": res["h0"]["D_dt_Mpc"] if "h0" in res else None,
           "measured_delays": [vars(d) for d in res["scenario"].delays],
           "kappa_ext_comparison": [{"kappa_ext": k["kappa_ext"], "H0": k["H0"]}
                                    for k in res.get("kappa_comparison", [])],
           "delay_vs_H0": [r for r in res["curves"] if r["axis"] == "H0"],
           "delay_vs_other": [r for r in res["curves"] if r["axis"] != "H0"],
           "mass_model_prior": res["prior"],
           "notes": res["notes"], "cautions": CAUTION, "provenance": res["provenance"]}
    return doc


def hubble_text(res) -> str:
    from lensdelay.report.text import CAUTION

    sc = res["scenario"]
    lines = [f"H0 dependence of the delays of {sc.name} (lens-model posterior, bands 68%):"]
    for r in res["curves"]:
        if r["axis"] == "H0" and r["value"] in (60.0, 70.0, 80.0):
            lines.append(f"  {r['family']}/{r['image']} − {r['relative_to']} at H0 = {r['value']:.0f}: "
                         f"{r['median']:+.2f} d [{r['p16']:+.2f}, {r['p84']:+.2f}]")
    if "h0" in res:
        h = res["h0"]["H0"]
        d = res["h0"]["D_dt_Mpc"]
        lines += ["", f"H0 = {h['median']:.1f} (+{h['p84'] - h['median']:.1f} / -{h['median'] - h['p16']:.1f}) "
                  f"km/s/Mpc [95%: {h['p2.5']:.1f}–{h['p97.5']:.1f}] with kappa_ext ~ N{tuple(res['kappa_ext'])}",
                  f"D_dt = {d['median']:.0f} (+{d['p84'] - d['median']:.0f} / -{d['median'] - d['p16']:.0f}) Mpc",
                  "", "mass-sheet degeneracy: H0 scales with (1 - kappa_ext):"]
        for k in res["kappa_comparison"]:
            q = k["H0"]
            lines.append(f"  kappa_ext ~ N({k['kappa_ext'][0]:+.2f}, {k['kappa_ext'][1]:.2f}): "
                         f"H0 = {q['median']:.1f} [{q['p16']:.1f}, {q['p84']:.1f}]")
    for n in res["notes"]:
        lines.append(f"NOTE: {n}")
    lines += ["", CAUTION]
    return "\n".join(lines)


def cmd_hubble(args) -> int:
    from lensdelay.cli.fit import output_folder
    from lensdelay.report.figures import h0_figure, hubble_curves_figure
    from lensdelay.io.storage import write_output_set

    out = output_folder(args.out)
    params = {}
    for item in args.param or []:
        key, sep, value = item.partition("=")
        try:
            params[key] = float(value)
        except ValueError as err:
            raise InputError(f"--param must be NAME=NUMBER, got {item!r}") from err
        if not sep:
            raise InputError(f"--param must be NAME=NUMBER, got {item!r}")
    res = run_hubble(args.scenario, args.model, kappa_ext=tuple(args.kappa_ext), om0=args.om0,
                     curves=tuple(args.curves.split(",")) if args.curves else (), walkers=args.walkers,
                     steps=args.steps, seed=args.seed, progress=not args.quiet,
                     cosmology_name=args.cosmology, cosmology_class=args.cosmology_class,
                     class_params=params, prior=args.prior)
    doc = hubble_json(res)
    text = hubble_text(res)
    if out is not None:
        import io

        from astropy.table import Table

        buf = io.StringIO()
        Table(rows=res["curves"]).write(buf, format="ascii.ecsv")
        figs = {"hubble_curves": hubble_curves_figure(res)}
        if "h0" in res:
            figs["hubble_posterior"] = h0_figure(res)
        write_output_set(out, json_name="hubble.json", doc=doc, figures=figs,
                         texts={"hubble_curves.ecsv": buf.getvalue()}, inputs=res["provenance"]["inputs"])
    print(text)
    if out is not None:
        print(f"wrote {out}/hubble.json, hubble_curves.ecsv and figures", file=sys.stderr)
    return 0


def register(sub, number) -> None:
    p = sub.add_parser("hubble", help="delays vs H0; H0 from measured delays; mass-sheet comparison")
    p.add_argument("scenario", help="scenario TOML file")
    p.add_argument("--model", action="append", help="model TOML replacing the scenario's mass model")
    p.add_argument("--out", help="folder for hubble.json and the figures")
    p.add_argument("--kappa-ext", nargs=2, type=number, default=[0.0, 0.05], metavar=("MEAN", "SIGMA"),
                   help="external convergence prior (default 0 0.05)")
    p.add_argument("--om0", nargs=2, type=number, metavar=("MEAN", "SIGMA"),
                   help="Omega_m prior (flat LCDM; default the scenario's value ± 0.02)")
    p.add_argument("--curves", help="also show delays along 'om0' and/or 'w' (comma separated)")
    p.add_argument("--cosmology", help="an astropy realisation, e.g. Planck18")
    p.add_argument("--cosmology-class", help="an astropy cosmology class, e.g. FlatwCDM (H0 and Om0 "
                   "from the scenario; the Om0 prior then applies only to FlatLambdaCDM)")
    p.add_argument("--param", action="append", metavar="NAME=VALUE",
                   help="a parameter of --cosmology-class, e.g. w0=-0.9")
    p.add_argument("--walkers", type=int, default=32, help="sampler walkers (default 32)")
    from lensdelay.cli.fit import add_prior_argument

    add_prior_argument(p)
    p.add_argument("--steps", type=int, default=2000, help="sampler steps (default 2000)")
    p.add_argument("--seed", type=int, default=1, help="seed of every random draw (default 1)")
    p.add_argument("--quiet", action="store_true", help="no progress bar")
    p.set_defaults(func=cmd_hubble)
