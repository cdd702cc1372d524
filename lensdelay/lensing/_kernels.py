"""numba kernels behind :mod:`lensdelay.lensing.compiled` (imported only when numba is).

Each ``_<profile>`` function adds one component's (α_x, α_y, ψ, ψ_xx, ψ_xy, ψ_yy, κ) at one
point to ``acc``; the formulas are those of the numpy classes, line for line (their
docstrings give the equations and papers). ``p`` is the component's row of the table built
by :func:`lensdelay.lensing.compiled._component_rows`.
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit

#: As lensdelay.lensing.profiles.base.RADIUS_FLOOR and sie._ROUND, nfw._NEAR_ONE.
RADIUS_FLOOR = 1e-12
ROUND = 1e-4
NEAR_ONE = 1e-4


@njit(cache=True, inline="always")
def _rotate_back(acc, s, c, ax, ay, pot, h11, h12, h22, kappa):
    """Add a local-frame result (x' along the major axis) in the sky frame."""
    acc[0] += s * ax - c * ay
    acc[1] += c * ax + s * ay
    acc[2] += pot
    acc[3] += s * s * h11 - 2.0 * s * c * h12 + c * c * h22
    acc[4] += s * c * (h11 - h22) + (s * s - c * c) * h12
    acc[5] += c * c * h11 + 2.0 * s * c * h12 + s * s * h22
    acc[6] += kappa


@njit(cache=True, inline="always")
def _atan_over(e, z):
    if e < ROUND:
        return z - (e * e) * (z * z * z) / 3.0
    return math.atan(e * z) / e


@njit(cache=True, inline="always")
def _atanh_over(e, z):
    if e < ROUND:
        return z + (e * e) * (z * z * z) / 3.0
    return math.atanh(e * z) / e


@njit(cache=True)
def _keeton(x, y, q, b, s, out):
    """Cored isothermal ellipsoid in its frame (Keeton 2001, eqs. 33-34): out[0..6]."""
    e = math.sqrt(max(1.0 - q * q, 0.0))
    psi = max(math.sqrt(q * q * (s * s + x * x) + y * y), RADIUS_FLOOR)
    ax = b * _atan_over(e, x / (psi + s))
    ay = b * _atanh_over(e, y / (psi + q * q * s))
    pot = x * ax + y * ay
    if s > 0.0:
        pot += -b * s * (0.5 * math.log((psi + s) ** 2 + e * e * x * x) - math.log((1.0 + q) * s))
    d1 = psi * ((psi + s) ** 2 + e * e * x * x)
    d2 = psi * ((psi + q * q * s) ** 2 - e * e * y * y)
    out[0] = ax
    out[1] = ay
    out[2] = pot
    out[3] = b * (psi * (psi + s) - q * q * x * x) / d1
    out[4] = -b * x * y / d1
    out[5] = b * (psi * (psi + q * q * s) - y * y) / d2
    out[6] = 0.5 * b / psi


@njit(cache=True)
def _power_law(x, y, q, b, t, out):
    """Elliptical power law in its frame (Tessore & Metcalf 2015, eqs. 13, 15, 26-27)."""
    radius = max(math.sqrt(q * q * x * x + y * y), RADIUS_FLOOR)
    f = (1.0 - q) / (1.0 + q)
    pr = q * x / radius  # e^{iφ}
    pi = y / radius
    r2r = pr * pr - pi * pi  # e^{2iφ}
    r2i = 2.0 * pr * pi
    tr, ti = pr, pi
    sr, si = pr, pi
    # as many terms as the numpy path takes for this q (f^n below 1e-16)
    n_terms = int(math.ceil(math.log(1e-16) / math.log(max(f, 1e-16)))) + 1
    for n in range(1, max(n_terms, 1) + 1):
        k = -f * (2 * n - 2 + t) / (2 * n + 2 - t)
        nr = k * (r2r * tr - r2i * ti)
        ni = k * (r2r * ti + r2i * tr)
        tr, ti = nr, ni
        sr += tr
        si += ti
    ratio = b / radius
    pre = 2.0 * b / (1.0 + q) * ratio ** (t - 1.0)
    ax = pre * sr
    ay = pre * si
    two_kappa = (2.0 - t) * ratio**t
    p = (1.0 - t) * ax
    qq = (1.0 - t) * ay
    r2 = max(x * x + y * y, RADIUS_FLOOR * RADIUS_FLOOR)
    out[0] = ax
    out[1] = ay
    out[2] = (x * ax + y * ay) / (2.0 - t)
    out[3] = (p * x - qq * y + y * y * two_kappa) / r2
    out[4] = (qq * x + p * y - x * y * two_kappa) / r2
    out[5] = (x * x * two_kappa + qq * y - p * x) / r2
    out[6] = 0.5 * two_kappa


@njit(cache=True)
def _nfw_f(u):
    if abs(u - 1.0) < NEAR_ONE:
        t = u - 1.0
        return 1.0 - 2.0 * t / 3.0 + 7.0 * t * t / 15.0 - 12.0 * t**3 / 35.0
    if u < 1.0:
        return math.acosh(1.0 / u) / math.sqrt(1.0 - u * u)
    return math.acos(1.0 / u) / math.sqrt(u * u - 1.0)


@njit(cache=True, inline="always")
def _radial(acc, x, y, r, kappa, alpha, pot):
    """Add an axisymmetric profile's result from κ(r), α(r), ψ(r) (SEF 1992, Sect. 8.1)."""
    tangential = alpha / r
    radial = 2.0 * kappa - tangential
    nx = x / r
    ny = y / r
    acc[0] += tangential * x
    acc[1] += tangential * y
    acc[2] += pot
    acc[3] += radial * nx * nx + tangential * ny * ny
    acc[4] += (radial - tangential) * nx * ny
    acc[5] += radial * ny * ny + tangential * nx * nx
    acc[6] += kappa


@njit(cache=True)
def _add_component(code, p, gx, gy, acc, tmp):
    """Add component ``code`` with table row ``p`` at sky point (gx, gy) to ``acc``."""
    if code == 5:  # shear: about the origin
        gc, gs = p[0], p[1]
        ax = gc * gx - gs * gy
        ay = -gs * gx - gc * gy
        acc[0] += ax
        acc[1] += ay
        acc[2] += -0.5 * ((gy * gy - gx * gx) * gc + 2.0 * gx * gy * gs)
        acc[3] += gc
        acc[4] += -gs
        acc[5] += -gc
        return
    if code == 6:  # mass sheet
        k = p[0]
        acc[0] += k * gx
        acc[1] += k * gy
        acc[2] += 0.5 * k * (gx * gx + gy * gy)
        acc[3] += k
        acc[5] += k
        acc[6] += k
        return
    dx = gx - p[0]
    dy = gy - p[1]
    at_centre = dx * dx + dy * dy < RADIUS_FLOOR * RADIUS_FLOOR
    if code == 1 or code == 3 or code == 9:  # elliptical: rotate into the frame
        s, c = p[2], p[3]
        lx = s * dx + c * dy
        ly = -c * dx + s * dy
        q, b = p[4], p[5]
        if code == 3:
            _power_law(lx, ly, q, b, p[6], tmp)
        else:
            _keeton(lx, ly, q, b, p[6], tmp)
            if code == 9:  # truncated: minus the ellipsoid of core a
                ax, ay, pot, h11, h12, h22, kap = (
                    tmp[0],
                    tmp[1],
                    tmp[2],
                    tmp[3],
                    tmp[4],
                    tmp[5],
                    tmp[6],
                )
                _keeton(lx, ly, q, b, p[7], tmp)
                tmp[0] = ax - tmp[0]
                tmp[1] = ay - tmp[1]
                tmp[2] = pot - tmp[2]
                tmp[3] = h11 - tmp[3]
                tmp[4] = h12 - tmp[4]
                tmp[5] = h22 - tmp[5]
                tmp[6] = kap - tmp[6]
        if at_centre:  # the Hessian's average over directions (base.MassProfile.hessian)
            tmp[3] = tmp[6]
            tmp[4] = 0.0
            tmp[5] = tmp[6]
            _rotate_back(acc, s, c, tmp[0], tmp[1], tmp[2], tmp[6], 0.0, tmp[6], tmp[6])
            return
        _rotate_back(acc, s, c, tmp[0], tmp[1], tmp[2], tmp[3], tmp[4], tmp[5], tmp[6])
        return
    r = max(math.sqrt(dx * dx + dy * dy), RADIUS_FLOOR)
    if code == 4:  # isothermal multipole
        phi = math.atan2(dx, dy)
        m = p[2]
        gcos, gsin = p[3], p[4]  # c/(1 − m²), s/(1 − m²)
        cm = math.cos(m * phi)
        sm = math.sin(m * phi)
        g = gcos * cm + gsin * sm
        dg = m * (gsin * cm - gcos * sm)
        two_kappa = g * (1.0 - m * m) / r
        acc[0] += (g * dx + dg * dy) / r
        acc[1] += (g * dy - dg * dx) / r
        acc[2] += r * g
        if at_centre:
            acc[3] += 0.5 * two_kappa
            acc[5] += 0.5 * two_kappa
        else:
            r2 = r * r
            acc[3] += two_kappa * dy * dy / r2
            acc[4] += -two_kappa * dx * dy / r2
            acc[5] += two_kappa * dx * dx / r2
        acc[6] += 0.5 * two_kappa
        return
    if code == 2:  # SIS
        te = p[2]
        kappa, alpha, pot = 0.5 * te / r, te, te * r
    elif code == 8:  # point mass
        te2 = p[2] * p[2]
        kappa, alpha, pot = 0.0, te2 / r, te2 * math.log(r)
    else:  # 7: NFW
        ks, rs = p[2], p[3]
        u = r / rs
        t = u - 1.0
        if abs(t) < NEAR_ONE:
            kappa = 2.0 * ks * (1.0 / 3.0 - 0.4 * t + 13.0 * t * t / 35.0)
        else:
            kappa = 2.0 * ks * (1.0 - _nfw_f(u)) / (u * u - 1.0)
        alpha = 4.0 * ks * rs * (math.log(0.5 * u) + _nfw_f(u)) / u
        if u < 1.0:
            angle2 = -(math.acosh(1.0 / u) ** 2)
        else:
            angle2 = math.acos(1.0 / max(u, 1.0)) ** 2
        pot = 2.0 * ks * rs * rs * (math.log(0.5 * u) ** 2 + angle2)
    if at_centre:
        acc[0] += alpha / r * dx
        acc[1] += alpha / r * dy
        acc[2] += pot
        acc[3] += kappa
        acc[5] += kappa
        acc[6] += kappa
        return
    _radial(acc, dx, dy, r, kappa, alpha, pot)


@njit(cache=True)
def _sum_at(codes, table, row, gx, gy, acc, tmp):
    for k in range(7):
        acc[k] = 0.0
    for c in range(codes.shape[0]):
        _add_component(codes[c], table[c, row], gx, gy, acc, tmp)


@njit(cache=True)
def evaluate_all(codes, table, x, y, scale, stride, rows):
    """(7, N): α_x, α_y, ψ, ψ_xx, ψ_xy, ψ_yy, κ at the N points, each times its scale."""
    n = x.shape[0]
    out = np.empty((7, n))
    acc = np.zeros(7)
    tmp = np.zeros(7)
    for i in range(n):
        row = (i // stride) % rows
        _sum_at(codes, table, row, x[i], y[i], acc, tmp)
        for k in range(7):
            out[k, i] = scale[i] * acc[k]
    return out


@njit(cache=True)
def newton_all(codes, table, x0, y0, bx, by, scale, max_step, stride, rows, iterations, tolerance):
    """Newton's method for θ − s α(θ) = β at every point (images.newton_polish's steps)."""
    n = x0.shape[0]
    xs = np.empty(n)
    ys = np.empty(n)
    err = np.empty(n)
    acc = np.zeros(7)
    tmp = np.zeros(7)
    for i in range(n):
        row = (i // stride) % rows
        x, y, s = x0[i], y0[i], scale[i]
        for _ in range(iterations):
            _sum_at(codes, table, row, x, y, acc, tmp)
            rx = bx[i] - (x - s * acc[0])
            ry = by[i] - (y - s * acc[1])
            if abs(rx) + abs(ry) < tolerance:
                break
            a11 = 1.0 - s * acc[3]
            a12 = -s * acc[4]
            a22 = 1.0 - s * acc[5]
            det = a11 * a22 - a12 * a12
            if abs(det) < 1e-14:
                det = math.copysign(1e-14, det)
            dx = (a22 * rx - a12 * ry) / det
            dy = (a11 * ry - a12 * rx) / det
            step = math.sqrt(dx * dx + dy * dy)
            shrink = min(1.0, max_step[i] / max(step, 1e-300))
            dx *= shrink
            dy *= shrink
            if math.isfinite(dx):
                x += dx
            if math.isfinite(dy):
                y += dy
        _sum_at(codes, table, row, x, y, acc, tmp)
        e = math.hypot(bx[i] - (x - s * acc[0]), by[i] - (y - s * acc[1]))
        xs[i] = x
        ys[i] = y
        err[i] = e if math.isfinite(e) else math.inf
    return xs, ys, err
