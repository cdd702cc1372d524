"""A global search for quasar delays: every pair of images, every mode, every model.

For each pair of images (a quad has six), and each model of the extrinsic variability
(:mod:`.extrinsic`, nine of them, :func:`extrinsic_models`):

0. **Is there a delay to measure?** The curves must share variability: the evidence of
   one source seen by both images (step 3's, integrated over the admitted delays) must
   beat that of two independent curves by MIN_SHARED_LN_ODDS.
1. **Which delays are admitted.** A delay Δ is admitted only where, moved back by Δ, at
   least ``MIN_OVERLAP_SHARE`` of the shorter curve's points (and ``MIN_OVERLAP_POINTS``)
   lie within two cadences of a point of the other curve: elsewhere the curves barely
   overlap and each is fitted alone by its own flexible terms, a likelihood that says
   nothing about the delay. This is the delay's prior: uniform over the admitted delays,
   zero elsewhere, fixed before the likelihood is seen. The admitted range is the data's
   own; a forecast's predicted delays may narrow it further (``prior_ranges``).
2. **The variability's scales**: σ and τ of the damped random walk and a factor on each
   image's stated errors are set by maximising the marginal likelihood of each curve
   alone (type-II maximum likelihood; no delay enters). The extrinsic models' prior
   amplitudes are not fitted but averaged over (AMPLITUDES), as are the families.
3. **On a grid**: the marginal likelihood on a coarse grid (a cadence, at least 1/400
   of the admitted range) over every admitted delay, then on finer grids (a tenth of
   the cadence, then a quarter of the posterior's width) wherever the coarse posterior
   is within e^-12 of its peak. Every mode is kept; the models' posteriors are averaged
   by their evidence and the spread of the families' medians is a systematic term.
4. **The error budget** (:func:`simulation_errors`) and the poor-fit scale widen each
   pair's draws; the pair's verdict says whether it is a measurement. The simulations'
   intrinsic variability is a damped random walk or a Matérn-3/2 process in proportion
   to the two kernels' posterior odds on the curves alone (each fitted alone, same
   number of parameters; :func:`intrinsic_share`): the data decide how smooth the
   source is, not the simulation's author.
5. **The network** (:func:`network`): each image's delay after the reference is the
   least-squares combination of the measurable pairs, draw by draw. A joint posterior of
   all delays at once was tried by importance sampling: the joint likelihood of real
   curves is too rough in the delays (every reordering of interleaved epochs moves it)
   for the draws to settle, and a microlensed reference would pull every image.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import logsumexp

__all__ = [
    "MIN_SHARED_LN_ODDS",
    "MIN_OVERLAP_SHARE",
    "MIN_OVERLAP_POINTS",
    "COARSE_STEP",
    "COARSE_POINTS",
    "FINE_STEP",
    "FINE_THRESHOLD",
    "MAX_REFINED",
    "PairScan",
    "overlap_counts",
    "admitted",
    "admitted_range",
    "pair_likelihood",
    "scan_pair",
    "AMPLITUDES",
    "MODEL_SPREAD_LN_Z",
    "season_length",
    "extrinsic_models",
    "ModelScan",
    "scan_models",
    "averaged_scan",
    "model_spread",
    "MEASURABLE_SHARE",
    "PRIOR_SHARE",
    "POOR_FIT_P",
    "MAX_SCALE",
    "PairResult",
    "QuasarSearch",
    "search_quasar",
    "network",
    "intrinsic_share",
    "simulation_errors",
]


#: A delay needs the curves to share variability: the log Bayes factor of one source seen
#: twice against two independent curves at least this (odds of 20 to 1; Kass & Raftery
#: 1995, JASA 90, 773, section 3.2: "strong" from 20).
MIN_SHARED_LN_ODDS = 3.0
#: The overlap prior (step 1).
MIN_OVERLAP_SHARE = 0.5
MIN_OVERLAP_POINTS = 10
#: Coarse and fine grid steps, in units of the cadence (the coarse one at least 1/400 of
#: the admitted range); the fine grid covers every coarse point whose posterior is within
#: FINE_THRESHOLD (natural log) of the peak.
COARSE_STEP = 1.0
COARSE_POINTS = 400
FINE_STEP = 0.1
FINE_THRESHOLD = 12.0
#: More coarse points than this within FINE_THRESHOLD: the posterior is broad and the
#: coarse grid resolves it (no refinement).
MAX_REFINED = 60


@dataclass(frozen=True)
class PairScan:
    """The posterior of one image's delay against the reference, on a grid (days)."""

    grid: np.ndarray
    log_post: np.ndarray  # log likelihood + log prior (−inf where not admitted), unnormalised
    log_evidence: float  # log ∫ L(Δ) p(Δ) dΔ, with p uniform over the admitted delays

    def peak(self) -> float:
        """The delay of the highest posterior, refined by a parabola through its neighbours."""
        k = int(np.argmax(self.log_post))
        if 0 < k < len(self.grid) - 1:
            x, y = self.grid[k - 1 : k + 2], self.log_post[k - 1 : k + 2]
            if np.all(np.isfinite(y)):
                c = np.polyfit(x - x[1], y, 2)
                if c[0] < 0:
                    return float(np.clip(x[1] - c[1] / (2 * c[0]), x[0], x[2]))
        return float(self.grid[k])

    def density(self) -> np.ndarray:
        """The normalised posterior density at the grid points (trapezoid weights)."""
        w = _cell_widths(self.grid)
        lp = self.log_post - logsumexp(self.log_post, b=w)
        return np.exp(lp)

    def draw(self, n: int, rng) -> np.ndarray:
        """``n`` delays drawn from the piecewise-constant posterior on the grid cells."""
        w = _cell_widths(self.grid)
        p = self.density() * w
        p = p / p.sum()
        k = rng.choice(len(self.grid), size=n, p=p)
        return self.grid[k] + (rng.random(n) - 0.5) * w[k]

    def log_density_at(self, x: np.ndarray) -> np.ndarray:
        """The log posterior density at ``x`` (that of the grid cell holding it)."""
        w = _cell_widths(self.grid)
        lp = self.log_post - logsumexp(self.log_post, b=w)
        edges = np.concatenate([[self.grid[0] - w[0] / 2], self.grid + w / 2])
        k = np.clip(np.searchsorted(edges, x) - 1, 0, len(self.grid) - 1)
        return lp[k]


def _cell_widths(grid: np.ndarray) -> np.ndarray:
    """Width of each grid point's cell (halfway to its neighbours)."""
    if len(grid) == 1:
        return np.ones(1)
    mids = 0.5 * (grid[1:] + grid[:-1])
    first, last = grid[0] - (mids[0] - grid[0]), grid[-1] + (grid[-1] - mids[-1])
    edges = np.concatenate([[first], mids, [last]])
    return np.diff(edges)


def overlap_counts(t_ref: np.ndarray, t_img: np.ndarray, delays: np.ndarray, window: float):
    """Per trial delay, how many of the image's points, moved back, fall near a reference point."""
    t_ref = np.sort(np.asarray(t_ref, dtype=float))
    shifted = np.asarray(t_img, dtype=float)[None, :] - np.asarray(delays, dtype=float)[:, None]
    k = np.clip(np.searchsorted(t_ref, shifted), 1, len(t_ref) - 1)
    nearest = np.minimum(np.abs(shifted - t_ref[k - 1]), np.abs(shifted - t_ref[k]))
    return np.sum(nearest <= window, axis=1)


def admitted(model, image: int, delays: np.ndarray, window: float) -> np.ndarray:
    """The overlap prior's support: which trial delays of ``image`` are admitted (step 1)."""
    t_ref = model.t[model.which == 0]
    t_img = model.t[model.which == image]
    counts = overlap_counts(t_ref, t_img, delays, window)
    shorter = min(len(np.unique(t_ref)), len(np.unique(t_img)))
    need = max(MIN_OVERLAP_POINTS, MIN_OVERLAP_SHARE * shorter)
    return counts >= need


def admitted_range(model, image: int, window: float) -> tuple[float, float] | None:
    """The smallest and largest admitted delay of ``image`` within ±max_delay, or None."""
    step = max(model.cadence, 0.5)
    grid = np.arange(-model.max_delay, model.max_delay + step / 2, step)
    ok = admitted(model, image, grid, window)
    if not np.any(ok):
        return None
    return float(grid[ok].min()), float(grid[ok].max())


def pair_likelihood(model, image: int, hyper, grid: np.ndarray) -> np.ndarray:
    """Marginal log-likelihood of the reference and ``image`` alone at each trial delay."""
    ln_sigma, ln_tau = hyper
    rows = (model.which == 0) | (model.which == image)
    delays = np.zeros(model.n_images - 1)
    out = np.empty(len(grid))
    for k, d in enumerate(grid):
        delays[image - 1] = d
        out[k] = model.log_likelihood(delays, ln_sigma, ln_tau, rows)
    return out


def scan_pair(model, image: int, hyper, window: float, prior_range=None) -> PairScan | None:
    """The posterior of ``image``'s delay on a coarse-then-fine grid (step 3), or None.

    None where no delay is admitted. ``prior_range`` (low, high) further limits the
    admitted delays (a forecast's predicted range).
    """
    span = admitted_range(model, image, window)
    if span is None:
        return None
    step = max(COARSE_STEP * model.cadence, (span[1] - span[0]) / COARSE_POINTS, 0.25)
    coarse = np.arange(span[0], span[1] + step / 2, step)
    ok = admitted(model, image, coarse, window)
    if prior_range is not None:
        ok &= (coarse >= prior_range[0]) & (coarse <= prior_range[1])
    if not np.any(ok):
        return None
    coarse = coarse[ok]
    ll = pair_likelihood(model, image, hyper, coarse)
    ll = np.where(np.isfinite(ll), ll, -np.inf)
    keep = ll >= np.max(ll) - FINE_THRESHOLD
    if keep.sum() > MAX_REFINED:
        # a posterior broad on the coarse grid's scale: the coarse grid resolves it
        return _scan_result(coarse, ll, ok.sum() * step, step)
    fine_step = max(FINE_STEP * model.cadence, 0.02)
    fine = _refined(coarse[keep], step, fine_step)
    fine, ll_fine = _evaluate(model, image, hyper, fine, window, prior_range)
    if fine.size == 0:
        fine, ll_fine = coarse[keep], ll[keep]
    else:
        # a posterior narrow on the fine grid's scale: once more, finer, around its peak
        w = np.exp(ll_fine - ll_fine.max())
        sd = float(np.sqrt(np.sum(w * (fine - np.sum(w * fine) / w.sum()) ** 2) / w.sum()))
        if sd < 2.0 * fine_step:
            finest_step = max(sd / 4.0, 0.002)
            top = fine[ll_fine >= ll_fine.max() - FINE_THRESHOLD]
            finest, ll_finest = _evaluate(
                model, image, hyper, _refined(top, fine_step, finest_step), window, prior_range
            )
            if finest.size:
                outside = np.min(np.abs(fine[:, None] - finest[None, :]), axis=1) > fine_step / 2
                fine = np.concatenate([finest, fine[outside]])
                ll_fine = np.concatenate([ll_finest, ll_fine[outside]])
    # the posterior: the fine grid where it was refined, the coarse one elsewhere (so the
    # evidence counts every mode's mass), on cells of their own widths
    far = coarse[~keep]
    far_ll = ll[~keep]
    near = np.min(np.abs(far[:, None] - fine[None, :]), axis=1) <= step / 2 if far.size else []
    grid = np.concatenate([fine, far[~np.asarray(near, dtype=bool)]] if far.size else [fine])
    lp = np.concatenate([ll_fine, far_ll[~np.asarray(near, dtype=bool)]] if far.size else [ll_fine])
    order = np.argsort(grid)
    return _scan_result(grid[order], lp[order], ok.sum() * step, step)


def _refined(centres, step, fine_step):
    """A grid of ``fine_step`` covering ±step/2 around each of ``centres``."""
    pieces = [np.arange(c - step / 2, c + step / 2, fine_step) for c in centres]
    return np.unique(np.round(np.concatenate(pieces) / fine_step).astype(np.int64)) * fine_step


def _evaluate(model, image, hyper, grid, window, prior_range):
    """The admitted points of ``grid`` and their pair likelihoods."""
    good = admitted(model, image, grid, window)
    if prior_range is not None:
        good &= (grid >= prior_range[0]) & (grid <= prior_range[1])
    grid = grid[good]
    ll = pair_likelihood(model, image, hyper, grid) if grid.size else np.zeros(0)
    return grid, np.where(np.isfinite(ll), ll, -np.inf)


def _scan_result(grid, lp, admitted_width, step) -> PairScan:
    """A PairScan with the evidence under a prior uniform over the admitted width."""
    width = float(grid[-1] - grid[0]) if len(grid) > 1 else step
    log_prior = -np.log(max(admitted_width, width, 1e-9))
    log_z = float(logsumexp(lp, b=_cell_widths(grid)) + log_prior)
    return PairScan(grid, lp, log_z)


# -- the models compared, and the search over all of them ---------------------------------
#: Prior amplitudes (mag) of the spline and slow-process terms, averaged over with equal
#: weight (a prior uniform in log a on these four values).
AMPLITUDES = (0.05, 0.25)
#: Families whose log evidence is within this of the best one's count in the spread
#: between models (odds of 1 in 20 or better).
MODEL_SPREAD_LN_Z = 3.0


def season_length(t: np.ndarray) -> float:
    """Median length (days) of the stretches of epochs separated by gaps of > 60 days."""
    t = np.sort(np.unique(t))
    breaks = np.nonzero(np.diff(t) > 60.0)[0]
    starts = np.concatenate([[0], breaks + 1])
    ends = np.concatenate([breaks, [len(t) - 1]])
    lengths = t[ends] - t[starts]
    return float(np.median(lengths)) if lengths.size else float(t[-1] - t[0])


def extrinsic_models(curves, order: int = 2) -> list:
    """The models of each image's extrinsic variability compared on these curves.

    A polynomial trend of order ``order``; cubic splines with knots every half and every
    fifth of a season (at least 8 and 6 cadences); a Matérn-3/2 process with a time scale
    of a season and of a quarter season (at least 16 and 8 cadences); the latter four at
    each of AMPLITUDES: nine models. The scales follow the data: a season is the longest
    stretch over which the curves constrain microlensing, and real microlensing varies
    on weeks as well as years.
    """
    from lensdelay.lightcurves.extrinsic import Extrinsic

    season = season_length(curves.time)
    cadence = curves.cadence()
    scales = (
        ("spline", max(0.5 * season, 8.0 * cadence)),
        ("spline", max(0.2 * season, 6.0 * cadence)),
        ("slow-gp", max(season, 16.0 * cadence)),
        ("slow-gp", max(0.25 * season, 8.0 * cadence)),
    )
    out = [Extrinsic("polynomial", float(order), 1.0)]
    for family, s in scales:
        out += [Extrinsic(family, s, a) for a in AMPLITUDES]
    return out


@dataclass(frozen=True)
class ModelScan:
    """One extrinsic model's pairwise scans (one per non-reference image) and evidence."""

    extrinsic: object
    scans: tuple  # PairScan or None per image
    log_evidence: float  # Σ over images of the pairwise log evidences


def scan_models(
    curves, reference, models, hyper, window, max_delay, prior_ranges=None, error_scale=None
):
    """Every model's pairwise scans (step 3) on a shared coarse grid."""
    from lensdelay.lightcurves.quasar import QuasarDelayModel

    out = []
    for ex in models:
        m = QuasarDelayModel(curves, reference, extrinsic=ex, max_delay=max_delay)
        if error_scale is not None:
            m.set_error_scale(error_scale)
        scans = []
        for i in range(1, m.n_images):
            pr = None if prior_ranges is None else prior_ranges[i - 1]
            scans.append(scan_pair(m, i, hyper, window, pr))
        lz = sum(s.log_evidence for s in scans if s is not None)
        out.append(ModelScan(ex, tuple(scans), float(lz)))
    return out


def averaged_scan(model_scans, image: int) -> PairScan | None:
    """Image ``image``'s posterior averaged over the models by their evidence (grid union)."""
    parts = [(ms.scans[image - 1], ms.log_evidence) for ms in model_scans]
    parts = [(s, lz) for s, lz in parts if s is not None]
    if not parts:
        return None
    grid = np.unique(np.concatenate([s.grid for s, _ in parts]))
    total = np.full(len(grid), -np.inf)
    lz_all = np.array([lz for _, lz in parts])
    weights = lz_all - logsumexp(lz_all)
    for (s, _), lw in zip(parts, weights):
        # each model's normalised density, interpolated onto the union grid
        dens = s.log_density_at(grid)
        inside = (grid >= s.grid[0] - 1e-9) & (grid <= s.grid[-1] + 1e-9)
        dens = np.where(inside, dens, -np.inf)
        total = np.logaddexp(total, lw + dens)
    lz = float(logsumexp(lz_all) - np.log(len(lz_all)))
    return PairScan(grid, total, lz)


def model_spread(model_scans, image: int, rng) -> tuple[float, list]:
    """The spread (sd, days) of the medians of the families within MODEL_SPREAD_LN_Z.

    Each family's posterior is its own average over amplitudes; returns the sd and the
    (family name, median, log evidence) rows compared.
    """
    by_family = {}
    for ms in model_scans:
        by_family.setdefault(ms.extrinsic.family, []).append(ms)
    rows = []
    for family, group in by_family.items():
        s = averaged_scan(group, image)
        if s is None:
            continue
        med = float(np.median(s.draw(2000, rng)))
        lz = float(logsumexp([g.log_evidence for g in group]) - np.log(len(group)))
        rows.append((family, med, lz))
    if not rows:
        return 0.0, rows
    best = max(r[2] for r in rows)
    meds = [r[1] for r in rows if r[2] >= best - MODEL_SPREAD_LN_Z]
    return (float(np.std(meds, ddof=1)) if len(meds) > 1 else 0.0), rows


# -- the whole search, with its error budget ------------------------------------------------
#: A pair's delay whose final 95% interval is wider than this share of the admitted
#: delays is not reported as a measurement: the curves hardly constrain it.
MEASURABLE_SHARE = 0.1
#: With a given range (a forecast's), the curves must also narrow it: the 95% interval
#: at most this share of the range, clear of its bounds.
PRIOR_SHARE = 0.5
#: A fit whose χ² p-value is below POOR_FIT_P widens every interval by √(χ²/dof) (the
#: scale factor of the Particle Data Group's averages, Workman et al. 2022, PTEP 083C01,
#: "Introduction", eq. 5.7 there); above MAX_SCALE the model does not describe the curves
#: and no delay is given.
POOR_FIT_P = 1e-3
MAX_SCALE = 3.0


@dataclass(frozen=True)
class PairResult:
    """One pair of images measured against each other: ``later`` after ``earlier``.

    Draws of Δ_later − Δ_earlier (days): ``statistical`` from the grid posterior averaged
    over the models, ``final`` widened by the systematic terms and the poor-fit scale.
    ``why`` is "" when the pair's delay is a measurement, else the reason it is not.
    """

    earlier: str
    later: str
    statistical: np.ndarray | None
    final: np.ndarray | None
    best: float
    model_spread: float
    simulation_bias: float
    simulation_spread: float
    shared_odds: float
    scale: float
    goodness: dict
    why: str
    model: object = None
    model_scans: tuple = ()

    @property
    def measurable(self) -> bool:
        """True when the pair's delay is reported as a measurement."""
        return not self.why

    def summary(self) -> dict:
        """The pair's delay quantiles (final) and verdict, for delays.json."""
        out = {"pair": f"{self.later}-{self.earlier}", "measurable": self.measurable}
        if self.final is not None:
            q = np.percentile(self.final, [2.5, 16, 50, 84, 97.5])
            out.update(
                {
                    k: round(float(v), 3)
                    for k, v in zip(("p2.5", "p16", "median", "p84", "p97.5"), q)
                }
            )
        out["log_shared_odds"] = None if np.isnan(self.shared_odds) else round(self.shared_odds, 1)
        if self.why:
            out["why"] = self.why
        return out


@dataclass(frozen=True)
class QuasarSearch:
    """Everything the search found; per-image arrays are in the order of ``labels[1:]``.

    Attributes
    ----------
    labels : list of str
        The reference first.
    model : QuasarDelayModel
        All images under the extrinsic model of the highest evidence (flux ratios, the
        figure, the overall goodness of fit).
    hyper : tuple
        ln σ and ln τ of the intrinsic damped random walk.
    best : ndarray
        Each delay at the network's solution of the pairs' posterior peaks.
    statistical, final : ndarray (draws, n_images − 1)
        Draws of each delay after the reference from the network of measurable pairs
        (NaN for an image no chain of measurable pairs links to the reference).
    pairs : list of PairResult
    verdicts : list of str
        Per image, "" when measured, else why not.
    model_spread, simulation_bias, simulation_spread, shared_odds : ndarray
        Per image, from its pair with the reference.
    goodness : dict
        χ² of all curves at ``best`` under ``model``.
    notes : list of str
    """

    labels: list
    model: object
    hyper: tuple
    best: np.ndarray
    statistical: np.ndarray
    final: np.ndarray
    pairs: list
    verdicts: list
    model_spread: np.ndarray
    simulation_bias: np.ndarray
    simulation_spread: np.ndarray
    shared_odds: np.ndarray
    goodness: dict
    notes: list


def search_quasar(*args, **kwargs) -> QuasarSearch:
    """Every pair of images searched, then the network of measurable pairs (module docstring).

    The likelihood's matrix products are small (hundreds of rows, tens of columns) and
    many: threaded BLAS only adds overhead (10-20 times slower on a busy machine), so the
    search runs them on one thread (threadpoolctl). Arguments as :func:`_search_quasar`.
    """
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1, user_api="blas"):
        return _search_quasar(*args, **kwargs)


def _search_quasar(
    curves,
    reference: str,
    *,
    max_delay: float | None = None,
    prior_ranges=None,
    simulations: int = 8,
    draws: int = 4000,
    rng=None,
    rng_sims=None,
    order: int = 2,
) -> QuasarSearch:
    """The search of :func:`search_quasar`.

    Parameters
    ----------
    curves : LightCurves
        Detections (any number of bands and instruments).
    reference : str
    max_delay : float, optional
        The outer bound of the search (default 0.8 × the data span); the overlap prior
        admits less.
    prior_ranges : list of (low, high) or None, optional
        Per non-reference image, a range its delay after the reference is known to lie in.
    simulations : int
        Simulated data sets per pair for the bias and spread (0: none).
    draws : int
        Posterior draws returned.
    rng, rng_sims : numpy Generator
    order : int
        Order of the polynomial among the compared models.
    """
    from scipy import stats

    from lensdelay.lightcurves.quasar import QuasarDelayModel

    rng = np.random.default_rng(0) if rng is None else rng
    rng_sims = np.random.default_rng(1) if rng_sims is None else rng_sims
    notes = []
    base = QuasarDelayModel(curves, reference, order=order, max_delay=max_delay)
    labels = base.labels
    n1 = len(labels) - 1
    ln_sigma, ln_tau, error_scale, ln_l_drw = base.fit_alone("drw")
    base.set_error_scale(error_scale)
    hyper = (ln_sigma, ln_tau)
    smooth = intrinsic_share(base, ln_l_drw) if simulations else (0.0, 0.0, 0.0, 0.0)
    if simulations:
        notes.append(
            "simulated curves for the error budget: intrinsic variability a damped random "
            f"walk in {100 * (1 - smooth[0]):.0f}% and a Matérn-3/2 process (ℓ = "
            f"{np.exp(smooth[3]):.0f} d) in {100 * smooth[0]:.0f}%, by the two kernels' odds "
            f"on the curves alone (ln odds {smooth[1]:+.1f} for the Matérn)"
        )
    factor = dict(zip(labels, error_scale))
    if np.any(error_scale > 1.05):
        notes.append(
            "stated errors scaled by a factor fitted to each curve alone ("
            + ", ".join(f"{lab} x{f:.2f}" for lab, f in factor.items())
            + "): the curves scatter more than their errors say"
        )
    ranges = {lab: (0.0, 0.0) for lab in labels[:1]}
    if prior_ranges is not None:
        ranges.update({lab: r for lab, r in zip(labels[1:], prior_ranges) if r is not None})
    models = extrinsic_models(curves, order)
    pairs = []
    for a_i, a in enumerate(labels):
        for b in labels[a_i + 1 :]:
            pr = None
            if a in ranges and b in ranges:
                pr = (ranges[b][0] - ranges[a][1], ranges[b][1] - ranges[a][0])
            pairs.append(
                _measure_pair(
                    curves,
                    a,
                    b,
                    models,
                    hyper,
                    factor,
                    smooth,
                    base.max_delay,
                    pr,
                    simulations,
                    draws,
                    rng,
                    rng_sims,
                )
            )
    direct = {p.later: p for p in pairs if p.earlier == reference}
    stat, final, linked, birge = network(labels, pairs, draws, rng)
    verdicts = []
    for i, lab in enumerate(labels[1:]):
        if linked[i]:
            verdicts.append("")
            continue
        why = direct[lab].why or "its pairs do not link it to the reference"
        verdicts.append(why)
    used = [p for p in pairs if p.measurable]
    if any(p.earlier != reference for p in used):
        notes.append(
            "delays combined over every measurable pair of images ("
            + ", ".join(f"{p.later}-{p.earlier}" for p in used)
            + "), weighted by their errors; the combined errors are widened by "
            "sqrt(pairs / delays) because pairs share curves"
        )
    if birge > 1.0:
        notes.append(
            f"the pairs disagree with one another by more than their errors (scale factor "
            f"sqrt(chi2/dof) = {birge:.2f}, e.g. an image's microlensing pulls the pairs "
            "through it): the combined errors are widened by it"
        )
    best = np.array([float(np.median(final[:, i])) if linked[i] else 0.0 for i in range(n1)])
    # the model of all curves: the family of the highest summed evidence over the pairs
    totals = {}
    for p in pairs:
        for ms in p.model_scans:
            totals[ms.extrinsic] = totals.get(ms.extrinsic, 0.0) + ms.log_evidence
    best_extrinsic = max(totals, key=totals.get) if totals else models[0]
    model = QuasarDelayModel(curves, reference, extrinsic=best_extrinsic, max_delay=base.max_delay)
    model.set_error_scale(error_scale)
    chi2 = model.whitened_chi2(best, *hyper)
    n_fixed = len(model.offset_columns) + len(model.instrument_columns)
    dof = max(len(model.t) - n_fixed - n1 - 2, 1)
    goodness = {"chi2": float(chi2), "dof": int(dof), "p_value": float(stats.chi2.sf(chi2, dof))}
    notes.append(
        f"microlensing model of the highest evidence: {best_extrinsic.name}; each pair's delay "
        "is averaged over all models compared, by their evidence"
    )
    scaled = [p for p in pairs if p.scale > 1.0 and p.final is not None]
    if scaled:
        notes.append(
            "poor fits (chi2 p-value below "
            f"{POOR_FIT_P:g}) widened by sqrt(chi2/dof): "
            + ", ".join(f"{p.later}-{p.earlier} x{p.scale:.2f}" for p in scaled)
        )

    def per_image(attr):
        return np.array([getattr(direct[lab], attr) for lab in labels[1:]], dtype=float)

    return QuasarSearch(
        labels,
        model,
        hyper,
        best,
        stat,
        final,
        pairs,
        verdicts,
        per_image("model_spread"),
        per_image("simulation_bias"),
        per_image("simulation_spread"),
        per_image("shared_odds"),
        goodness,
        notes,
    )


def _measure_pair(
    curves,
    a,
    b,
    models,
    hyper,
    factor,
    smooth,
    max_delay,
    prior_range,
    simulations,
    draws,
    rng,
    rng_sims,
) -> PairResult:
    """Steps 0-3 for images ``a`` (earlier in the list) and ``b``, with the error budget."""
    from scipy import stats

    from lensdelay.lightcurves.quasar import QuasarDelayModel

    sub = curves.subset(np.isin(curves.image, [a, b]))
    scale_ab = [factor[a], factor[b]]
    base = QuasarDelayModel(sub, a, max_delay=max_delay)
    window = max(2.0 * base.cadence, 1.0)
    span = admitted_range(base, 1, window)
    nothing = dict(
        statistical=None,
        final=None,
        best=np.nan,
        model_spread=0.0,
        simulation_bias=0.0,
        simulation_spread=0.0,
        shared_odds=np.nan,
        scale=1.0,
        goodness={},
    )
    if span is None:
        why = (
            f"not measurable from these data: at no delay within ±{base.max_delay:.0f} d do "
            f"the curves overlap enough (at least {100 * MIN_OVERLAP_SHARE:.0f}% of the "
            f"shorter curve's points, and {MIN_OVERLAP_POINTS}, within {window:.1f} d of a "
            f"point of {a})"
        )
        return PairResult(a, b, why=why, **nothing)
    scans = scan_models(sub, a, models, hyper, window, max_delay, [prior_range], scale_ab)
    averaged = averaged_scan(scans, 1)
    if averaged is None:
        why = "not measurable from these data: no delay in the given range is admitted"
        return PairResult(a, b, why=why, **nothing)
    best_scan = max(scans, key=lambda m: m.log_evidence)
    model = QuasarDelayModel(sub, a, extrinsic=best_scan.extrinsic, max_delay=max_delay)
    model.set_error_scale(scale_ab)
    spread, _ = model_spread(scans, 1, rng)
    stat = averaged.draw(draws, rng)
    best = best_scan.scans[0].peak()
    chi2 = model.whitened_chi2([best], *hyper)
    dof = max(len(model.t) - len(model.offset_columns) - len(model.instrument_columns) - 3, 1)
    p_value = float(stats.chi2.sf(chi2, dof))
    scale = float(np.sqrt(chi2 / dof)) if p_value < POOR_FIT_P else 1.0
    goodness = {"chi2": float(chi2), "dof": int(dof), "p_value": p_value}
    bias = sim_spread = 0.0
    # is there variability in common at all? the best model's evidence of one source
    # against the same two curves as independent sources
    alone = sum(model.log_likelihood([0.0], *hyper, model.which == k) for k in (0, 1))
    odds = float(best_scan.scans[0].log_evidence - alone)
    verdict = dict(
        odds=odds, scale=scale, chi2=chi2, dof=dof, span=span, window=window, prior=prior_range
    )
    # the budget only widens: a pair its statistical posterior already refuses is refused
    # whatever the simulations say, so they are not run (they were most of the time of
    # the slowest TDC1 pairs)
    hopeless = bool(_refusal(model, stat, **verdict))
    if simulations and not hopeless:
        # simulated data searched near their truth: wide enough for the estimator's local
        # errors and its jumps between neighbouring (seasonal) modes; far modes are the
        # posterior's own business (kept in step 3)
        lo, hi = np.percentile(stat, [2.5, 97.5])
        half = max(10.0 * model.cadence, 3.0 * (hi - lo), 10.0)
        errors = simulation_errors(
            model,
            hyper,
            np.array([best]),
            simulations,
            rng_sims,
            window,
            [(best - half, best + half)],
            smooth_share=smooth[0],
            smooth_hyper=smooth[2:],
        )[:, 0]
        # robust: the median and the normalised median absolute deviation
        bias = float(np.nanmedian(errors))
        if simulations > 2:
            sim_spread = float(1.4826 * np.nanmedian(np.abs(errors - bias)))
    q16, q50, q84 = np.percentile(stat, [16, 50, 84])
    rms = float(np.hypot(bias, sim_spread))
    extra = np.sqrt(spread**2 + max(0.0, rms**2 - (0.5 * (q84 - q16)) ** 2))
    final = q50 + scale * (stat + extra * rng.standard_normal(draws) - q50)
    why = _refusal(model, final, **verdict)
    return PairResult(
        a,
        b,
        stat,
        final,
        best,
        float(spread),
        bias,
        sim_spread,
        odds,
        scale,
        goodness,
        why,
        model,
        tuple(scans),
    )


def _refusal(model, draws, *, odds, scale, chi2, dof, span, window, prior) -> str:
    """Why a pair's delay draws are not a measurement ("" when they are).

    The fit must describe the curves (scale ≤ MAX_SCALE), the curves must share
    variability (odds), the 95% interval must stay where they overlap and be narrower than
    MEASURABLE_SHARE of the admitted delays, and with a given range (``prior``) it must
    narrow that range to PRIOR_SHARE and stay clear of its bounds. Wider draws are refused
    wherever narrower ones are.
    """
    lo, hi = np.percentile(draws, [2.5, 97.5])
    probe = np.array([lo - model.cadence, hi + model.cadence])
    extent = span[1] - span[0]
    if scale > MAX_SCALE:
        return (
            f"not measurable: the model does not describe these curves (chi2 = {chi2:.0f} for "
            f"{dof} dof; sqrt(chi2/dof) = {scale:.1f} > {MAX_SCALE:g}) — check the errors, "
            "instruments and outliers"
        )
    if not odds >= MIN_SHARED_LN_ODDS:
        return (
            "not measurable from these data: the curves show no variability in common (log "
            f"Bayes factor of one source against two independent curves {odds:.1f}, below "
            f"{MIN_SHARED_LN_ODDS:g})"
        )
    if not np.all(admitted(model, 1, probe, window)):
        return (
            "not measurable from these data: the posterior reaches delays where the curves "
            f"no longer overlap enough (95% interval {lo:+.1f}..{hi:+.1f} d)"
        )
    if hi - lo > MEASURABLE_SHARE * extent:
        return (
            f"not measurable from these data: the 95% interval spans {hi - lo:.0f} d, more "
            f"than {100 * MEASURABLE_SHARE:.0f}% of the {extent:.0f} d of delays at which "
            "the curves overlap"
        )
    if prior is not None:
        within = bool(np.all((probe >= prior[0]) & (probe <= prior[1])))
        width = max(min(span[1], prior[1]) - max(span[0], prior[0]), 1e-9)
        if not within or hi - lo > PRIOR_SHARE * width:
            return (
                f"not measurable from these data: the delay is held by the given range "
                f"({prior[0]:+.1f}..{prior[1]:+.1f} d), not by the curves (95% "
                f"interval {lo:+.1f}..{hi:+.1f} d)"
            )
    return ""


def network(labels, pairs, draws: int, rng):
    """Each image's delay after ``labels[0]`` from the measurable pairs, draw by draw.

    Unknowns Δ_j (j ≠ reference); each measurable pair (a, b) says Δ_b − Δ_a = d_ab with
    weight 1/σ_ab² (σ_ab half its final 68% interval). For every draw the weighted least
    squares solution is taken with each pair's draw (Aitken's generalised least squares,
    Aitken 1936, Proc. R. Soc. Edinb. 55, 42). Pairs share curves, so they are not
    independent: the spread about the median is widened by √(pairs / unknowns) when there
    are more pairs than unknowns (a quad's six pairs carry at most three delays' worth of
    data). When the pairs disagree with one another by more than their errors allow (the
    weighted residual χ² of the pairs' medians about the solution above its degrees of
    freedom, pairs − unknowns), the spread is widened further by the scale factor
    S = √(χ²/dof) (Birge 1932, Phys. Rev. 40, 207; the Particle Data Group's practice for
    inconsistent measurements): e.g. a microlensed image that pulls the paths through it
    away from the paths around it. Returns (statistical, final, linked, scale factor) —
    images not linked to the reference by measurable pairs get NaN.
    """
    n1 = len(labels) - 1
    index = {lab: k - 1 for k, lab in enumerate(labels)}  # reference -> -1
    used = [p for p in pairs if p.measurable]
    # which images a chain of measurable pairs links to the reference
    linked_set = {labels[0]}
    grew = True
    while grew:
        grew = False
        for p in used:
            if (p.earlier in linked_set) != (p.later in linked_set):
                linked_set |= {p.earlier, p.later}
                grew = True
    linked = [lab in linked_set for lab in labels[1:]]
    stat = np.full((draws, n1), np.nan)
    final = np.full((draws, n1), np.nan)
    keep = [p for p in used if p.earlier in linked_set and p.later in linked_set]
    unknowns = [k for k in range(n1) if linked[k]]
    if not unknowns:
        return stat, final, linked, 1.0
    col = {k: j for j, k in enumerate(unknowns)}
    design = np.zeros((len(keep), len(unknowns)))
    weights = np.empty(len(keep))
    for r, p in enumerate(keep):
        if index[p.later] >= 0:
            design[r, col[index[p.later]]] = 1.0
        if index[p.earlier] >= 0:
            design[r, col[index[p.earlier]]] = -1.0
        q16, q84 = np.percentile(p.final, [16, 84])
        weights[r] = 1.0 / max(0.5 * (q84 - q16), 1e-6) ** 2
    solve = np.linalg.solve(design.T @ (weights[:, None] * design), design.T * weights)
    medians = np.array([np.median(p.final) for p in keep])
    residual = medians - design @ (solve @ medians)
    dof = len(keep) - len(unknowns)
    birge = float(np.sqrt(max(weights @ residual**2 / dof, 1.0))) if dof > 0 else 1.0
    inflate = np.sqrt(max(len(keep) / len(unknowns), 1.0))
    for name, out in (("statistical", stat), ("final", final)):
        # each pair's draws in a fresh random order (pairs independent), ``draws`` of them
        pair_draws = np.column_stack(
            [
                rng.choice(getattr(p, name), size=draws, replace=len(getattr(p, name)) < draws)
                for p in keep
            ]
        )
        x = pair_draws @ solve.T
        med = np.median(x, axis=0)
        widen = inflate * (birge if name == "final" else 1.0)
        out[:, unknowns] = med + widen * (x - med)
    return stat, final, linked, birge


def intrinsic_share(model, ln_l_drw: float) -> tuple[float, float, float, float]:
    """How much of the simulations' intrinsic variability should be a Matérn-3/2 process.

    Every curve alone is fitted with each kernel (:meth:`QuasarDelayModel.fit_alone`);
    both have two scales and the error factors, so the difference of the maximum
    log-likelihoods is the log odds of the two kernels with equal priors (the Bayesian
    information criterion's penalties cancel; Schwarz 1978, Ann. Stat. 6, 461).
    Returns (share of Matérn simulations, ln odds, the reference's fitted ln σ and ln ℓ).
    """
    from scipy.special import expit

    ln_sigma, ln_scale, _, ln_l_matern = model.fit_alone("matern32")
    ln_odds = float(ln_l_matern - ln_l_drw)
    return float(expit(ln_odds)), ln_odds, float(ln_sigma), float(ln_scale)


def simulation_errors(
    model,
    hyper,
    truth,
    n,
    rng,
    window,
    prior_ranges=None,
    smooth_share: float = 0.5,
    smooth_hyper: tuple[float, float] | None = None,
) -> np.ndarray:
    """Point-estimate errors (days) on ``n`` data sets simulated from *other* families.

    Each has the data's epochs, errors, bands and instruments and the delays ``truth``.
    Intrinsic variability is a damped random walk (σ and τ of the data's fit) or, in a
    share ``smooth_share`` of the sets spread evenly among them, a smoother Matérn-3/2
    process (ln σ and ln ℓ ``smooth_hyper``, by default the walk's σ and the ℓ matching
    the walk's structure function at ten cadences); each image's extrinsic variability
    (its own per band: chromatic) cycles through a slow damped random walk (a season), a
    deterministic drift (cubic plus sinusoid) and a fast flicker (five cadences), with
    the rms of the fitted extrinsic terms. The point estimate is the best pairwise match
    under the fitted model (step 3), so the spread includes its own jumps between modes.
    """
    from lensdelay.lightcurves.curves import LightCurves
    from lensdelay.lightcurves.quasar import QuasarDelayModel
    from lensdelay.lightcurves.simulate import (
        damped_random_walk,
        matern32_process,
        smooth_drift,
    )

    n1 = model.n_images - 1
    sigma, tau = float(np.exp(hyper[0])), float(np.exp(hyper[1]))
    # the Matérn process's scale matching the damped random walk's structure function at a
    # lag of ten cadences (σ²·1.5 (L/ℓ)² = σ² L/τ for L ≪ ℓ, τ), so both vary alike over
    # the lags that fix a delay
    lag = 10.0 * model.cadence
    smooth_scale = float(np.sqrt(1.5 * lag * tau))
    smooth_sigma = sigma
    if smooth_hyper is not None:
        smooth_sigma, smooth_scale = (float(np.exp(v)) for v in smooth_hyper)
    beta = model.linear_coefficients(truth, *hyper)
    fitted = model.design @ beta  # offsets, instrument offsets and the fitted microlensing
    cols = model._extrinsic_columns
    microlensing = model.design[:, cols] @ beta[cols]
    extra = max(0.25 * float(np.std(microlensing)), 0.005)
    season = season_length(model.t)
    shift = np.concatenate([[0.0], truth])[model.which]
    errors = np.full((n, n1), np.nan)
    for s in range(n):
        # the data's own fitted microlensing and offsets, new intrinsic variability, and
        # extra extrinsic variability of another family on top
        y = fitted.copy()
        src = model.t - shift
        for b in range(len(model.bands)):
            rows = model.band == b
            # Matérn sets spread evenly: set s is one when floor((s+1)w) > floor(s w)
            if np.floor((s + 1) * smooth_share) == np.floor(s * smooth_share):
                y[rows] += damped_random_walk(src[rows], sigma, tau, rng)
            else:
                y[rows] += matern32_process(src[rows], smooth_sigma, smooth_scale, rng)
            for k in range(model.n_images):
                mine = rows & (model.which == k)
                if not np.any(mine):
                    continue
                kind = s % 3
                if kind == 0:
                    y[mine] += damped_random_walk(model.t[mine], extra, season, rng)
                elif kind == 1:
                    period = rng.uniform(0.5, 2.0) * 365.25
                    y[mine] += smooth_drift(model.t[mine], extra, period, rng)
                else:
                    y[mine] += damped_random_walk(model.t[mine], extra, 5 * model.cadence, rng)
        y += model.err * model.error_scale[model.which] * rng.standard_normal(len(y))
        sim = LightCurves(
            np.array(model.labels)[model.which],
            model.t,
            y,
            model.err,
            np.array(model.bands)[model.band],
            np.zeros(len(y), dtype=bool),
            "simulation",
            model.instrument,
        )
        m = QuasarDelayModel(
            sim, model.labels[0], extrinsic=model.extrinsic, max_delay=model.max_delay
        )
        m.set_error_scale(model.error_scale)
        for i in range(1, m.n_images):
            pr = None if prior_ranges is None else prior_ranges[i - 1]
            scan = scan_pair(m, i, hyper, window, pr)
            if scan is not None:
                errors[s, i - 1] = scan.peak() - truth[i - 1]
    return errors
