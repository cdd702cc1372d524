"""Plain-text reports, kept apart from the computation."""

from __future__ import annotations

import numpy as np

from lensdelay.cautions import CAUTION
from lensdelay.inference.summaries import quantile_summary
from lensdelay.forecast.result import STATUS_MEANINGS, TENSION_CAUSES
from lensdelay.dates import day_of
from lensdelay.io.forecast_files import image_record
from lensdelay.report.image_rows import image_cells

__all__ = [
    "cosmology_text",
    "dispersion_cells",
    "images_text",
    "quality_line",
    "fit_text",
    "budget_text",
    "hubble_text",
    "position_lines",
    "LONG_DELAY_DAYS",
    "quarter",
    "h0_date_lines",
    "free_redshift_lines",
    "forecast_text",
    "delays_text",
    "joint_h0_text",
]


def images_text(result: dict) -> str:
    """Table of images from :func:`lensdelay.api.images_of_source`."""
    lines = [
        f"Images of a source at ({result['source']['x']:+.4f}, {result['source']['y']:+.4f}) "
        f"arcsec, "
        f"z_s = {result['source_redshift']:g}, z_l = {result['lens_redshift']:g}",
        f"D_dt = {result['time_delay_distance_Mpc']:.1f} Mpc "
        f"({result['cosmology']['name'] or result['cosmology']['class']})",
        "",
        f"{'image':>5} {'x [arcsec]':>11} {'y [arcsec]':>11} {'magnif.':>9} {'parity':>8} "
        f"{'delay [d]':>10}",
    ]
    for im in result["images"]:
        mu = im["magnification"]
        mu_text = f"{mu:+9.3f}" if mu is not None else f"{'infinite':>9}"
        lines.append(
            f"{im['label']:>5} {im['x']:+11.5f} {im['y']:+11.5f} {mu_text} "
            f"{im['parity']:>8} {im['delay_days']:10.3f}"
        )
    if any(im["parity"] == "critical" for im in result["images"]):
        lines.append(
            "  critical: the source lies on a caustic; images of both parities merge there "
            "(closer than 0.1 milliarcsec), infinitely magnified for a point source"
        )
    ring = result.get("einstein_ring")
    if ring:
        lines.append(
            f"  Einstein ring of radius {ring['radius_arcsec']:.5f} arcsec about "
            f"({ring['x']:+.4f}, {ring['y']:+.4f}): the source lies on a point caustic, so its "
            "image is the whole circle (infinite magnification for a point source), "
            f"arriving {ring['delay_days']:.3f} d after the first arrival"
        )
    if not result["images"] and not ring:
        lines.append("  (no images)")
    lines += [
        "",
        "x is East, y is North; delay is after the first arrival (positive = later).",
        CAUTION,
    ]
    return "\n".join(lines)


def quality_line(q: dict, label: str = "fit") -> str:
    """One line on a fit's quality: p-value, model error given, parameters on bounds."""
    if q["p_value"] is None:
        text = (
            f"{label}: exactly constrained (dof = 0): chi2 does not test this model"
            if q["dof"] == 0
            else f"{label}: fewer constraints than parameters (dof = {q['dof']}): chi2 does "
            "not test this model, and the priors set part of the answer"
        )
    else:
        text = f"{label}: chi2 = {q['chi2']:.1f} for {q['dof']} dof, p = {q['p_value']:.2g}"
    if q["position_model_error_mas"] > 0:
        text = (
            f"WARNING: {label} was poor (chi2 = {q['chi2_before']:.1f}, p = {q['p_before']:.1e}); "
            f"image positions given a model error of {q['position_model_error_mas']:.1f} mas, "
            f"then chi2 = {q['chi2']:.1f} for {q['dof']} dof"
        )
    elif q["poor"]:
        text = f"WARNING: {text}: a poor fit"
    if q["at_bounds"]:
        text += f"; ended on a bound: {', '.join(q['at_bounds'])}"
    return text


def fit_text(res: dict) -> str:
    """Plain-text report of a fit (and posterior)."""
    fr = res.fit
    lines = [f"Fit of model {fr.model_label!r} to scenario {res.scenario.name!r}", ""]
    lines.append(f"{'parameter':<32} {'value':>12} {'± stderr':>10}")
    for n, v, e in zip(fr.names, fr.values, fr.errors):
        err = f"{e:10.4g}" if e == e else f"{'—':>10}"
        lines.append(f"{n:<32} {v:12.5g} {err}")
    lines += [
        "",
        f"chi2 = {fr.chi2:.3f} for {fr.n_constraints} constraints and {fr.n_parameters} "
        f"free parameters: dof = {fr.dof}; AIC = {fr.aic:.2f}, BIC = {fr.bic:.2f}",
    ]
    lines.append(quality_line(fr.quality()))
    lines += [
        "",
        "residuals (model − observed):",
        f"{'image':<10} {'dx [mas]':>9} {'dy [mas]':>9} {'sigma':>7} {'magnif.':>9}",
    ]
    rms = fr.rms_arcsec()
    rms_text = ", ".join(
        f"{f} {1e3 * v:.1f}" if v is not None else f"{f} —" for f, v in rms.items() if f != "all"
    )
    if rms["all"] is not None:
        rms_text += f"; all images {1e3 * rms['all']:.1f}"
    lines.insert(-2, f"image-plane rms [mas]: {rms_text}")
    for r in fr.residuals_mas:
        name = f"{r['family']}/{r['image']}"
        if r["reproduced"]:
            lines.append(
                f"{name:<10} {r['dx_mas']:9.2f} {r['dy_mas']:9.2f} {r['sigma_mas']:7.1f} "
                f"{r['magnification']:+9.3f}"
            )
        else:
            lines.append(f"{name:<10} {'not reproduced by the model':>37}")
    if fr.unobserved_images:
        lines += ["", "predicted images that were not observed:"]
        for im in fr.unobserved_images:
            lines.append(
                f"  {im['family']}: ({im['x']:+.4f}, {im['y']:+.4f}) arcsec, "
                f"mu = {im['magnification']:+.4f}, {im['parity']}"
            )
    if res.linear_delays:
        lines += ["", "delays at the best fit (scenario cosmology; linearised 1-sigma errors):"]
        for d in res.linear_delays:
            lines.append(
                f"  {d['family']}/{d['image']} − {d['relative_to']}: {d['days']:+.2f} "
                + (
                    f"± {d['linearised_sigma_days']:.2f} d"
                    if d["linearised_sigma_days"] is not None
                    else "d (no linearised error without degrees of freedom: use --sample)"
                )
            )
    for note in fr.notes:
        lines.append(f"NOTE: {note}")
    ch = res.chain
    if ch is not None:
        s = ch.samples()
        weighted = ch.move == "importance"
        if weighted:
            head = (
                f"posterior: importance sampling (no more constraints than parameters), "
                f"{ch.draws} draws worth {ch.effective_samples:.0f} independent ones, resampled "
                f"to {len(s)}; {res.likelihood.prior} prior"
            )
            columns = f"{'parameter':<32} {'median':>12} {'16%':>12} {'84%':>12}"
        else:
            head = (
                f"posterior: {ch.chain.shape[1]} walkers × {ch.chain.shape[0]} steps, burn-in "
                f"{ch.burn}, thin {ch.thin}, {len(s)} samples; acceptance "
                f"{ch.acceptance.mean():.2f}; {ch.move} move, {res.likelihood.prior} prior"
            )
            columns = (
                f"{'parameter':<32} {'median':>12} {'16%':>12} {'84%':>12} {'tau':>7} "
                f"{'ESS':>7} {'R-hat':>6}"
            )
        lines += ["", head, columns]
        ess = ch.effective_sample_sizes()
        for i, n in enumerate(ch.names):
            q = quantile_summary(s[:, i])
            row = f"{n:<32} {q['median']:12.5g} {q['p16']:12.5g} {q['p84']:12.5g}"
            if not weighted:
                row += f" {ch.autocorr[i]:7.0f} {ess[i]:7.0f} {ch.rhat[i]:6.2f}"
            lines.append(row)
        for w in ch.warnings:
            lines.append(f"WARNING: {w}")
    return "\n".join(lines)


def _budget_cell(term: dict) -> str:
    """``"  1.23 (  45%)"``; a term below 0.005 d shows as 0 (no "-0.00")."""
    sigma = term["sigma_days"] if abs(term["sigma_days"]) >= 0.005 else 0.0
    percent = term["percent"] if abs(term["percent"]) >= 0.5 else 0.0
    return f"{sigma:8.2f} ({percent:4.0f}%)"


def budget_text(budget: dict) -> str:
    """The uncertainty budget as a table: signed 1-σ days and percent of the date variance."""
    from lensdelay.forecast.budget import SAMPLED_TERMS

    terms = SAMPLED_TERMS + ("remainder",)
    lines = [
        "Uncertainty budget of each image's date (signed 1-sigma days, share of the variance;",
        "after any update; negative: sources the measurements tied together):",
        f"{'image':<8}" + "".join(f"{t[:14]:>16}" for t in terms) + f"{'total sigma':>13}",
    ]
    for row in budget["images"]:
        cells = "".join(_budget_cell(row["date"][t]) for t in terms)
        lines.append(
            f"{row['family'] + '/' + row['label']:<8}{cells}{row['date_sigma_days']:13.2f}"
        )
    a = budget["assumptions"]
    extra = ", ".join(
        f"{r['family']}/{r['label']} {r['date']['Omega_m']['sigma_days']:.2f} d and "
        f"{r['date']['peculiar velocity']['sigma_days']:.2f} d"
        for r in budget["images"]
    )
    lines.append(
        f"Not in the windows (first order): Omega_m (sigma {a['Omega_m_sigma']:g}) and the lens "
        f"velocity (sigma {a['peculiar_velocity_sigma_kms']:g} km/s): {extra}"
    )
    return "\n".join(lines)


def hubble_text(res) -> str:
    """The text ``lensdelay hubble`` prints."""
    sc = res.scenario
    lines = [f"H0 dependence of the delays of {sc.name} (lens-model posterior, bands 68%):"]
    for r in res.curves:
        if r["axis"] == "H0" and r["value"] in (60.0, 70.0, 80.0):
            lines.append(
                f"  {r['family']}/{r['image']} − {r['relative_to']} at H0 = {r['value']:.0f}: "
                f"{r['median']:+.2f} d [{r['p16']:+.2f}, {r['p84']:+.2f}]"
            )
    if res.h0 is not None:
        h = res.h0["H0"]
        d = res.h0["D_dt_Mpc"]
        lines += [
            "",
            f"H0 = {h['median']:.1f} (+{h['p84'] - h['median']:.1f} / "
            f"-{h['median'] - h['p16']:.1f}) "
            f"km/s/Mpc [95%: {h['p2.5']:.1f}–{h['p97.5']:.1f}] with kappa_ext ~ "
            f"N{tuple(res.kappa_ext)}",
            f"priors: H0 {res.h0_prior_text}; Omega_m ~ N{tuple(res.om0_prior)}; "
            f"mass-model parameters: {res.prior} within their bounds",
            f"D_dt = {d['median']:.0f} (+{d['p84'] - d['median']:.0f} / "
            f"-{d['median'] - d['p16']:.0f}) Mpc",
            "",
            "mass-sheet degeneracy: H0 scales with (1 - kappa_ext):",
        ]
        for k in res.kappa_comparison:
            q = k["H0"]
            lines.append(
                f"  kappa_ext ~ N({k['kappa_ext'][0]:+.2f}, {k['kappa_ext'][1]:.2f}): "
                f"H0 = {q['median']:.1f} [{q['p16']:.1f}, {q['p84']:.1f}]"
            )
    lines += ["", quality_line(res.fit.quality(), "lens fit to the positions")]
    if res.joint_fit is not None:
        lines.append(quality_line(res.joint_fit.quality(), "joint fit with the delays"))
    for n in res.notes:
        lines.append(f"NOTE: {n}")
    lines += ["", CAUTION]
    return "\n".join(lines)


def _h0_text(res) -> str:
    st = res.settings
    if st.h0_prior:
        return f"H0 ~ N({st.h0_prior[0]:g}, {st.h0_prior[1]:g}) km/s/Mpc"
    cosmo = res.cosmology
    name = f", {cosmo.name}" if getattr(cosmo, "name", None) else ""
    return f"H0 = {float(cosmo.H0.value):g} km/s/Mpc (fixed{name})"


def _ellipse_text(im, level: int) -> str:
    """'a × b mas @ PA' of an image's error ellipse."""
    try:
        e = im.ellipse(level)
    except KeyError:
        return "—"
    return f"{1e3 * e.semi_major:.0f}×{1e3 * e.semi_minor:.0f} @{e.position_angle:3.0f}°"


def position_lines(res) -> list[str]:
    """Where each image is: offsets, ICRS RA/Dec and the 68% / 95% error ellipses."""
    head = (
        f"{'image':<8} {'x [arcsec]':>10} {'y [arcsec]':>10} {'RA (ICRS)':>13} {'Dec (ICRS)':>13} "
        f"{'68% ellipse [mas]':>19} {'95% ellipse [mas]':>19}"
    )
    lines = [head, "-" * len(head)]
    for im in res.images:
        name = f"{im.family}/{im.label}" + ("" if im.observed else "*")
        if im.coord is not None:
            ra = im.coord.ra.to_string(unit="hourangle", sep=":", precision=3, pad=True)
            dec = im.coord.dec.to_string(sep=":", precision=2, alwayssign=True, pad=True)
        else:
            ra = dec = "—"
        lines.append(
            f"{name:<8} {im.x:+10.3f} {im.y:+10.3f} {ra:>13} {dec:>13} "
            f"{_ellipse_text(im, 68):>19} {_ellipse_text(im, 95):>19}"
        )
    lines.append(
        "(x East, y North of the [sky] origin; ellipses: semi-major × semi-minor, position angle "
        "East of North, from the model samples"
        + ("; no [sky] in the scenario, so no RA/Dec)" if res.scenario.sky is None else ")")
    )
    return lines


#: Delays beyond which the terminal also shows dates at fixed H0 and month-level windows.
LONG_DELAY_DAYS = 100.0


def quarter(iso: str) -> str:
    """The year and quarter of an ISO date: '2034-02-11...' -> '2034 Q1'."""
    return f"{iso[:4]} Q{(int(iso[5:7]) - 1) // 3 + 1}"


def h0_date_lines(res) -> list[str]:
    """Each image's median date and 95% window (months) at H0 = 67, 70, 73 and marginalised."""
    from lensdelay.io.forecast_files import H0_TABLE, dates_by_h0

    def cell(q):
        return f"{q['median'][:7]} [{q['p2.5'][:7]}..{q['p97.5'][:7]}]"

    head = f"{'image':<8}" + "".join(f"{'H0 = ' + format(h, 'g'):>27}" for h in H0_TABLE)
    head += f"{'H0 marginalised':>27}   95% window by quarter"
    lines = [
        "dates at fixed H0 (km/s/Mpc): median [95% window], year-month, UTC "
        "(a delay scales as 1/H0); quarters Q1 = Jan-Mar ... Q4 = Oct-Dec",
        head,
        "-" * len(head),
    ]
    for im in res.images:
        by = dates_by_h0(res, im)
        marg = im.dates_iso()
        lines.append(
            f"{im.family + '/' + im.label + ('' if im.observed else '*'):<8}"
            + "".join(f"{cell(by[format(h, 'g')]):>27}" for h in H0_TABLE)
            + f"{cell(marg):>27}   {quarter(marg['p2.5'])} .. {quarter(marg['p97.5'])}"
        )
    return lines


def free_redshift_lines(res) -> list[str]:
    """One line per family of unknown redshift: its bounds and posterior (most probable model)."""
    lines = []
    if not len(res.chains):
        return lines
    chain = res.chains[int(np.argmax(res.model_weights))]
    for fam in res.scenario.families:
        name = f"redshift[{fam.label}]"
        if not fam.redshift_free or chain is None or name not in chain.names:
            continue
        z = chain.samples()[:, chain.names.index(name)]
        lo, mid, hi = np.percentile(z, [16, 50, 84])
        p = fam.redshift_parameter
        lines.append(
            f"redshift of {fam.label} (fitted within {p.min:g}..{p.max:g}): {mid:.3f} "
            f"(68%: {lo:.3f}..{hi:.3f})"
        )
    return lines


def forecast_text(res) -> str:
    """The readable terminal summary."""
    sc, st = res.scenario, res.settings
    tr = sc.transient
    lines = [
        f"Forecast for {sc.name}: transient seen in {tr.family}/{tr.seen_in} on "
        f"{tr.date.isot[:10]} (± {tr.date_sigma_days:g} d); as of {res.now.isot[:16]}Z",
        f"{st.n_samples} samples; {_h0_text(res)}; kappa_ext ~ N({st.kappa_ext[0]:g}, "
        f"{st.kappa_ext[1]:g}); microlensing {st.microlensing_mag:g} mag",
    ]
    timing = res.timing
    for s in timing.sightings:
        lines.append(
            f"sighting: {s.family}/{s.label} on {s.date.isot[:16]}Z ± {s.sigma_days:g} d"
            + ("" if s.sigma_stated else " (default sigma)")
        )
    for d in timing.delays:
        lines.append(
            f"measured delay: {d.family}/{d.image} - {d.relative_to} = {d.days:g} ± {d.sigma:g} d"
        )
    for m in timing.models:
        if m.route == "reweight":
            lines.append(
                f"update [{m.label}]: importance weights, {m.effective_samples:.0f} effective "
                f"samples (threshold {timing.min_effective_samples:.0f})"
            )
        elif m.route == "resample":
            lines.append(
                f"update [{m.label}]: posterior sampled again with the measurements "
                f"(re-weighting would have left {m.importance_effective_samples:.0f}); about "
                f"{m.effective_samples:.0f} independent samples"
            )
    lines.append("")
    head = (
        f"{'image':<8} {'status':<9} {'date (median)':<13} {'68% window':<23} {'95% window':<23} "
        f"{'delay [d]':>16} {'mag':>6} {'P(obs)':>6}"
    )
    lines += [head, "-" * len(head)]
    for im in res.images:
        c = image_cells(image_record(res, im))
        lo68, hi68 = c.window68
        lo95, hi95 = c.window95
        lines.append(
            f"{c.name:<8} {c.status:<9} {c.median_day:<13} "
            f"{lo68}..{hi68:<11} {lo95}..{hi95:<11} {c.delay_68:>16} {c.magnitude:>6} "
            f"{c.p_observable:>6}"
        )
    lines.append(
        "(* = predicted, not yet observed; windows include the days that contain their ends)"
    )
    used = sorted({im.status for im in res.images}, key=list(STATUS_MEANINGS).index)
    for s in used:
        lines.append(f"  {s}: {STATUS_MEANINGS[s]}")
    lines += ["", *position_lines(res)]
    if max(abs(im.delay_days["median"]) for im in res.images) > LONG_DELAY_DAYS:
        lines += ["", *h0_date_lines(res)]
    if len(res.model_labels) > 1:
        lines += ["", "per-model median delays [d] (weight):"]
        labels = res.model_labels
        lines.append(f"{'image':<8}" + "".join(f"{lab[:18]:>20}" for lab in labels))
        lines.append(f"{'weight':<8}" + "".join(f"{w:>20.2f}" for w in res.model_weights))
        for im in res.images:
            cells = []
            for lab in labels:
                v = im.per_model.get(lab, {}).get("delay_median")
                cells.append(f"{v:>20.2f}" if v is not None else f"{'—':>20}")
            lines.append(f"{im.family + '/' + im.label:<8}" + "".join(cells))
    lines.append("")
    for t in timing.tensions:
        p = t.predicted
        lines.append(
            f"CHECK {t.name}: measured {t.measured:+.2f} ± {t.measurement_sigma:.2f} d, "
            f"predicted from the positions {p['median']:+.2f} (68%: "
            f"{p['p16']:+.2f}..{p['p84']:+.2f}); {t.sigma:+.1f} sigma, p = {t.p_value:.2g}"
        )
        if t.in_tension:
            lines.append(
                f"WARNING: {t.name} is {abs(t.sigma):.1f} sigma from the prediction. "
                f"Usual causes: {TENSION_CAUSES}. The windows above combine the measurement and "
                "the model as the probability model says; treat them with care."
            )
    for im in res.images:
        for f in im.flags:
            lines.append(f"FLAG {im.family}/{im.label}: {f}")
        arch = im.archival_span()
        if arch is not None:
            a, b = arch
            lines.append(
                f"ARCHIVE {im.family}/{im.label}: its 95% window starts before the detection; "
                f"search data taken between {day_of(a)} and {day_of(b)}"
            )
        if im.fainter_than_depth:
            lines.append(
                f"FAINT {im.family}/{im.label}: median magnitude is fainter than the depth "
                f"{st.depth:g}"
            )
        if im.interval95_change is not None and im.status != "seen":
            lines.append(
                f"UPDATE {im.family}/{im.label}: 95% window is "
                f"{100 * im.interval95_change:.0f}% of its width before the measurements"
            )
        if im.observability is not None and im.status not in ("seen", "past"):
            ob = im.observability
            lines.append(
                f"SKY {im.family}/{im.label}: {ob['observable_days_in_95']} of "
                f"{ob['days_in_95']} days in the 95% window are observable from the site"
            )
    for label, f in zip(res.model_labels, res.fits):
        lines.append(quality_line(f.quality(), f"fit of {label}"))
    lines += free_redshift_lines(res)
    for n in res.notes:
        lines.append(f"NOTE: {n}")
    for label, notes in zip(res.model_labels, res.model_notes):
        for n in notes:
            lines.append(f"NOTE [{label}]: {n}")
    lines += ["", CAUTION]
    return "\n".join(lines)


def delays_text(res) -> str:
    """The terminal summary of a measurement."""
    st = res.settings
    how = (
        f"{st['walkers']} walkers x {st['steps']} steps"
        if "walkers" in st
        else f"global search, {len(st['models'])} microlensing models"
    )
    lines = [
        f"Delays after {res.reference} measured from light curves ({res.kind} model; "
        f"{how}, searched within ±{st['max_delay_days']:.0f} d)",
        "",
        f"{'image':<8} {'delay [d]':>10} {'68% interval':>20} {'95% interval':>20} "
        f"{'cross-check':>12} {'sim. bias':>10} {'sim. spread':>11}",
    ]
    lines.append("-" * len(lines[-1]))
    for im in res.images:
        if not im.measurable:
            lines.append(f"{im.label:<8} {im.statement}")
            continue
        d = im.delay_days
        cc = "—" if im.cross_check_days is None else f"{im.cross_check_days:+.1f}"
        bias = "—" if im.simulation_bias_days is None else f"{im.simulation_bias_days:+.2f}"
        spread = "—" if im.simulation_spread_days is None else f"{im.simulation_spread_days:.2f}"
        lines.append(
            f"{im.label:<8} {d['median']:+10.2f} {d['p16']:+9.2f} .. {d['p84']:+7.2f} "
            f"{d['p2.5']:+9.2f} .. {d['p97.5']:+7.2f} {cc:>12} {bias:>10} {spread:>11}"
        )
    for im in res.images:
        if im.flux_ratio is not None and im.measurable:
            r = im.flux_ratio
            lines.append(
                f"flux ratio {im.label}/{res.reference}: {r['median']:.3f} "
                f"({r['p16']:.3f} .. {r['p84']:.3f})"
            )
    g = res.goodness
    lines.append(f"fit: chi2 = {g['chi2']:.1f} for {g['dof']} dof, p = {g['p_value']:.2g}")
    lines.append(
        "(cross-check: the dispersion minimum; sim.: point estimates on curves simulated with "
        "the data's epochs and errors at the measured values"
        + (
            ", with intrinsic and microlensing variability of other families than the fitted; "
            "the intervals include them and the spread between microlensing models)"
            if res.kind == "quasar"
            else ")"
        )
    )
    lines += [f"NOTE: {n}" for n in res.notes]
    lines.append(
        "Caution: microlensing by stars in the lens adds variability of its own to each image; "
        "quasars compare a trend, splines and a slow random process for it; supernovae fit a "
        "flux ratio per band. Delays measured this way are model-dependent."
    )
    return "\n".join(lines)


def _interval(q: dict | None, fmt: str = "{:.1f}") -> str:
    """'median [p16, p84]' of a quantile summary, or an em dash."""
    if q is None:
        return "—"
    return f"{fmt.format(q['median'])} [{fmt.format(q['p16'])}, {fmt.format(q['p84'])}]"


def cosmology_text(described: dict) -> str:
    """'FlatwCDM: Om0 ~ N(0.3, 0.05), w0 = -1' from a population's described cosmology."""
    parts = []
    for name, value in described.items():
        if name in ("class", "H0"):
            continue
        parts.append(
            f"{name} ~ N({value[0]:g}, {value[1]:g})"
            if isinstance(value, list)
            else f"{name} = {value:g}"
        )
    return f"{described['class']}: " + ", ".join(parts)


def dispersion_cells(measured, errors, predicted) -> tuple[str, str]:
    """(measured, predicted) dispersion text of one lens: one aperture, or one per ring.

    One aperture: "260 ± 15" and its median [68%]; several rings: "262/248/231 ±
    8/8/10" and the predicted medians "255/246/229"; no kinematics: "—" twice.
    """
    if not measured:
        return "—", "—"
    if len(measured) == 1:
        return f"{measured[0]:.0f} ± {errors[0]:.0f}", _interval(predicted[0], "{:.0f}")
    join = "/".join
    return (
        f"{join(f'{v:.0f}' for v in measured)} ± {join(f'{e:.0f}' for e in errors)}",
        join(f"{q['median']:.0f}" for q in predicted),
    )


def joint_h0_text(res) -> str:
    """The terminal summary of a joint H0 (:class:`lensdelay.hubble.cosmography.JointH0Result`)."""
    pop = res.population
    n_delays = sum(lens.has_delays for lens in res.lenses)
    n_kin = sum(lens.has_kinematics for lens in res.lenses)
    tag = " [BLINDED]" if res.blinded else ""
    lines = [
        f"Joint H0 from {len(res.lenses)} lenses ({n_delays} with delays, {n_kin} with "
        f"kinematics){tag}",
        "population: "
        + ("lambda_int ~ N(mean, scatter), inferred" if pop.lambda_int else "lambda_int = 1")
        + f"; orbits {pop.anisotropy.replace('_', '-')}; "
        + cosmology_text(pop.describe_cosmology()),
    ]
    if res.blinded:
        lines.append(
            f"BLINDED: every H0 and D_dt is multiplied by a hidden factor (key sha256 "
            f"{res.blinding_key_sha256[:16]}...); freeze the analysis, then rerun with --unblind"
        )
    h = res.h0
    lines += [
        "",
        f"H0 = {h['median']:.1f} +{h['p84'] - h['median']:.1f} -{h['median'] - h['p16']:.1f} "
        f"km/s/Mpc (68%); 95% [{h['p2.5']:.1f}, {h['p97.5']:.1f}]; 1-sigma width "
        f"{50 * (h['p84'] - h['p16']) / h['median']:.1f}%{tag}",
    ]
    for name, q in res.parameters.items():
        if name != "H0":
            lines.append(f"{name} = {_interval(q, '{:.3f}')} (median [68%])")
    if res.orbit_alternatives:
        lines.append("H0 under the other orbit models (all else the same):")
        for alt in res.orbit_alternatives:
            lines.append(
                f"  {alt.anisotropy.replace('_', '-'):<16} H0 = {_interval(alt.h0)} km/s/Mpc{tag}"
            )
    cells = [
        dispersion_cells(lens.dispersion_measured, lens.dispersion_error, lens.dispersion_predicted)
        for lens in res.lenses
    ]
    # the dispersion columns as wide as their widest cell (rings of resolved kinematics)
    wm = max([16] + [len(m) for m, _ in cells])
    wp = max([20] + [len(p) for _, p in cells])
    lines += [
        "",
        f"{'lens':<16} {'delays':>6} {'sigma measured':>{wm}} {'sigma predicted':>{wp}} "
        f"{'H0 alone' + tag:>24} {'D_dt [Mpc]' + tag:>28}",
    ]
    for lens, (measured, predicted) in zip(res.lenses, cells):
        lines.append(
            f"{lens.name:<16} {lens.n_delays:>6} {measured:>{wm}} {predicted:>{wp}} "
            f"{_interval(lens.h0):>24} {_interval(lens.time_delay_distance_mpc, '{:.0f}'):>28}"
        )
    ch = res.chain
    lines += [
        "(sigma in km/s; predicted: the population's medians applied to the lens's own "
        "posterior, median [68%]; resolved kinematics: each ring's median, inner ring first; "
        "H0 alone: this lens with the others' population parameters fixed)",
        "",
        f"sampler: {ch.walkers} walkers x {ch.steps} steps (burn-in {ch.burn}), acceptance "
        f"{ch.acceptance:.2f}, max autocorrelation {np.nanmax(ch.autocorrelation):.0f} steps",
    ]
    lines += [f"NOTE: {n}" for n in res.notes]
    for lens in res.lenses:
        lines += [f"NOTE [{lens.name}]: {n}" for n in lens.notes]
    lines += ["", CAUTION]
    return "\n".join(lines)
