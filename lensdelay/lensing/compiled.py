"""Compiled lens kernels: every component's α, ψ, Hessian and κ fused in one pass per point.

The numpy formulas of :mod:`lensdelay.lensing.profiles` stay the reference; this module
evaluates the same formulas point by point in machine code (numba, ``cache=True``: compiled
once on first use and kept on disk, no compiler needed at install time). A lens is packed
once into a table — a kind code per component and its parameters (after the per-model work:
sin and cos of angles, b = θE √q, the shear's γ cos 2φ, ...) for each parameter row — and
one call loops over rows (walkers) × points × components with no temporaries, and Newton's
method for the images runs inside the same loop (:func:`newton_solve`).

Used automatically by :class:`lensdelay.lensing.lens.Lens` and
:func:`lensdelay.lensing.images.newton_polish` when numba is installed, the lens's every
component has a kernel and its parameters are one model or one model per row of the
coordinates (a sampler's walkers); otherwise the numpy path runs. The environment
variable ``LENSDELAY_COMPILED=0`` or :func:`disabled` turns the kernels off (the tests
compare both paths to 1e-12).

Each kernel cites the formula of its profile's class (the numpy docstrings give the
equations): power law, Tessore & Metcalf 2015, eqs. 13, 15 and 26-27 with Euler's
relation for the Hessian; isothermal multipole, ψ = r F(φ)/(1 − m²); cored isothermal
ellipsoid and the truncated one (their difference), Keeton 2001, eqs. 33-34; NFW, Wright &
Brainerd 2000, eq. 11, Golse & Kneib 2002, eqs. 7-9; point mass and SIS, Schneider, Ehlers
& Falco 1992, eqs. 8.32-8.36; shear and mass sheet, their quadratic potentials.
"""

from __future__ import annotations

import contextlib
import dataclasses
import functools
import math
import os

import numpy as np

from lensdelay.lensing import threads

__all__ = [
    "CODES",
    "SIMD_FRIENDLY",
    "LARGE",
    "WIDTH",
    "disabled",
    "enabled",
    "kernel_module",
    "series_factors",
    "pack",
    "RAW_FIELDS",
    "RowPacker",
    "attach_pack",
    "with_defaults",
    "evaluate",
    "newton_solve",
]


#: Kind codes of the kernels (the table's first column).
CODES = {
    "SIE": 1,
    "SIS": 2,
    "power_law": 3,
    "multipole": 4,
    "shear": 5,
    "sheet": 6,
    "NFW": 7,
    "point": 8,
    "truncated_isothermal": 9,
}
#: Kinds whose numpy formulas are a few vectorised transcendental calls: for one model on
#: more than LARGE points their numpy path is as fast as the kernel or faster
#: (benchmarks/bench_kernels.py); the power law's series and the multipoles' angles are not.
SIMD_FRIENDLY = {CODES[k] for k in ("SIE", "SIS", "shear", "sheet", "NFW", "point")}
LARGE = 32768
#: Parameters per component in the table before the power law's series factors.
WIDTH = 8

_state = {"off": False}


@contextlib.contextmanager
def disabled():
    """Run the block on the numpy path (the reference the kernels are tested against)."""
    before = _state["off"]
    _state["off"] = True
    try:
        yield
    finally:
        _state["off"] = before


def enabled() -> bool:
    """Whether the kernels are used: numba importable, not switched off."""
    if _state["off"] or os.environ.get("LENSDELAY_COMPILED", "1") == "0":
        return False
    return kernel_module() is not None


@functools.lru_cache(maxsize=1)
def kernel_module():
    """The compiled functions (numba imported on first use: no import-time cost)."""
    try:
        import numba  # noqa: F401
    except ImportError:
        return None
    from lensdelay.lensing import _kernels as k

    return k


# -- packing a lens into the table ------------------------------------------------------------
def _rows(a, shape):
    """A parameter array broadcast to the row shape and flattened."""
    return np.broadcast_to(np.asarray(a, dtype=float), shape).reshape(-1)


def _column(a, n, shape):
    """A parameter's values for the n entries of ``shape``, flattened (one value stays one)."""
    a = np.asarray(a, dtype=float)
    if a.size == n:
        return a.reshape(-1)
    if a.size == 1:
        return a.reshape(())
    return np.broadcast_to(a, shape).reshape(-1)


def _component_rows(kind: str, v: dict, shape) -> np.ndarray | None:
    """The table entries (entries of ``shape``, WIDTH) of one component with values ``v``.

    ``shape`` is the row shape, or (members,) + the row shape for a stack of members
    (all members' entries in one pass).
    """
    n = math.prod(shape)
    out = np.zeros((n, WIDTH))

    def put(col, value):
        out[:, col] = _column(value, n, shape)

    if kind in ("SIE", "power_law", "truncated_isothermal"):
        phi = np.deg2rad(np.asarray(v["position_angle"], dtype=float))
        q = np.asarray(v["axis_ratio"], dtype=float)
        put(0, v["x"])
        put(1, v["y"])
        put(2, np.sin(phi))
        put(3, np.cos(phi))
        put(4, q)
        put(5, np.asarray(v["einstein_radius"], dtype=float) * np.sqrt(q))  # b = θE √q
        if kind == "power_law":
            t = np.asarray(v["slope"], dtype=float) - 1.0  # t = γ − 1
            put(6, t)
            terms, factors = series_factors(_rows(q, shape), _rows(t, shape))
            out[:, 7] = terms
            out = np.hstack([out, factors])
        else:
            put(6, np.asarray(v["core"], dtype=float) / np.sqrt(q))  # s_K = s/√q
        if kind == "truncated_isothermal":
            put(7, np.asarray(v["cut"], dtype=float) / np.sqrt(q))
    elif kind == "multipole":
        put(0, v["x"])
        put(1, v["y"])
        m = np.asarray(v["order"], dtype=float)
        put(2, m)
        put(3, np.asarray(v["cosine"], dtype=float) / (1.0 - m * m))
        put(4, np.asarray(v["sine"], dtype=float) / (1.0 - m * m))
    elif kind == "shear":
        phi = np.deg2rad(2.0 * np.asarray(v["position_angle"], dtype=float))
        g = np.asarray(v["strength"], dtype=float)
        put(0, g * np.cos(phi))
        put(1, g * np.sin(phi))
    elif kind == "sheet":
        put(0, v["convergence"])
    elif kind == "NFW":
        put(0, v["x"])
        put(1, v["y"])
        put(2, v["kappa_s"])
        put(3, v["scale_radius"])
    elif kind in ("point", "SIS"):
        put(0, v["x"])
        put(1, v["y"])
        put(2, v["einstein_radius"])
    else:
        return None
    return out


def series_factors(q, t):
    """The power law's recurrence factors per model row (Tessore & Metcalf 2015, eqs. 26-27).

    Ω_n = −f (2n − 2 + t)/(2n + 2 − t) e^{2iφ} Ω_{n−1}, f = (1 − q)/(1 + q): the factors
    −f (2n − 2 + t)/(2n + 2 − t) depend on the model only, so they are computed once per
    row here, not per point. Each row takes N = ⌈ln 1e-16 / ln f⌉ + 1 terms, as the numpy
    path does. Returns (N per row, factors (rows, largest N), zero beyond a row's N).
    """
    kernels = kernel_module()
    if kernels is not None:  # the same numbers without numpy's temporaries (5x faster)
        return kernels.series_factors(
            np.ascontiguousarray(q, dtype=float), np.ascontiguousarray(t, dtype=float)
        )
    f = (1.0 - q) / (1.0 + q)
    terms = np.maximum(np.ceil(np.log(1e-16) / np.log(np.maximum(f, 1e-16))) + 1, 1)
    n = np.arange(1, int(terms.max()) + 1)
    factors = -f[:, None] * (2 * n - 2 + t[:, None]) / (2 * n + 2 - t[:, None])
    return terms, np.where(n[None, :] <= terms[:, None], factors, 0.0)


def _row_shape(shapes) -> tuple | None:
    """The parameters' common shape if it is () or (P, 1, ..., 1); else None."""
    try:
        shape = np.broadcast_shapes(*shapes) if shapes else ()
    except ValueError:
        return None
    if len(shape) and any(d != 1 for d in shape[1:]):
        return None
    return shape


def pack(lens):
    """(codes, table, row shape) of ``lens``, or None where a component has no kernel.

    ``table`` has shape (components, rows, WIDTH); a stack of cluster members becomes
    one entry per member. Cached on the lens (a lens is immutable).
    """
    cached = lens.__dict__.get("_compiled_pack", False)
    if cached is not False:
        return cached
    result = _pack(lens)
    object.__setattr__(lens, "_compiled_pack", result)
    return result


def _pack(lens):
    shapes = []
    members = []  # (kind, values dict with a leading member axis or None)
    for c in lens.components:
        if hasattr(c, "profile_class"):  # a stack of members
            kind = c.profile_class.kind
            values = dict(c.values())  # field names: TOML names for these kinds (not sheet)
            first = next(iter(values.values()))
            for f in dataclasses.fields(c.profile_class):  # what the stack left at defaults
                if f.name not in values and f.default is not dataclasses.MISSING:
                    values[f.name] = np.full(first.shape[0], float(f.default))
            shapes.append(first.shape[1:])
            members.append((kind, values, first.shape[0]))
        else:
            values = c.values()
            shapes += [np.shape(a) for a in values.values()]
            members.append((c.kind, values, None))
        if members[-1][0] not in CODES:
            return None
    shape = _row_shape(shapes)
    if shape is None:
        return None
    codes, blocks = [], []
    for kind, values, count in members:
        if count is None:
            blocks.append(_component_rows(kind, with_defaults(kind, values), shape))
            codes.append(CODES[kind])
        else:  # all members at once: (members × rows, width) -> one entry per member
            # a member axis first, then the row axes (members' own may be fewer)
            padded = {
                k: a.reshape((count,) + (1,) * (len(shape) + 1 - a.ndim) + a.shape[1:])
                for k, a in values.items()
            }
            block = _component_rows(kind, with_defaults(kind, padded), (count, *shape))
            blocks += list(block.reshape(count, -1, block.shape[1]))
            codes += [CODES[kind]] * count
    if not blocks:
        return np.zeros(0, dtype=np.int64), np.zeros((0, 1, WIDTH)), shape
    width = max(b.shape[1] for b in blocks)  # a power law's series factors widen its rows
    table = np.zeros((len(blocks), blocks[0].shape[0], width))
    for c, block in enumerate(blocks):
        table[c, :, : block.shape[1]] = block
    return np.asarray(codes, dtype=np.int64), table, shape


#: The raw parameters of each kind a :class:`RowPacker` gathers, in its order (TOML names).
RAW_FIELDS = {
    "SIE": ("x", "y", "position_angle", "axis_ratio", "einstein_radius", "core"),
    "power_law": ("x", "y", "position_angle", "axis_ratio", "einstein_radius", "slope"),
    "truncated_isothermal": (
        "x",
        "y",
        "position_angle",
        "axis_ratio",
        "einstein_radius",
        "core",
        "cut",
    ),
    "multipole": ("x", "y", "order", "cosine", "sine"),
    "shear": ("strength", "position_angle"),
    "sheet": ("convergence",),
    "NFW": ("x", "y", "kappa_s", "scale_radius"),
    "point": ("x", "y", "einstein_radius"),
    "SIS": ("x", "y", "einstein_radius"),
}
#: Where each kind's angle sits among its raw fields, and the factor on it (a shear's
#: table holds γ cos 2φ and γ sin 2φ).
_ANGLE = {
    "SIE": (2, 1.0),
    "power_law": (2, 1.0),
    "truncated_isothermal": (2, 1.0),
    "shear": (1, 2.0),
}


class RowPacker:
    """Packs one lens recipe for many parameter rows straight into the kernels' table.

    :func:`pack` reads a built lens component by component (a few dozen small numpy
    operations); a sampler builds a lens for its walkers several times a step, so for a
    recipe whose components are fixed this gathers every component's raw parameters
    from the rows and fills the table in two compiled calls (the angles' sines and
    cosines between them in numpy, as :func:`pack` takes them).
    The table is the one :func:`pack` makes of the same lens (tested equal to the bit).

    Parameters
    ----------
    components : sequence of (kind, dict)
        Each component's kind and, for each name of :data:`RAW_FIELDS` [kind], either
        ``("column", i)`` (column i of the rows) or ``("value", v)`` (held fixed).
    """

    def __init__(self, components):
        components = list(components)
        self.codes = np.array([CODES[kind] for kind, _ in components], dtype=np.int64)
        width = max(len(RAW_FIELDS[kind]) for kind, _ in components)
        self.constants = np.zeros((len(components), width))
        targets, columns = [], []
        self.angle_field = np.zeros(len(components), dtype=np.int64)
        self.angle_factor = np.zeros(len(components))  # 0: no angle
        for c, (kind, fields) in enumerate(components):
            for f, name in enumerate(RAW_FIELDS[kind]):
                how, value = fields[name]
                if how == "column":
                    targets.append((c, f))
                    columns.append(int(value))
                else:
                    self.constants[c, f] = float(value)
            if kind in _ANGLE:
                self.angle_field[c], self.angle_factor[c] = _ANGLE[kind]
        self.component = np.array([t[0] for t in targets], dtype=np.int64)
        self.field = np.array([t[1] for t in targets], dtype=np.int64)
        self.columns = np.array(columns, dtype=np.int64)
        self.series = [c for c, (kind, _) in enumerate(components) if kind == "power_law"]

    def __call__(self, rows: np.ndarray):
        """(codes, table, row shape) for parameter rows (P, n), as :func:`pack` returns.

        The row shape is (P, 1): every parameter one value per row, as the likelihood's
        lenses hold them.
        """
        rows = np.ascontiguousarray(rows, dtype=float)
        n_rows = rows.shape[0]
        kernels = kernel_module()
        raw, angle = kernels.gather_rows(
            self.constants,
            self.component,
            self.field,
            self.columns,
            rows,
            self.angle_field,
            self.angle_factor,
        )
        # the angles' sines and cosines in numpy, as _component_rows takes them: same bits
        phi = np.deg2rad(angle)
        # a power law's series factors widen the table: worked out first, from q and
        # t = γ − 1 as _component_rows computes them
        series = [
            (c, *series_factors(np.ascontiguousarray(raw[c, :, 3]), raw[c, :, 5] - 1.0))
            for c in self.series
        ]
        extra = max((factors.shape[1] for _, _, factors in series), default=0)
        table = np.zeros((len(self.codes), n_rows, WIDTH + extra))
        kernels.fill_table(self.codes, raw, np.sin(phi), np.cos(phi), table)
        for c, terms, factors in series:
            table[c, :, 7] = terms
            table[c, :, WIDTH : WIDTH + factors.shape[1]] = factors
        return self.codes, table, (n_rows, 1)


def attach_pack(lens, packed) -> None:
    """Give ``lens`` its packed table (from a :class:`RowPacker`): :func:`pack` then reuses it."""
    object.__setattr__(lens, "_compiled_pack", packed)


def with_defaults(kind, values):
    """TOML-named values; a stack's member dict uses field names (same for these kinds)."""
    v = dict(values)
    if kind == "sheet" and "convergence" not in v:
        v["convergence"] = v.get("convergence_value", 0.0)
    v.setdefault("x", 0.0)
    v.setdefault("y", 0.0)
    return v


def _layout(shape, x, y, *others):
    """Broadcast coordinates (and others) with the row shape; the flat row index stride.

    Returns (output shape, flat arrays, stride, rows) with row = (i // stride) % rows
    for flat output index i, or None when the rows do not line up with the output. A
    single value stays one element long (the kernels read element 0 of such an array):
    no copy of a scalar scale or step over every point.
    """
    arrays = [np.asarray(a, dtype=float) for a in (x, y, *others)]
    try:
        out_shape = np.broadcast(np.empty(shape), *arrays).shape
    except ValueError:
        return None
    rows = int(shape[0]) if len(shape) else 1
    size = math.prod(out_shape)
    if rows == 1:  # one model: every point in one block
        stride = size
    else:
        stride = math.prod(out_shape[len(out_shape) - len(shape) + 1 :])
    flat = []
    for a in arrays:
        if a.size == 1 and size != 1:
            a = a.reshape(1)
        elif a.shape == out_shape:
            a = np.ascontiguousarray(a).reshape(-1)
        else:
            a = np.ascontiguousarray(np.broadcast_to(a, out_shape)).reshape(-1)
        # one array type for the kernels: a read-only input would be another numba
        # signature, compiled again (seconds) the first time it is met
        flat.append(a if a.flags.writeable else a.copy())
    return out_shape, flat, max(stride, 1), rows


def _packed(lens):
    """(codes, table, row shape) of ``lens`` when the kernels are on and take it; else None."""
    return pack(lens) if enabled() else None


def _prepared(lens, *arrays):
    """(codes, table, output shape, flat arrays, stride, rows), or None (numpy path)."""
    packed = _packed(lens)
    if packed is None:
        return None
    codes, table, shape = packed
    laid = _layout(shape, *arrays)
    return None if laid is None else (codes, table, *laid)


def evaluate(lens, x, y, scale=1.0, potential: bool = True):
    """(α_x, α_y, ψ, ψ_xx, ψ_xy, ψ_yy, κ) of ``lens`` at (x, y), or None (numpy path).

    All seven times ``scale`` (a family's deflection scale, scalar or broadcastable).
    ``potential`` False leaves ψ out (0) and skips its costly terms.
    """
    laid = _prepared(lens, x, y, scale)
    if laid is None:
        return None
    codes, table, out_shape, (fx, fy, fs), stride, rows = laid
    if rows == 1 and stride > LARGE and set(codes.tolist()) <= SIMD_FRIENDLY:
        # one model on a large grid of a lens numpy does well: its vectorised arctan,
        # arctanh and square roots (SIMD) beat the kernel's scalar calls per point
        return None
    size = math.prod(out_shape)
    out = np.empty((7, size))
    kernel, want = kernel_module().evaluate_all, bool(potential)
    threads.run_split(
        lambda lo, hi: kernel(codes, table, fx, fy, fs, stride, rows, want, lo, hi, out),
        size,
        size * len(codes),
    )
    return tuple(out[k].reshape(out_shape) for k in range(7))


def block_deflections(lens, x, y, scale, blocks: int):
    """(α_x, α_y), each (blocks + 1, P, I), of a lens of (blocks + 1)·P rows at points (P, I).

    The lens's rows are blocks of P: block b's row r is row r's lens shifted in a few
    parameters (a forward-difference Jacobian), the last block unshifted; every block
    is evaluated at the same points ``x``, ``y`` (P, I), with ``scale`` one number or
    one per lens row ((blocks + 1)·P, 1), as a family of free redshift has. Components
    a block leaves unchanged are not evaluated again (values bit for bit those of
    :func:`evaluate` over the tiled points). None: the numpy path (kernels off, or a
    lens or shapes they cannot take).
    """
    packed = _packed(lens)
    if packed is None:
        return None
    codes, table, shape = packed
    x = np.asarray(x, dtype=float)
    n_rows, n_points = x.shape
    n_lens = (blocks + 1) * n_rows
    scale = np.array(scale, dtype=float).reshape(-1)  # fresh, writeable
    if tuple(shape) != (n_lens, 1) or np.shape(y) != x.shape or scale.size not in (1, n_lens):
        return None
    fx, fy = (np.array(a, dtype=float).reshape(-1) for a in (x, y))
    out = np.empty((2, blocks + 1, n_rows, n_points))
    kernel = kernel_module().block_deflections

    def rows_of(lo, hi):
        kernel(codes, table, fx, fy, scale, blocks, n_rows, n_points, lo, hi, out)

    # each point's components once, then the changed ones per block: about one lens
    # evaluation plus a little per block
    work = n_rows * n_points * len(codes) * 2
    threads.run_split(rows_of, n_rows, work)
    return out[0], out[1]


def newton_solve(
    lens, x, y, beta_x, beta_y, scale, iterations, max_step, tolerance, at_roots: bool = False
):
    """Newton's method for β(θ) = β_s in the kernel, or None (numpy path).

    Same steps, limits and stopping rule as :func:`lensdelay.lensing.images.newton_polish`;
    every point is solved to convergence or the iteration budget inside one call. Returns
    (x, y, error), and with ``at_roots`` also ψ, ψ_xx, ψ_xy, ψ_yy there (times the scale),
    as :func:`evaluate` gives them.
    """
    step = np.inf if max_step is None else max_step
    laid = _prepared(lens, x, y, beta_x, beta_y, scale, step)
    if laid is None:
        return None
    codes, table, out_shape, (fx, fy, fbx, fby, fs, fstep), stride, rows = laid
    size = math.prod(out_shape)
    out = np.empty((7 if at_roots else 3, size))
    kernel, iterations, tolerance = kernel_module().newton_all, int(iterations), float(tolerance)

    def points(lo, hi):
        kernel(
            codes, table, fx, fy, fbx, fby, fs, fstep, stride, rows, iterations, tolerance,
            lo, hi, out,
        )  # fmt: skip

    # a few steps per image, each a lens evaluation with its Hessian
    work = size * len(codes) * 4
    threads.run_split(points, size, work)
    return tuple(row.reshape(out_shape) for row in out)
