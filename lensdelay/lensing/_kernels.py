"""numba kernels behind :mod:`lensdelay.lensing.compiled` (imported only when numba is).

Each ``_<profile>`` function returns one component's (α_x, α_y, ψ, ψ_xx, ψ_xy, ψ_yy, κ) at
one point as seven floats; the formulas are those of the numpy classes, line for line
(their docstrings give the equations and papers). The inner functions take one array
(the table) and return scalars, and are inlined: a first version that also passed
scratch arrays between them cost 35 ns a point for a shear, ten times its arithmetic.
``table[c, row]`` is component c's entry built by
:func:`lensdelay.lensing.compiled._component_rows`.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

__all__ = [
    "RADIUS_FLOOR",
    "ROUND",
    "NEAR_ONE",
    "evaluate_all",
    "block_deflections",
    "newton_all",
    "series_factors",
    "gather_rows",
    "fill_table",
    "softened_points_field",
]


#: As lensdelay.lensing.profiles.base.RADIUS_FLOOR and sie._ROUND, nfw._NEAR_ONE.
RADIUS_FLOOR = 1e-12
ROUND = 1e-4
NEAR_ONE = 1e-4

_jit = njit(cache=True, error_model="numpy")
#: The kernels that run on large batches release the GIL: :mod:`lensdelay.lensing.threads`
#: runs their index ranges on several threads at once.
_free = njit(cache=True, error_model="numpy", nogil=True)
_inline = njit(cache=True, error_model="numpy", inline="always")


@_inline
def _atan_over(e, z):
    if e < ROUND:
        return z - (e * e) * (z * z * z) / 3.0
    return math.atan(e * z) / e


@_inline
def _atanh_over(e, z):
    if e < ROUND:
        return z + (e * e) * (z * z * z) / 3.0
    return math.atanh(e * z) / e


@_inline
def _keeton(x, y, q, b, s, want_potential):
    """Cored isothermal ellipsoid in its frame (Keeton 2001, eqs. 33-34)."""
    e = math.sqrt(max(1.0 - q * q, 0.0))
    psi = max(math.sqrt(q * q * (s * s + x * x) + y * y), RADIUS_FLOOR)
    ax = b * _atan_over(e, x / (psi + s))
    ay = b * _atanh_over(e, y / (psi + q * q * s))
    pot = x * ax + y * ay
    if s > 0.0 and want_potential:  # the core term's logarithms only when ψ is asked for
        pot += -b * s * (0.5 * math.log((psi + s) ** 2 + e * e * x * x) - math.log((1.0 + q) * s))
    d1 = psi * ((psi + s) ** 2 + e * e * x * x)
    d2 = psi * ((psi + q * q * s) ** 2 - e * e * y * y)
    h11 = b * (psi * (psi + s) - q * q * x * x) / d1
    h12 = -b * x * y / d1
    h22 = b * (psi * (psi + q * q * s) - y * y) / d2
    return ax, ay, pot, h11, h12, h22, 0.5 * b / psi


@_inline
def _power_law(x, y, q, b, t, table, c, row):
    """Elliptical power law in its frame (Tessore & Metcalf 2015, eqs. 13, 15, 26-27).

    ``table[c, row, 7]`` holds the number of terms and ``table[c, row, 8:]`` the
    recurrence factors of this model (:func:`lensdelay.lensing.compiled.series_factors`).
    """
    radius = max(math.sqrt(q * q * x * x + y * y), RADIUS_FLOOR)
    pr = q * x / radius  # e^{iφ}
    pi = y / radius
    r2r = pr * pr - pi * pi  # e^{2iφ}
    r2i = 2.0 * pr * pi
    tr, ti = pr, pi
    sr, si = pr, pi
    for n in range(int(table[c, row, 7])):
        k = table[c, row, 8 + n]
        nr = k * (r2r * tr - r2i * ti)
        ti = k * (r2r * ti + r2i * tr)
        tr = nr
        sr += tr
        si += ti
    ratio = b / radius
    power = ratio ** (t - 1.0)
    pre = 2.0 * b / (1.0 + q) * power
    ax = pre * sr
    ay = pre * si
    two_kappa = (2.0 - t) * power * ratio
    p = (1.0 - t) * ax
    qq = (1.0 - t) * ay
    r2 = max(x * x + y * y, RADIUS_FLOOR * RADIUS_FLOOR)
    return (
        ax,
        ay,
        (x * ax + y * ay) / (2.0 - t),
        (p * x - qq * y + y * y * two_kappa) / r2,
        (qq * x + p * y - x * y * two_kappa) / r2,
        (x * x * two_kappa + qq * y - p * x) / r2,
        0.5 * two_kappa,
    )


@_inline
def _nfw_f(u):
    if abs(u - 1.0) < NEAR_ONE:
        t = u - 1.0
        return 1.0 - 2.0 * t / 3.0 + 7.0 * t * t / 15.0 - 12.0 * t**3 / 35.0
    if u < 1.0:
        return math.acosh(1.0 / u) / math.sqrt(1.0 - u * u)
    return math.acos(1.0 / u) / math.sqrt(u * u - 1.0)


@_inline
def _component(code, table, c, row, gx, gy, want_potential):
    """Component c's seven values at sky point (gx, gy) for parameter row ``row``.

    ``want_potential`` False skips the potential's own transcendental calls where it has
    any (cored ellipsoids, NFW, point mass): ψ is then not computed (0).
    """
    if code == 5:  # shear, about the origin
        gc, gs = table[c, row, 0], table[c, row, 1]
        pot = -0.5 * ((gy * gy - gx * gx) * gc + 2.0 * gx * gy * gs)
        return gc * gx - gs * gy, -gs * gx - gc * gy, pot, gc, -gs, -gc, 0.0
    if code == 6:  # mass sheet
        k = table[c, row, 0]
        return k * gx, k * gy, 0.5 * k * (gx * gx + gy * gy), k, 0.0, k, k
    dx = gx - table[c, row, 0]
    dy = gy - table[c, row, 1]
    at_centre = dx * dx + dy * dy < RADIUS_FLOOR * RADIUS_FLOOR
    if code == 1 or code == 3 or code == 9:  # elliptical: into the frame and back
        s, co = table[c, row, 2], table[c, row, 3]
        lx = s * dx + co * dy
        ly = -co * dx + s * dy
        q, b = table[c, row, 4], table[c, row, 5]
        if code == 3:
            ax, ay, pot, h11, h12, h22, kap = _power_law(
                lx, ly, q, b, table[c, row, 6], table, c, row
            )
        else:
            ax, ay, pot, h11, h12, h22, kap = _keeton(
                lx, ly, q, b, table[c, row, 6], want_potential
            )
            if code == 9:  # truncated: minus the ellipsoid of core a
                bx, by, bpot, b11, b12, b22, bkap = _keeton(
                    lx, ly, q, b, table[c, row, 7], want_potential
                )
                ax, ay, pot = ax - bx, ay - by, pot - bpot
                h11, h12, h22, kap = h11 - b11, h12 - b12, h22 - b22, kap - bkap
        if at_centre:  # the Hessian's average over directions (base.MassProfile.hessian)
            h11, h12, h22 = kap, 0.0, kap
        return (
            s * ax - co * ay,
            co * ax + s * ay,
            pot,
            s * s * h11 - 2.0 * s * co * h12 + co * co * h22,
            s * co * (h11 - h22) + (s * s - co * co) * h12,
            co * co * h11 + 2.0 * s * co * h12 + s * s * h22,
            kap,
        )
    r = max(math.sqrt(dx * dx + dy * dy), RADIUS_FLOOR)
    if code == 4:  # isothermal multipole
        m = table[c, row, 2]
        gcos, gsin = table[c, row, 3], table[c, row, 4]  # c/(1 − m²), s/(1 − m²)
        # cos mφ + i sin mφ = (cos φ + i sin φ)^m with φ = atan2(x, y): no transcendental
        # call (m is an integer); at the centre φ = 0 as numpy's atan2(0, 0)
        if at_centre:
            cm, sm = 1.0, 0.0
        else:
            c1, s1 = dy / r, dx / r
            cm, sm = c1, s1
            for _ in range(int(m) - 1):
                cm, sm = cm * c1 - sm * s1, sm * c1 + cm * s1
        g = gcos * cm + gsin * sm
        dg = m * (gsin * cm - gcos * sm)
        two_kappa = g * (1.0 - m * m) / r
        ax = (g * dx + dg * dy) / r
        ay = (g * dy - dg * dx) / r
        if at_centre:
            return ax, ay, r * g, 0.5 * two_kappa, 0.0, 0.5 * two_kappa, 0.5 * two_kappa
        r2 = r * r
        return (
            ax,
            ay,
            r * g,
            two_kappa * dy * dy / r2,
            -two_kappa * dx * dy / r2,
            two_kappa * dx * dx / r2,
            0.5 * two_kappa,
        )
    if code == 2:  # SIS
        te = table[c, row, 2]
        kappa, alpha, pot = 0.5 * te / r, te, te * r
    elif code == 8:  # point mass
        te2 = table[c, row, 2] * table[c, row, 2]
        kappa, alpha = 0.0, te2 / r
        pot = te2 * math.log(r) if want_potential else 0.0
    else:  # 7: NFW
        ks, rs = table[c, row, 2], table[c, row, 3]
        u = r / rs
        t = u - 1.0
        if abs(t) < NEAR_ONE:
            kappa = 2.0 * ks * (1.0 / 3.0 - 0.4 * t + 13.0 * t * t / 35.0)
        else:
            kappa = 2.0 * ks * (1.0 - _nfw_f(u)) / (u * u - 1.0)
        alpha = 4.0 * ks * rs * (math.log(0.5 * u) + _nfw_f(u)) / u
        pot = 0.0
        if want_potential:
            if u < 1.0:
                angle2 = -(math.acosh(1.0 / u) ** 2)
            else:
                angle2 = math.acos(1.0 / u) ** 2
            pot = 2.0 * ks * rs * rs * (math.log(0.5 * u) ** 2 + angle2)
    # axisymmetric: from κ(r), α(r), ψ(r) (Schneider, Ehlers & Falco 1992, Sect. 8.1)
    tangential = alpha / r
    if at_centre:
        return tangential * dx, tangential * dy, pot, kappa, 0.0, kappa, kappa
    radial = 2.0 * kappa - tangential
    nx = dx / r
    ny = dy / r
    return (
        tangential * dx,
        tangential * dy,
        pot,
        radial * nx * nx + tangential * ny * ny,
        (radial - tangential) * nx * ny,
        radial * ny * ny + tangential * nx * nx,
        kappa,
    )


@_inline
def _sum_at(codes, table, row, gx, gy, want_potential):
    """The lens's seven values at (gx, gy): the sum over its components."""
    a0 = a1 = a2 = a3 = a4 = a5 = a6 = 0.0
    for c in range(codes.shape[0]):
        v0, v1, v2, v3, v4, v5, v6 = _component(codes[c], table, c, row, gx, gy, want_potential)
        a0 += v0
        a1 += v1
        a2 += v2
        a3 += v3
        a4 += v4
        a5 += v5
        a6 += v6
    return a0, a1, a2, a3, a4, a5, a6


@_inline
def _at(a, i):
    """Element i of a per-point array, or the one value of a length-1 array."""
    return a[i] if a.shape[0] > 1 else a[0]


@_free
def evaluate_all(codes, table, x, y, scale, stride, rows, want_potential, lo, hi, out):
    """Fill out[:, lo:hi] (7, N): α_x, α_y, ψ, ψ_xx, ψ_xy, ψ_yy, κ, each times its scale.

    Flat point i belongs to table row (i // stride) % rows; the row is counted along
    the range, not divided out per point.
    """
    row = (lo // stride) % rows
    j = lo % stride
    for i in range(lo, hi):
        a0, a1, a2, a3, a4, a5, a6 = _sum_at(
            codes, table, row, _at(x, i), _at(y, i), want_potential
        )
        s = _at(scale, i)
        out[0, i] = s * a0
        out[1, i] = s * a1
        out[2, i] = s * a2
        out[3, i] = s * a3
        out[4, i] = s * a4
        out[5, i] = s * a5
        out[6, i] = s * a6
        j += 1
        if j == stride:
            j = 0
            row += 1
            if row == rows:
                row = 0


@_free
def block_deflections(codes, table, x, y, scale, blocks, rows, points, r_lo, r_hi, out):
    """Fill out[:, :, r_lo:r_hi] (2, blocks + 1, rows, points): α of lenses a few components apart.

    The lenses are a forward-difference Jacobian's shifted ones, all at the same points.
    Table row ``b · rows + r`` is block b's lens for row r; block ``blocks`` is the
    unshifted one. ``scale`` holds one value, or one per table row. Each point's
    components are evaluated for the unshifted row once; a shifted block evaluates again
    only the components whose table entries differ, and sums all of them in the same
    order as :func:`evaluate_all`, so every value is the one :func:`evaluate_all` gives
    for that row and point, bit for bit.
    """
    n_comp = codes.shape[0]
    width = table.shape[2]
    changed = np.zeros((blocks, rows, n_comp), dtype=np.bool_)
    for b in range(blocks):
        for r in range(r_lo, r_hi):
            base = blocks * rows + r
            for c in range(n_comp):
                for w in range(width):
                    if not table[c, b * rows + r, w] == table[c, base, w]:
                        changed[b, r, c] = True
                        break
    own_x = np.empty(n_comp)
    own_y = np.empty(n_comp)
    for r in range(r_lo, r_hi):
        base = blocks * rows + r
        for i in range(points):
            k = r * points + i
            gx, gy, s = _at(x, k), _at(y, k), _at(scale, base)
            a0 = a1 = 0.0
            for c in range(n_comp):
                v0, v1, _p, _h1, _h2, _h3, _k = _component(codes[c], table, c, base, gx, gy, False)
                own_x[c] = v0
                own_y[c] = v1
                a0 += v0
                a1 += v1
            out[0, blocks, r, i] = s * a0
            out[1, blocks, r, i] = s * a1
            for b in range(blocks):
                row = b * rows + r
                a0 = a1 = 0.0
                for c in range(n_comp):
                    if changed[b, r, c]:
                        v0, v1, _p, _h1, _h2, _h3, _k = _component(
                            codes[c], table, c, row, gx, gy, False
                        )
                    else:
                        v0, v1 = own_x[c], own_y[c]
                    a0 += v0
                    a1 += v1
                s = _at(scale, row)
                out[0, b, r, i] = s * a0
                out[1, b, r, i] = s * a1


@_free
def newton_all(
    codes, table, x0, y0, bx, by, scale, max_step, stride, rows, iterations, tolerance, lo, hi, out
):
    """Newton's method for θ − s α(θ) = β at points lo … hi − 1 (images.newton_polish's steps).

    Fills out[0], out[1] (the roots) and out[2] (the lens equation's residual there);
    when ``out`` has seven rows also s ψ, s ψ_xx, s ψ_xy, s ψ_yy at the roots (rows 3–6),
    from the evaluation that gives the residual (the values :func:`evaluate_all` gives
    there: the components' α and Hessian do not depend on whether ψ is asked for).
    """
    extras = out.shape[0] > 3
    for i in range(lo, hi):
        row = (i // stride) % rows  # a Newton solve costs far more than this division
        x, y, s = _at(x0, i), _at(y0, i), _at(scale, i)
        beta_x, beta_y, limit = _at(bx, i), _at(by, i), _at(max_step, i)
        for _ in range(iterations):
            ax, ay, _p, h11, h12, h22, _k = _sum_at(codes, table, row, x, y, False)
            rx = beta_x - (x - s * ax)
            ry = beta_y - (y - s * ay)
            if abs(rx) + abs(ry) < tolerance:
                break
            a11 = 1.0 - s * h11
            a12 = -s * h12
            a22 = 1.0 - s * h22
            det = a11 * a22 - a12 * a12
            if abs(det) < 1e-14:
                det = math.copysign(1e-14, det)
            dx = (a22 * rx - a12 * ry) / det
            dy = (a11 * ry - a12 * rx) / det
            step = math.sqrt(dx * dx + dy * dy)
            shrink = min(1.0, limit / max(step, 1e-300))
            dx *= shrink
            dy *= shrink
            if math.isfinite(dx):
                x += dx
            if math.isfinite(dy):
                y += dy
        ax, ay, p, h11, h12, h22, _k = _sum_at(codes, table, row, x, y, extras)
        e = math.hypot(beta_x - (x - s * ax), beta_y - (y - s * ay))
        out[0, i] = x
        out[1, i] = y
        out[2, i] = e if math.isfinite(e) else math.inf
        if extras:
            out[3, i] = s * p
            out[4, i] = s * h11
            out[5, i] = s * h12
            out[6, i] = s * h22


@_jit
def series_factors(q, t):
    """The power law's per-row series length and factors (compiled.series_factors's rule).

    Same operations in the same order as the numpy version (equal to the last bit):
    N = max(⌈ln 1e-16 / ln max(f, 1e-16)⌉ + 1, 1) terms, factor_n = −f (2n − 2 + t)/(2n + 2 − t)
    for n ≤ N, zero beyond; f = (1 − q)/(1 + q).
    """
    rows = q.size
    terms = np.empty(rows)
    most = 1.0
    for i in range(rows):
        f = (1.0 - q[i]) / (1.0 + q[i])
        n = max(math.ceil(math.log(1e-16) / math.log(max(f, 1e-16))) + 1.0, 1.0)
        terms[i] = n
        most = max(most, n)
    factors = np.zeros((rows, int(most)))
    for i in range(rows):
        f = (1.0 - q[i]) / (1.0 + q[i])
        for k in range(1, int(terms[i]) + 1):
            factors[i, k - 1] = -f * (2.0 * k - 2.0 + t[i]) / (2.0 * k + 2.0 - t[i])
    return terms, factors


@_jit
def gather_rows(constants, component, field, column, rows, angle_field, angle_factor):
    """Raw parameters (C, P, W) of every component and row, and each one's angle in degrees.

    ``constants[c, f]`` holds the fixed values; entry k of ``component``/``field`` comes
    from column ``column[k]`` of the parameter ``rows``. The angle is raw field
    ``angle_field[c]`` times ``angle_factor[c]`` (2 for a shear, 0 for no angle).
    """
    n_comp, width = constants.shape
    n_rows = rows.shape[0]
    raw = np.empty((n_comp, n_rows, width))
    angle = np.zeros((n_comp, n_rows))
    for c in range(n_comp):
        for r in range(n_rows):
            for f in range(width):
                raw[c, r, f] = constants[c, f]
    for k in range(component.shape[0]):
        for r in range(n_rows):
            raw[component[k], r, field[k]] = rows[r, column[k]]
    for c in range(n_comp):
        if angle_factor[c] == 1.0:
            for r in range(n_rows):
                angle[c, r] = raw[c, r, angle_field[c]]
        elif angle_factor[c] != 0.0:
            for r in range(n_rows):
                angle[c, r] = angle_factor[c] * raw[c, r, angle_field[c]]
    return raw, angle


@_jit
def fill_table(codes, raw, sin_phi, cos_phi, table):
    """The table entries of every component and row from raw parameters, in place.

    ``raw[c, row]`` holds component c's parameters in the order of
    :data:`lensdelay.lensing.compiled.RAW_FIELDS`; ``sin_phi``/``cos_phi`` its angle's
    sine and cosine (from numpy, as the packing of a lens takes them). The entries are
    those of ``compiled._component_rows``, the same operations in the same order (equal
    to the last bit); a power law's series columns are filled by the caller.
    """
    for c in range(codes.shape[0]):
        code = codes[c]
        for r in range(raw.shape[1]):
            v = raw[c, r]
            e = table[c, r]
            if code == 1 or code == 3 or code == 9:  # SIE, power law, truncated
                q = v[3]
                e[0] = v[0]
                e[1] = v[1]
                e[2] = sin_phi[c, r]
                e[3] = cos_phi[c, r]
                e[4] = q
                e[5] = v[4] * math.sqrt(q)
                if code == 3:
                    e[6] = v[5] - 1.0
                else:
                    e[6] = v[5] / math.sqrt(q)
                if code == 9:
                    e[7] = v[6] / math.sqrt(q)
            elif code == 4:  # multipole
                m = v[2]
                e[0] = v[0]
                e[1] = v[1]
                e[2] = m
                e[3] = v[3] / (1.0 - m * m)
                e[4] = v[4] / (1.0 - m * m)
            elif code == 5:  # shear
                e[0] = v[0] * cos_phi[c, r]
                e[1] = v[0] * sin_phi[c, r]
            elif code == 6:  # sheet
                e[0] = v[0]
            elif code == 7:  # NFW
                e[0] = v[0]
                e[1] = v[1]
                e[2] = v[2]
                e[3] = v[3]
            else:  # point mass, SIS
                e[0] = v[0]
                e[1] = v[1]
                e[2] = v[2]


@_free
def softened_points_field(owner, px, py, theta2, x, y, psi, ax, ay, t_lo, t_hi):
    """Add softened point masses t_lo … t_hi − 1's ψ and α at their own rows' points (in place).

    Row ``owner[t]`` of ``x``, ``y`` (rows × points) gets ψ = ½ θ² ln(r² + θ²) and
    α = θ² Δ/(r² + θ²) of point t (the perturbers of
    :mod:`lensdelay.forecast.perturbers`; the numpy version there is the reference).
    """
    n_points = x.shape[1]
    for t in range(t_lo, t_hi):
        row = owner[t]
        t2 = theta2[t]
        for i in range(n_points):
            dx = x[row, i] - px[t]
            dy = y[row, i] - py[t]
            soft = dx * dx + dy * dy + t2
            psi[row, i] += 0.5 * t2 * math.log(soft)
            ax[row, i] += t2 * dx / soft
            ay[row, i] += t2 * dy / soft
