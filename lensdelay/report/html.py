"""One self-contained HTML page from the outputs of fit, forecast and hubble.

The page has no script and reaches nothing over the network: figures are embedded as
``data:`` URIs (PNG), the style sheet is inline, and it prints on A4/Letter with the
tables unbroken where possible. It is built from the JSON documents the jobs write
(forecast.json, fit.json, hubble.json) and their PNG figures, so ``lensdelay report
DIR`` and ``forecast --report`` give the same page.
"""

from __future__ import annotations

import base64
import html

from lensdelay.cautions import CAUTION
from lensdelay.report.image_rows import image_cells, sexagesimal

__all__ = ["FIGURES", "STYLE", "report_html"]


#: Figures the page shows, in order, with a caption each (file stem -> caption).
FIGURES = {
    "sky": "Finder chart: observed and predicted images with their 68% and 95% error "
    "ellipses, the critical curve and caustic at the transient's redshift, arrival-time "
    "contours; North up, East left.",
    "timeline": "When each image shows the event: the date distribution, its 68% and 95% "
    "windows, and the days the target is observable from the site.",
    "budget": "Where each image's date uncertainty comes from.",
    "fit_sky": "The fitted model's images, critical curves and caustics.",
    "fit_residuals": "Position residuals of the fit.",
    "corner": "Posterior of the mass-model parameters.",
    "hubble_curves": "Predicted delays against H0, with the measured ones.",
    "hubble_posterior": "H0 from the measured delays under several external-convergence "
    "priors (the mass-sheet degeneracy).",
    "joint_h0": "Each lens's H0 (the population's other parameters at the joint medians) "
    "against the joint posterior's 68% band.",
    "population": "The population's internal mass sheet and orbital anisotropy.",
}

STYLE = """
:root { --ink: #1d2430; --muted: #5b6472; --rule: #d5d9e0; --accent: #1f4e9a;
        --warn: #8a3b00; --band: #f4f6f9; }
* { box-sizing: border-box; }
body { font: 15px/1.45 system-ui, -apple-system, "Segoe UI", Roboto, sans-serif;
       color: var(--ink); margin: 0 auto; max-width: 72rem; padding: 1.2rem 1.6rem 3rem; }
h1 { font-size: 1.6rem; margin: 0.2rem 0 0.3rem; }
h2 { font-size: 1.15rem; margin: 2rem 0 0.6rem; padding-bottom: 0.2rem;
     border-bottom: 2px solid var(--rule); }
p.lead { color: var(--muted); margin: 0 0 1rem; }
.caution { border-left: 4px solid var(--warn); background: #fff6ef; padding: 0.6rem 0.9rem;
           margin: 1rem 0; }
.notes li { margin: 0.15rem 0; }
table { border-collapse: collapse; width: 100%; font-size: 0.86rem; margin: 0.4rem 0 1rem; }
th, td { padding: 0.3rem 0.45rem; border-bottom: 1px solid var(--rule); text-align: left;
         vertical-align: top; }
th { background: var(--band); font-weight: 600; }
td.num, th.num { text-align: right; font-variant-numeric: tabular-nums; white-space: nowrap; }
.when { white-space: nowrap; font-variant-numeric: tabular-nums; }
.scroll { overflow-x: auto; }
figure { margin: 1rem 0 1.6rem; }
figure img { max-width: 100%; height: auto; border: 1px solid var(--rule); }
figcaption { color: var(--muted); font-size: 0.85rem; margin-top: 0.3rem; }
dl.facts { display: grid; grid-template-columns: max-content 1fr; gap: 0.2rem 1rem; }
dl.facts dt { color: var(--muted); }
dl.facts dd { margin: 0; }
code { font-size: 0.85em; word-break: break-all; }
@media print {
  body { max-width: none; padding: 0; font-size: 10.5pt; }
  h2 { break-after: avoid; }
  table, figure { break-inside: avoid; }
  figure img { max-height: 22cm; }
  .scroll { overflow: visible; }
}
"""


def _family_z(family: dict) -> str:
    """'z = 1.62', or for a free redshift its posterior median and 68% range and bounds."""
    if family.get("redshift") is not None:
        return f"z = {family['redshift']:g}"
    lo, hi = family.get("redshift_bounds", (float("nan"), float("nan")))
    post = family.get("redshift_posterior")
    if post:
        return (
            f"z = {post['median']:.2f} (68%: {post['p16']:.2f}–{post['p84']:.2f}; "
            f"fitted within {lo:g}–{hi:g})"
        )
    return f"z fitted within {lo:g}–{hi:g}"


def _e(value) -> str:
    """HTML-escaped text of a value (em dash for nothing)."""
    if value is None:
        return "—"
    return html.escape(str(value))


def _sentence(text: str) -> str:
    """The caution without its 'Caution:' label, starting with a capital."""
    text = text.removeprefix("Caution:").strip()
    return text[:1].upper() + text[1:]


def _prior(value, name: str) -> str:
    """'N(mean, sigma)' for a Gaussian prior given as [mean, sigma], else the text."""
    if isinstance(value, (list, tuple)) and len(value) == 2:
        return f"{name} ~ N({value[0]:g}, {value[1]:g})"
    return f"{name}: {value}"


def _num(value, fmt: str = "{:.2f}") -> str:
    return "—" if value is None else fmt.format(value)


def _table(head: list[str], rows: list[list[str]], numeric=(), table_id: str = "") -> str:
    """A table whose cells are already HTML; columns in ``numeric`` right-aligned."""
    ident = f' id="{table_id}"' if table_id else ""
    out = [f'<div class="scroll"><table{ident}><thead><tr>']
    # a numeric column's header is right-aligned like its cells, so it sits over them
    out += [
        f'<th class="num">{_e(h)}</th>' if i in numeric else f"<th>{_e(h)}</th>"
        for i, h in enumerate(head)
    ]
    out.append("</tr></thead><tbody>")
    for row in rows:
        out.append("<tr>")
        for i, cell in enumerate(row):
            cls = ' class="num"' if i in numeric else ""
            out.append(f"<td{cls}>{cell}</td>")
        out.append("</tr>")
    out.append("</tbody></table></div>")
    return "".join(out)


def _figure(name: str, png: bytes) -> str:
    data = base64.b64encode(png).decode("ascii")
    caption = FIGURES.get(name, name)
    return (
        f'<figure id="figure-{_e(name)}"><img alt="{_e(caption)}" '
        f'src="data:image/png;base64,{data}"><figcaption>{_e(caption)}</figcaption></figure>'
    )


def _day(iso: str | None) -> str:
    return "—" if not iso else iso[:10]


def _window_html(window: tuple[str, str]) -> str:
    """A date window whose dates never break (the line may break after the dash)."""
    lo, hi = window
    return f"<span class='when'>{_e(lo)} –</span> <span class='when'>{_e(hi)}</span>"


def _forecast_sections(doc: dict) -> list[str]:
    out = []
    sc = doc.get("scenario") or {}
    det = doc["detection"]
    out.append("<h2 id='system'>The system</h2><dl class='facts'>")
    facts = [
        ("Lens redshift", _num(sc.get("lens_redshift"), "{:g}")),
        (
            "Image families",
            "; ".join(
                f"{_e(f['label'])} at {_family_z(f)} ({len(f['images'])} observed images)"
                for f in sc.get("families", [])
            )
            or "—",
        ),
        (
            "Sky origin (ICRS)",
            "—"
            if doc.get("sky_origin") is None
            else " ".join(sexagesimal(doc["sky_origin"]["ra_deg"], doc["sky_origin"]["dec_deg"])),
        ),
        (
            "Transient",
            f"seen in {_e(doc['reference_family'])}/{_e(doc['reference_image'])} on "
            f"{_e(det['date'])} (± {det['date_sigma_days']:g} d)"
            + ("" if det.get("magnitude") is None else f", magnitude {det['magnitude']:g}"),
        ),
        ("As of", _e(doc.get("now"))),
        ("Cosmology", _e(doc["cosmology"].get("name") or doc["cosmology"].get("class"))),
        (
            "Priors",
            f"{_e(_prior(doc['priors']['H0'], 'H0'))} km/s/Mpc; "
            f"{_e(_prior(doc['priors']['kappa_ext'], 'κ_ext'))}; "
            f"microlensing {_e(doc['priors']['microlensing_mag'])} mag; "
            f"mass-model parameters: {_e(doc['priors']['mass_model'])} prior",
        ),
        ("Samples", _e(doc.get("samples"))),
    ]
    out += [f"<dt>{_e(k)}</dt><dd>{v}</dd>" for k, v in facts]
    out.append("</dl>")

    out.append("<h2 id='models'>Models and fit quality</h2>")
    rows = []
    for m in doc["models"]:
        q = m["quality"]
        verdict = "poor" if q.get("poor") else "acceptable"
        extra = []
        if q.get("position_model_error_mas"):
            extra.append(f"model error {q['position_model_error_mas']:.1f} mas added")
        if q.get("at_bounds"):
            extra.append("at a bound: " + ", ".join(map(str, q["at_bounds"])))
        rows.append(
            [
                _e(m["label"]),
                _num(m["chi2"], "{:.2f}"),
                _e(m["dof"]),
                _num(q.get("p_value"), "{:.3g}"),
                _e(verdict) + ("" if not extra else "<br>" + _e("; ".join(extra))),
                _num(m["weight"], "{:.2f}"),
            ]
        )
    out.append(_table(["model", "χ²", "dof", "p", "fit", "weight"], rows, numeric=(1, 2, 3, 5)))
    if len(doc["models"]) > 1:
        out.append(f"<p>Models combined by: {_e(doc.get('model_weighting'))} weights.</p>")

    out.append("<h2 id='images'>The images: when, where and how bright</h2>")
    rows = []
    for im in doc["images"]:
        c = image_cells(im)
        rows.append(
            [
                _e(c.name),
                _e(c.status),
                _e(c.offsets),
                f"{_e(c.ra)}<br>{_e(c.dec)}",
                _e(c.ellipse95),
                _e(c.magnification),
                _e(c.parity),
                _e(c.magnitude),
                _e(c.delay_95),
                f"<span class='when'>{_e(c.median_day)}</span>",
                _window_html(c.window68),
                _window_html(c.window95),
                _e(c.p_observable),
            ]
        )
    out.append(
        _table(
            [
                "image",
                "status",
                "x, y [″]",
                "RA, Dec (ICRS)",
                "95% position ellipse",
                "μ",
                "parity",
                "mag",
                "delay [d] (95%)",
                "median date",
                "68% window (UTC)",
                "95% window (UTC)",
                "P(obs.)",
            ],
            rows,
            numeric=(5, 7, 8, 12),
            table_id="image-table",
        )
    )
    statuses = doc.get("statuses", {})
    used = sorted({im["status"] for im in doc["images"]})
    out.append(
        "<p>* predicted, not observed. Delays after "
        f"{_e(doc['reference_family'])}/{_e(doc['reference_image'])} (positive = later); "
        "positions are offsets East and North of the sky origin. "
        + " ".join(f"<b>{_e(s)}</b>: {_e(statuses.get(s, ''))}." for s in used)
        + "</p>"
    )
    archive = [im for im in doc["images"] if im.get("archival_search")]
    if archive:
        out.append("<h2 id='archive'>Archival search</h2><ul class='notes'>")
        out += [
            f"<li><b>{_e(im['family'])}/{_e(im['label'])}</b>: its 95% window starts before "
            f"the detection; search data taken between {_e(_day(im['archival_search']['from']))}"
            f" and {_e(_day(im['archival_search']['to']))}.</li>"
            for im in archive
        ]
        out.append("</ul>")
    out += _timing_section(doc.get("timing") or {})
    flagged = [(im, f) for im in doc["images"] for f in im.get("flag", [])]
    if flagged:
        out.append("<ul class='notes'>")
        out += [
            f"<li><b>{_e(im['family'])}/{_e(im['label'])}</b>: {_e(f)}</li>" for im, f in flagged
        ]
        out.append("</ul>")
    return out


def _timing_section(timing: dict) -> list[str]:
    """The measured delays and sightings the forecast used, each against its prediction."""
    delays = timing.get("delays") or []
    sightings = timing.get("sightings") or []
    if not delays and not sightings:
        return []
    out = ["<h2 id='timing'>Measurements used: delays and sightings</h2>"]
    tension = {t["measurement"]: t for t in timing.get("tensions") or []}
    # (the name the tension checks use, the value as measured) for every measurement
    measured = [
        (
            f"delay {d['family']}/{d['image']} - {d['relative_to']}",
            f"{d['days']:+.2f} ± {d['sigma']:.2f} d",
        )
        for d in delays
    ] + [
        (f"sighting {s_['family']}/{s_['image']}", f"{_day(s_['date'])} ± {s_['sigma_days']:g} d")
        for s_ in sightings
    ]
    rows = [
        [_e(name), _e(value), _prediction(tension.get(name, {})), _verdict(tension.get(name, {}))]
        for name, value in measured
    ]
    out.append(
        _table(["measurement", "value", "predicted from the positions (95%)", "check"], rows)
        + "<p>Each measurement is compared with what the image positions alone predict "
        "(model spread, H0, κ_ext, the detection date and the measurement's own error); "
        "the windows above combine the two.</p>"
    )
    return out


def _prediction(t: dict) -> str:
    p = t.get("predicted")
    if not p:
        return "—"
    return f"{p['median']:+.2f} [{p['p2.5']:+.2f}, {p['p97.5']:+.2f}] d"


def _verdict(t: dict) -> str:
    if not t:
        return "—"
    text = f"{abs(t['sigma']):.1f} σ, p = {t['p_value']:.2g}"
    return f"<b>in tension</b>: {_e(text)}" if t.get("in_tension") else _e(text)


def _budget_section(doc: dict) -> list[str]:
    budget = doc.get("budget")
    if not budget:
        return []
    out = ["<h2 id='budget'>Uncertainty budget</h2>"]
    images = budget.get("images", [])
    terms = [k for k in (images[0]["date"] if images else {})]
    rows = []
    for im in images:
        cells = [_e(im.get("label") or im.get("image"))]
        for t in terms:
            v = im["date"][t]
            cells.append(f"{v['sigma_days']:.2f} d ({v['percent']:.0f}%)")
        rows.append(cells)
    out.append(
        _table(["image", *terms], rows, numeric=tuple(range(1, len(terms) + 1)))
        + "<p>Each source's signed share of the date's variance (1-σ days).</p>"
    )
    return out


def _h0_section(forecast: dict | None, hubble: dict | None) -> list[str]:
    out = ["<h2 id='hubble'>How the answer depends on H0 and on the mass sheet</h2>"]
    if hubble is not None:
        h = hubble["H0"]
        out.append(
            f"<p>H0 from the measured delays: <b>{h['median']:.1f}</b> km/s/Mpc "
            f"(68%: {h['p16']:.1f}–{h['p84']:.1f}; 95%: {h['p2.5']:.1f}–{h['p97.5']:.1f}).</p>"
        )
        rows = [
            [
                _e(f"N({k['kappa_ext'][0]:+.2f}, {k['kappa_ext'][1]:.2f})"),
                f"{k['H0']['median']:.1f}",
                f"{k['H0']['p16']:.1f} – {k['H0']['p84']:.1f}",
            ]
            for k in hubble.get("kappa_ext_comparison", [])
        ]
        if rows:
            out.append(
                _table(["κ_ext prior", "H0 median", "H0 68%"], rows, numeric=(1, 2))
                + "<p>Every delay scales as (1 − κ_ext)/H0: an external convergence the model "
                "does not contain moves H0 in proportion.</p>"
            )
        fq = hubble.get("joint_fit_quality") or {}
        if fq:
            out.append(
                f"<p>Joint fit of positions and delays: χ² = {_num(fq.get('chi2'), '{:.2f}')} "
                f"for {_e(fq.get('dof'))} dof"
                + (
                    "; at a bound: " + _e(", ".join(map(str, fq["at_bounds"])))
                    if fq.get("at_bounds")
                    else ""
                )
                + ".</p>"
            )
    timing = (forecast or {}).get("timing") or {}
    measured = bool(timing.get("delays") or timing.get("sightings"))
    if forecast is not None and measured:
        out.append(
            "<p>The forecast used measured delays or sightings: they fix the delays "
            "themselves, whatever H0 is, so no table of delays at other values of H0 is "
            "shown (H0 from the delays: <code>lensdelay hubble</code>).</p>"
        )
    elif forecast is not None:
        # the delays scale as 1/H0 from the H0 the forecast's samples are centred on
        priors = forecast.get("priors") or {}
        h0_prior = priors.get("H0")
        h0_ref = h0_prior[0] if isinstance(h0_prior, list) else priors.get("H0_used")
        h0_ref = h0_ref[0] if isinstance(h0_ref, list) else h0_ref
        rows = []
        for im in forecast["images"]:
            med = im["delay_days"]["median"]
            if im["label"] == forecast["reference_image"] or med is None or not h0_ref:
                continue
            rows.append(
                [f"{_e(im['family'])}/{_e(im['label'])}"]
                + [f"{med * h0_ref / h0:+.1f}" for h0 in (60.0, 65.0, 70.0, 75.0, 80.0)]
            )
        if rows:
            out.append(
                _table(["image", "H0 = 60", "65", "70", "75", "80"], rows, numeric=(1, 2, 3, 4, 5))
                + f"<p>Median delays [days] had H0 been fixed at each value (a delay is "
                f"proportional to 1/H0; the forecast's own windows are for H0 "
                f"{_e(_prior(h0_prior, 'H0') if isinstance(h0_prior, list) else h0_ref)}"
                ").</p>"
            )
    return out if len(out) > 1 else []


def _fit_section(fit: dict) -> list[str]:
    q = fit["quality"]
    out = [
        "<h2 id='fit'>The mass-model fit</h2>",
        f"<p>Model <b>{_e(fit['model'])}</b>: χ² = {_num(fit['chi2'], '{:.2f}')} for "
        f"{_e(fit['dof'])} degrees of freedom"
        + ("" if q.get("p_value") is None else f" (p = {q['p_value']:.3g})")
        + (" — <b>a poor fit</b>" if q.get("poor") else "")
        + ".</p>",
    ]
    rows = [
        [_e(name), _num(v.get("value"), "{:.5g}"), _num(v.get("stderr"), "{:.2g}")]
        for name, v in fit["parameters"].items()
    ]
    out.append(_table(["parameter", "best fit", "1-σ (linearised)"], rows, numeric=(1, 2)))
    return out


def _provenance_section(docs: dict) -> list[str]:
    out = ["<h2 id='provenance'>Inputs and provenance</h2>"]
    rows = []
    for job, doc in docs.items():
        prov = doc.get("provenance") if job != "fit" else doc
        if not prov:
            continue
        rows.append(
            [
                _e(job),
                _e(prov.get("version")),
                "<br>".join(f"<code>{_e(p)}</code>" for p in prov.get("inputs", [])),
                f"<code>{_e(prov.get('input_sha256'))}</code>",
                _e(prov.get("seed")),
            ]
        )
    out.append(_table(["job", "lensdelay", "inputs", "inputs' SHA-256", "seed"], rows))
    return out


def _cosmography_section(doc: dict) -> list[str]:
    """The joint H0: the blinding, the population's posterior, every lens."""
    blinded = doc["blinded"]
    tag = " (blinded)" if blinded else ""
    out = [f"<h2 id='joint-h0'>Joint H0 of {len(doc['lenses'])} lenses{tag}</h2>"]
    if blinded:
        out.append(
            "<div class='caution'><b>Blinded.</b> Every H0 and D_dt on this page is multiplied "
            "(D_dt divided) by a hidden factor drawn from the blinding key (SHA-256 "
            f"<code>{_e(doc['blinding_key_sha256'])}</code>); rerun with --unblind once the "
            "analysis is frozen.</div>"
        )
    from lensdelay.report.text import cosmology_text

    pop = doc["population"]
    # a page of an older run has no described cosmology: its Ωm alone (flat ΛCDM)
    described = pop.get("cosmology") or {"class": "FlatLambdaCDM", "Om0": pop["Om0"]}
    out.append(
        f"<p>Orbits: {_e(pop['anisotropy'])}; internal mass sheet: {_e(pop['lambda_int'])}; "
        f"cosmology: {_e(cosmology_text(described))}.</p>"
    )
    rows = [
        [_e(name), *(_num(q[k], "{:.3f}") for k in ("median", "p16", "p84", "p2.5", "p97.5"))]
        for name, q in doc["parameters"].items()
    ]
    out.append(
        _table(["parameter", "median", "16%", "84%", "2.5%", "97.5%"], rows, (1, 2, 3, 4, 5))
    )

    def interval(q, fmt="{:.1f}"):
        if not q:
            return "—"
        return f"{fmt.format(q['median'])} [{fmt.format(q['p16'])}, {fmt.format(q['p84'])}]"

    alternatives = doc.get("orbits_side_by_side") or []
    if alternatives:
        out.append("<p>H0 under the other orbit models, all else the same:</p>")
        rows = [[_e(a["anisotropy"]), _e(interval(a["H0"]))] for a in alternatives]
        head = "H0 [km/s/Mpc], median [68%]" + (" (blinded)" if blinded else "")
        out.append(_table(["orbits", head], rows, ()))

    from lensdelay.report.text import dispersion_cells

    rows = []
    for lens in doc["lenses"]:
        measured, predicted = dispersion_cells(
            lens["dispersion_measured"], lens["dispersion_error"], lens["dispersion_predicted"]
        )
        rows.append(
            [
                _e(lens["name"]),
                _e(lens["n_delays"]),
                _e(measured),
                _e(predicted),
                _e(interval(lens["H0_alone"])),
                _e(interval(lens["time_delay_distance_mpc"], "{:.0f}")),
            ]
        )
    out.append(
        _table(
            [
                "lens",
                "delays",
                "σ measured [km/s]",
                "σ predicted [km/s]",
                f"H0 alone{tag}",
                f"D_dt [Mpc]{tag}",
            ],
            rows,
            (1, 2, 3, 4, 5),
        )
    )
    if doc.get("notes"):
        out.append("<ul class='notes'>" + "".join(f"<li>{_e(n)}</li>" for n in doc["notes"]))
        out.append("</ul>")
    return out


def report_html(
    *,
    forecast=None,
    fit=None,
    hubble=None,
    cosmography=None,
    figures: dict[str, bytes] | None = None,
) -> str:
    """The report page.

    Parameters
    ----------
    forecast, fit, hubble, cosmography : dict, optional
        The JSON documents of the jobs (at least one).
    figures : dict
        PNG bytes by file stem (``sky``, ``timeline``, ...); those in :data:`FIGURES` are
        shown, in its order.
    """
    docs = {
        k: v
        for k, v in (
            ("forecast", forecast),
            ("fit", fit),
            ("hubble", hubble),
            ("cosmography", cosmography),
        )
        if v
    }
    figures = figures or {}
    name = (
        (forecast or {}).get("scenario", {}).get("name")
        or (fit or {}).get("scenario")
        or (f"Joint H0 of {len(cosmography['lenses'])} lenses" if cosmography else None)
        or "lensdelay results"
    )
    body = [
        f"<h1>{_e(name)}</h1>",
        "<p class='lead'>Results of lensdelay "
        + ", ".join(_e(k) for k in docs)
        + (f", as of {_e(forecast.get('now'))}" if forecast else "")
        + ".</p>",
        f"<div class='caution'><b>Caution.</b> {_e(_sentence(CAUTION))}</div>",
    ]
    if forecast:
        body += _forecast_sections(forecast)
        notes = forecast.get("notes", []) + [
            n for m in forecast["models"] for n in m.get("notes", [])
        ]
        if notes:
            body.append("<h2 id='notes'>Notes</h2><ul class='notes'>")
            body += [f"<li>{_e(n)}</li>" for n in dict.fromkeys(notes)]
            body.append("</ul>")
    if cosmography:
        body += _cosmography_section(cosmography)
    shown = [n for n in FIGURES if n in figures]
    if shown:
        body.append("<h2 id='figures'>Figures</h2>")
        body += [_figure(n, figures[n]) for n in shown]
    if forecast:
        body += _budget_section(forecast)
    body += _h0_section(forecast, hubble)
    if fit:
        body += _fit_section(fit)
    if hubble and hubble.get("notes"):
        body.append("<h2 id='hubble-notes'>Notes on H0</h2><ul class='notes'>")
        body += [f"<li>{_e(n)}</li>" for n in hubble["notes"]]
        body.append("</ul>")
    body += _provenance_section(docs)
    body.append(
        "<h2 id='cautions'>Cautions</h2><p>"
        + _e(CAUTION)
        + " Date windows are never point predictions: each holds the stated share of the "
        "forecast's probability under its model, priors and the data given.</p>"
    )
    return (
        "<!DOCTYPE html>\n<html lang='en'><head><meta charset='utf-8'>"
        "<meta name='viewport' content='width=device-width, initial-scale=1'>"
        f"<title>{_e(name)} — lensdelay report</title><style>{STYLE}</style></head>"
        "<body>" + "\n".join(body) + "</body></html>\n"
    )
