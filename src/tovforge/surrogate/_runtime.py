"""Prediction arithmetic of every surrogate, with NumPy (or any array-API namespace) only.

This module is the single implementation of how a trained surrogate turns
parameters into predictions.  The library's models call it, and the exporter
copies its source verbatim into each standalone evaluator, so the two cannot
drift apart.  It must therefore import nothing but ``math``; the array
namespace ``xp`` is passed in (NumPy, or the namespace of the caller's arrays).

A model is a :class:`Model`: its arrays (plain data, never written to), the
name of its method (the runtime part that evaluates it, :data:`PARTS`), its
outputs, and a :class:`Cache` of what the runtime derives from the arrays.
The arrays:

``lo, hi`` (d,)
    Parameter box; inputs are mapped to ``x = (theta - lo) / (hi - lo)``.
``warp_log`` (d,) 0/1, ``warp_shift``, ``wlo``, ``whi`` (d,), optional
    Flagged parameters enter as ``ln(theta - warp_shift)``; ``x`` then maps
    the warped box ``[wlo, whi]`` (see :func:`unit_inputs`).
``input_scale`` (d,), optional
    ``x`` is multiplied by it (RBF models: an anisotropic metric).
``out_mean, out_scale`` (n_out,)
    Outputs are standardised: ``y = out_mean + out_scale * z``.
``trend_powers`` (n_terms, d), ``trend_coef`` (n_terms, n_out)
    Polynomial trend in ``x``, fitted by least squares.
``curve_slices`` (n_curves, 2)
    The output columns of each curve.
``u_nodes`` (n_u,), ``spline_c`` (4, n_u - 1, n_u)
    Nodes of the sequence coordinate ``u = sqrt(1 - M/M_max)`` and the
    cubic-spline cardinal coefficients: the not-a-knot cubic spline through
    node values ``v`` is ``sum_p spline_c[p, j] . v (u - u_j)^(3 - p)`` on
    interval ``j``.
``loo_residual`` (n_train, n_out), ``error_scale`` (n_out,), optional
    Each training point's leave-one-out residual in the output units, and
    the calibration factor of the error model built on them
    (:func:`error_model_std`; training points ``X``, or ``error_points`` when
    measured errors at more points join them).  Models with them have a
    sigma whatever their method; a GP adds its own in quadrature.
and those of the method:

``"gp"``
    ``X`` (n, d), ``alpha`` (n, n_out), ``group_bounds`` (n_groups + 1,):
    outputs ``group_bounds[g]:group_bounds[g+1]`` share kernel ``g`` with
    ``length`` (n_groups, d), ``amp2``, ``noise`` (n_groups,), optionally
    ``group_kernel`` (n_groups,: the first group with the same kernel; groups
    that share hyperparameters share one kernel evaluation) and
    ``resid_scale`` (n_out,: turns the kernel's sigma into standardised output
    units; the residual's scale times a leave-one-out calibration factor);
    Matern-5/2 kernels with one length scale per parameter, on the residual
    of the trend.
``"rbf"``
    ``X`` (n, d), ``alpha`` (n, n_out); the polyharmonic kernel r^5.
``"tensor"``
    ``knots`` (d, k) padded, ``n_knots`` (d,), ``coef`` (n_1..n_d flattened,
    n_out), ``coef_shape`` (d,); tensor-product cubic B-splines.
``"local"``
    ``X`` (n, d) unit inputs; metric groups of output columns
    ``group_columns`` (G + 1,), each with its stretch ``group_scale`` (G, d)
    and cells ``cell_counts`` (G, d), ``cell_edges``, ``cell_half`` (G, d,
    K + 1), numbered from ``group_patches[g]``; per cell ``p`` the rows
    ``patch_rows[p]:patch_rows[p+1]`` of ``patch_index`` (training points) and
    ``alpha`` (r^5 weights), a polynomial ``patch_coef`` (P, n_terms, n_out) in
    ``(x - patch_centre[p]) / patch_scale[p]`` with ``local_powers`` (see
    ``surrogate/_local.py``).  A partition of unity blends the cells a row
    touches (:func:`local_cells`).  NumPy only.
``"sided"``
    Two-sided splines of transition families (``surrogate/_sided.py``): its
    own trend is zero and ``out_mean``/``out_scale`` 0/1; ``X`` (n, d) the
    training points in the plain unit box (no warp, no stretch),
    ``side_band`` (1,); an ``"rbf"`` model's arrays for each side under the
    prefixes :data:`SIDE_PREFIXES` (with the transition mass as one more
    output), for the base family under :data:`BASE_PREFIX` (its box the base
    parameters'), and margin models under :data:`MARGIN_PREFIXES`
    (:func:`sided_choice` picks each row's side); the far side's nodes of t
    ``t_nodes`` (n_u,) and their spline coefficients ``t_c``.  Its outputs:
    the side's (the usual layout), M_t, the base model's (the usual layout)
    and a side flag (:func:`_sided_curve` reads them).  NumPy only.

A new method is a function ``part(xp, m, x, grad, columns) -> (z, dz)`` here,
an entry in :data:`PARTS` (and in :data:`STD` if it has a predictive sigma),
and an entry in the library's table of kinds (``surrogate/_kinds.py``).
"""

import math

SQRT5 = math.sqrt(5.0)
LN10 = math.log(10.0)
MSUN_KM = 1.3271244e26 / 2.99792458e10**2 / 1e5  # GM_sun/c^2 in km (IAU 2015 nominal)
#: Kernel models evaluate at most this many (query, training point) pairs at a
#: time: the temporaries then stay in cache and memory stays bounded for any batch.
PAIRS_PER_CHUNK = 1 << 15
#: The output every model has: the maximum mass (queries at a mass go through it).
MASS_MAX = "mass_max_msun"


#: Default limits of the trust flag of the queries (``Estimate.trusted``; see the query contract), in the
#: quantity's unit or relative (``_rel``).  The sigma limits are the accuracy every model must reach at the
#: 95th percentile (issue 13: 0.01 Msun, 50 m, 2 %); k2's is Lambda's 2 % and 50 m at 12 km in quadrature
#: (sqrt(0.02^2 + (5 x 0.05 / 12)^2) = 0.029).  A star is not trusted closer to the emulated M_max than
#: ``max(mass_margin_msun, mass_margin_sigmas x sigma_M)``: no emulated star above the true M_max.
TRUST_LIMITS = {"mass_max_msun": 0.01, "radius_km": 0.05, "tidal_deformability_rel": 0.02,
                "moment_of_inertia_rel": 0.02, "k2_rel": 0.03, "mass_margin_msun": 0.02, "mass_margin_sigmas": 3.0}


def _is_numpy(xp) -> bool:
    return getattr(xp, "__name__", "") == "numpy"


class Cache:
    """What the runtime derives from a model's arrays, made on first use and kept per model.

    Arrays are kept only under NumPy: under another namespace (e.g. inside
    jax.jit) a cached array could be a tracer of an earlier call, so
    :meth:`array` makes it anew every time.  Plain Python values (index plans)
    are kept under every namespace.
    """

    def __init__(self):
        self._store = {}

    def array(self, xp, name, key, make):
        """``make()``, kept under ``(name, key)`` (NumPy only)."""
        if not _is_numpy(xp):
            return make()
        return self.plain(name, key, make)

    def plain(self, name, key, make):
        """``make()``, kept under ``(name, key)`` whatever the namespace (plain Python values only)."""
        store = self._store.setdefault(name, {})
        if key not in store:
            store[key] = make()
        return store[key]


class Model:
    """A trained surrogate as the runtime sees it.

    Parameters
    ----------
    arrays : dict of arrays
        The model's numbers (see the module docstring); read, never written.
    method : str
        The runtime part that evaluates it (a key of :data:`PARTS`).
    outputs : sequence of tuple
        One ``(name, quantity, level, transform, query, start, stop)`` per
        emulated output, in column order: the output's name in the model, the
        quantity it is (its unit is the quantity's), ``"sequence"`` (one value
        per EOS) or ``"star"`` (a curve at the nodes of u), how the model
        transformed it (``"identity"``, ``"ln"``, ``"log10"``; M_max must be
        ``"identity"``), the query that answers it (at a mass, for curves) and
        its columns ``start:stop``.
    parameters : sequence of str
        Parameter names, in the order of the columns of theta.
    bounds : sequence of (float, float)
        The trained box (plain floats, for messages).
    mass_floor_msun : float
        The floor of M_max of the training grid.
    trust_limits : dict, optional
        The limits of the trust flag (:data:`TRUST_LIMITS` by default); kept by
        reference, so models made by :meth:`replace` share them.

    Indexing (``m["X"]``, ``m.get("warp_log")``) reads the arrays; the
    :class:`Cache` in ``m.cache`` holds what the runtime derives from them.
    """

    def __init__(self, arrays, method=None, outputs=(), parameters=(), bounds=(), mass_floor_msun=0.0,
                 trust_limits=None):
        self.arrays = arrays
        self.trust_limits = dict(TRUST_LIMITS) if trust_limits is None else trust_limits
        self.method = method
        self.outputs = tuple(tuple(o) for o in outputs)
        self.parameters = tuple(parameters)
        self.bounds = tuple((float(a), float(b)) for a, b in bounds)
        self.mass_floor_msun = float(mass_floor_msun)
        self.cache = Cache()
        self.i_mass_max = next((int(o[5]) for o in self.outputs if o[1] == MASS_MAX), None)

    def __getitem__(self, name):
        return self.arrays[name]

    def get(self, name, default=None):
        return self.arrays.get(name, default)

    def replace(self, **arrays):
        """The same model with some arrays replaced (and a cache of its own)."""
        return Model({**self.arrays, **arrays}, self.method, self.outputs, self.parameters, self.bounds,
                     self.mass_floor_msun, self.trust_limits)


def _column_differences(xp, x, X):
    """``x_i - X_i`` for each parameter i, as d arrays of shape (n, N).

    One contiguous (n, N) array per parameter: reductions over a short trailing
    axis of length d are several times slower in NumPy, and the sum of squares
    accumulated in parameter order equals ``sum(diff**2, axis=-1)`` bit for bit.
    """
    return [x[:, i : i + 1] - X[:, i] for i in range(X.shape[1])]


def _chunked(xp, fn, x, n_train, *args):
    """Apply ``fn(xp, x_chunk, *args)`` to row chunks of ``x`` and join the results.

    ``fn`` returns a tuple of arrays (or None) with the query rows on axis 0.
    """
    step = max(1, PAIRS_PER_CHUNK // max(1, n_train))
    n = x.shape[0]
    if n <= step:
        return fn(xp, x, *args)
    pieces = [fn(xp, x[s : s + step], *args) for s in range(0, n, step)]
    return tuple(None if p[0] is None else xp.concat(list(p), axis=0) for p in zip(*pieces))


def unit_inputs(xp, m, theta):
    """Map parameters to the unit cube; returns ``(x, inside)``.

    Without a warp ``x = (theta - lo) / (hi - lo)``.  Parameters flagged in
    ``warp_log`` enter as ``ln(theta - warp_shift)``, mapped from the warped
    box ``[wlo, whi]``; ``inside`` always tests the parameter box itself.
    """
    flags = m.get("warp_log")
    if flags is None:
        x = (theta - m["lo"]) / (m["hi"] - m["lo"])
        inside = xp.all((x >= 0.0) & (x <= 1.0), axis=-1)
    else:
        inside = xp.all((theta >= m["lo"]) & (theta <= m["hi"]), axis=-1)
        cols = []
        for i in range(theta.shape[-1]):
            t = theta[:, i]
            if int(flags[i]):
                s = float(m["warp_shift"][i])
                t = xp.log(xp.where(t > s, t - s, 1.0))  # below the shift: outside the box anyway
            cols.append(t)
        x = (xp.stack(cols, axis=-1) - m["wlo"]) / (m["whi"] - m["wlo"])
    scale = m.get("input_scale")
    if scale is not None:  # anisotropic RBF: parameter i spans [0, input_scale[i]]
        x = x * scale
    return x, inside


def input_span(xp, m, theta):
    """``d theta / d x`` per parameter: (d,) without a warp, (n, d) with one."""
    flags = m.get("warp_log")
    if flags is None:
        span = m["hi"] - m["lo"]
    else:
        width = m["whi"] - m["wlo"]
        cols = []
        for i in range(theta.shape[-1]):
            c = width[i] * xp.ones(theta.shape[:1], dtype=theta.dtype)
            if int(flags[i]):
                c = c * (theta[:, i] - float(m["warp_shift"][i]))
            cols.append(c)
        span = xp.stack(cols, axis=-1)
    scale = m.get("input_scale")
    return span if scale is None else span / scale


def trend_plan(powers):
    """How :func:`trend_terms` gathers the factors of each term: ``(top power, flat indices)`` (plain Python)."""
    n_terms, d = powers.shape
    top = max([int(powers[t, i]) for t in range(n_terms) for i in range(d)] + [0])
    return top, [i * (top + 1) + int(powers[t, i]) for t in range(n_terms) for i in range(d)]


def _trend(xp, m, x, grad):
    """Polynomial trend terms of model ``m`` (n, n_terms) and, if asked, their x-derivatives (n, n_terms, d)."""
    powers = m["trend_powers"]
    # the gather plan is plain Python, made once per model (it costs more than the arithmetic)
    plan = m.cache.plain("trend_plan", None, lambda: trend_plan(powers))
    return trend_terms(xp, powers, plan, x, grad)


def trend_terms(xp, powers, plan, x, grad):
    """Monomials ``powers`` (n_terms, d) at x (n, d): (n, n_terms) and, with ``grad``, (n, n_terms, d).

    ``plan`` is :func:`trend_plan` of ``powers``.
    """
    n_terms, d = powers.shape
    # every term at once: the powers x_i^p (p = 0..top, by the same integer powers as a
    # term-by-term loop), the factors of each term gathered, multiplied in parameter order
    top = plan[0]
    n = x.shape[0]
    XP = xp.stack([xp.ones(x.shape, dtype=x.dtype)] + [x**p for p in range(1, top + 1)], axis=-1)  # (n, d, top+1)
    pick = xp.asarray(plan[1], dtype=xp.int64)
    F = xp.prod(xp.reshape(xp.take(xp.reshape(XP, (n, d * (top + 1))), pick, axis=1), (n, n_terms, d)), axis=-1)
    dcols = []
    for t in range(n_terms if grad else 0):
        dd = []
        for i in range(d):
            p = int(powers[t, i])
            if p == 0:
                dd.append(xp.zeros(x.shape[0], dtype=x.dtype))
                continue
            g = p * x[:, i] ** (p - 1)
            for j in range(d):
                q = int(powers[t, j])
                if j != i and q:
                    g = g * x[:, j] ** q
            dd.append(g)
        dcols.append(xp.stack(dd, axis=-1))
    dF = xp.stack(dcols, axis=1) if grad else None
    return F, dF


def _folded_weights(xp, m):
    """The GP weights times each output's kernel amplitude (N, n_out), computed once per model."""
    def make():
        gb = [int(v) for v in m["group_bounds"]]
        amp = xp.concat([xp.full((gb[g + 1] - gb[g],), float(m["amp2"][g]), dtype=m["X"].dtype)
                         for g in range(len(gb) - 1)])
        return m["alpha"] * amp

    return m.cache.array(xp, "folded_alpha", None, make)


def _weight_block(xp, m, weights, name, a, b):
    """Columns ``a:b`` of kernel weights (``weights``, cached under ``name``), contiguous.

    A query multiplies kernel rows by a block of output columns; a contiguous
    copy reads a third of the memory a strided slice does.  Cached for NumPy.
    """
    if not _is_numpy(xp):
        return weights[:, a:b]
    # * 1.0: a C-ordered copy, the same numbers (NumPy 1 lacks asarray(copy=))
    return m.cache.array(xp, name, (a, b), lambda: weights[:, a:b] * 1.0)


def _cached(xp, m, name, key, make):
    """``make()`` kept in the model's cache (NumPy only); made anew for a plain dict of arrays (fits)."""
    cache = getattr(m, "cache", None)
    return make() if cache is None else cache.array(xp, name, key, make)


def kernel_stack(xp, m, kernels):
    """What the Matern kernels ``kernels`` (kernel groups) need, stacked on a leading axis G; cached for NumPy.

    A dict: ``s = sqrt5 / l`` (G, d); the training points scaled by it and
    transposed, ``bT`` (G, d, N) (C-ordered under NumPy: BLAS multiplies a
    row by it 2-3 times faster than by the transposed view), and their
    squared norms ``b2`` (G, 1, N); ``inv2 = 1 / l^2`` (G, d) and ``w``, the
    same made as the sigma makes it; ``length`` (G, 1, 1, d); ``amp2``
    (G, 1, 1) and the diagonal ``jitter`` (G, 1, 1, 1) of the local GP.
    """
    def make():
        pick = xp.asarray(list(kernels), dtype=xp.int64)
        length = xp.take(m["length"], pick, axis=0)
        inv = 1.0 / length
        s = SQRT5 * inv
        b = m["X"][None, :, :] * s[:, None, :]  # (G, N, d)
        bT = xp.permute_dims(b, (0, 2, 1))
        amp2 = xp.take(m["amp2"], pick, axis=0)
        noise = xp.take(m["noise"], pick, axis=0)
        XT = xp.permute_dims(m["X"], (1, 0))
        b2 = xp.sum(b * b, axis=-1)[:, None, :]
        aug = None
        if _is_numpy(xp):
            bT, XT = xp.ascontiguousarray(bT), xp.ascontiguousarray(XT)
            aug = augmented_points(xp, bT, b2)  # (G, d + 2, N), see scaled_distances
        return {"s": s, "bT": bT, "b2": b2, "aug": aug, "inv2": inv * inv,
                "w": 1.0 / (length * length), "XT": XT,
                "invT": xp.reshape(xp.permute_dims(inv, (1, 0)), (inv.shape[1], inv.shape[0], 1, 1)),
                "amp2": xp.reshape(amp2, (-1, 1, 1)), "jitter": xp.reshape(noise + 1e-10 * amp2, (-1, 1, 1, 1))}

    return _cached(xp, m, "kernel_stack", tuple(kernels), make)


def scaled_distances(xp, x, k):
    """``q = 5 r^2`` between rows x (n, d) and the training points in the metric of each kernel of ``k``, (G, n, N).

    5 r^2 = |a|^2 + |b|^2 - 2 a.b with a = sqrt5 x / l, b = sqrt5 X / l: one
    matrix product per kernel instead of d passes.  The cancellation costs
    ~1e-16 |a|^2 absolute in r^2, where the kernel is flat (k = 1 - 5 r^2 / 6
    + ...): below the model's own rounding noise (~1e-8, see the exporter's
    report); each kernel is its own product, so a query's bits do not depend
    on which other kernels it reads.  ``-2 a``: scaling by a power of two is
    exact and saves a pass over q.
    """
    a = x[None, :, :] * k["s"][:, None, :]  # (G, n, d)
    if _is_numpy(xp):
        return xp.matmul(augmented_rows(xp, a), k["aug"])  # (G, n, d + 2) by [b^T; |b|^2; 1]
    q = xp.matmul(a * -2.0, k["bT"])
    q += xp.sum(a * a, axis=-1)[:, :, None]
    q += k["b2"]
    return q


def matern_values(xp, q, grad):
    """Matern-5/2 rows k / amp2 from ``q = 5 r^2`` (in place); for gradients ``c = -(5/3)(1 + sqrt5 r) e^(-sqrt5 r)``.
    """
    # a rounding-level negative 5 r^2 (see scaled_distances) counts as its size, ~1e-16
    q = xp.abs(q, out=q) if _is_numpy(xp) else xp.abs(q)
    msr = xp.sqrt(q)
    msr *= -1.0  # -sqrt(5) r
    e = xp.exp(msr)
    c = None
    if grad:
        c = (1.0 - msr) * e
        c *= -5.0 / 3.0
    q *= 1.0 / 3.0  # (5/3) r^2
    q -= msr
    q += 1.0
    q *= e  # (1 + sqrt5 r + 5 r^2 / 3) exp(-sqrt5 r)
    return q, c


def matern_gradients(xp, x, X, k, c):
    """d/dx_i of Matern rows, ``c (x_i - X_i) / l_i^2``: d arrays (G, n, N); ``c`` from :func:`matern_values`."""
    G = k["inv2"].shape[0]
    return [c * ((x[:, i : i + 1] - X[:, i])[None, :, :] * xp.reshape(k["inv2"][:, i], (G, 1, 1)))
            for i in range(x.shape[1])]


def _matern(xp, x, m, groups, grad):
    """Matern-5/2 kernel rows k(x, X) / amp2 of the given kernel groups at once, (G, n, N).

    The amplitude is folded into the weights (see :func:`_folded_weights`).
    With ``grad``, also the d arrays (G, n, N) of the derivatives d/dx_i.
    """
    k = kernel_stack(xp, m, groups)
    q, c = matern_values(xp, scaled_distances(xp, x, k), grad)
    return q, (matern_gradients(xp, x, m["X"], k, c) if grad else None)


def _points_of(xp, m, name):
    """The points ``m[name]`` (N, d) transposed (d, N) (C-ordered under NumPy) and their squared norms (1, N);
    cached under ``name``."""
    def make():
        X = m[name]
        XT = xp.permute_dims(X, (1, 0))
        if _is_numpy(xp):
            XT = xp.ascontiguousarray(XT)
        return XT, xp.reshape(xp.sum(X * X, axis=-1), (1, -1))

    return _cached(xp, m, f"points:{name}", None, make)


def rbf_points(xp, m):
    """The training points transposed (d, N) (C-ordered under NumPy) and their squared norms (1, N); cached."""
    return _points_of(xp, m, "X")


def polyharmonic_rows(xp, x, XT, X2, grad, aug=None):
    """r^5 rows (n, N) at rows x from the training points ``XT`` (d, N) and ``X2`` (1, N); with ``grad`` d(r^5)/dx_i.

    r^2 = |x|^2 + |X|^2 - 2 x.X by one matrix product (see
    :func:`scaled_distances`; r^5 is flat where the cancellation bites).
    ``aug`` (d + 2, N), from :func:`rbf_augmented`: the same sum as one
    product of ``[-2 x, 1, |x|^2]`` by ``[X^T; |X|^2; 1]`` (NumPy, without
    gradients: two passes less over the (n, N) rows, which set the cost of a
    batch); the root is then taken of ``|r^2|``, a rounding-level negative r^2
    giving r^5 ~ 1e-40 instead of 0 (one pass instead of a clip at zero).
    """
    if aug is not None and not grad and _is_numpy(xp):
        q = xp.matmul(augmented_rows(xp, x), aug)
        r = xp.abs(q)
        xp.sqrt(r, out=r)
        q *= q
        q *= r
        return q, None
    q = xp.matmul(x * -2.0, XT)
    q += xp.sum(x * x, axis=-1)[:, None]
    q += X2
    q = xp.where(q > 0.0, q, 0.0)
    r = xp.sqrt(q)
    phi = q * q
    phi *= r
    dphi = None
    if grad:
        c = 5.0 * q * r
        dphi = [c * (x[:, i : i + 1] - XT[i]) for i in range(x.shape[1])]
    return phi, dphi


def augmented_rows(xp, x):
    """``[-2 x, 1, |x|^2]`` (..., d + 2) of rows x (..., d); NumPy only (it writes into a new array).

    Times :func:`augmented_points` it gives the squared distances ``|x|^2 +
    |X|^2 - 2 x.X`` as one matrix product: two passes fewer over the (rows,
    points) result than adding the norms afterwards.
    """
    d = x.shape[-1]
    xa = xp.empty(x.shape[:-1] + (d + 2,), dtype=x.dtype)
    xa[..., :d] = x
    xa[..., :d] *= -2.0
    xa[..., d] = 1.0
    xa[..., d + 1] = xp.sum(x * x, axis=-1)
    return xa


def augmented_points(xp, XT, X2):
    """``[X^T; |X|^2; 1]`` (..., d + 2, N) from points ``XT`` (..., d, N) and their squared norms (..., 1, N)."""
    return xp.concat([XT, X2, xp.ones_like(X2)], axis=-2)


def rbf_augmented(xp, m, name="X"):
    """:func:`augmented_points` of the points ``m[name]`` (C-ordered; for :func:`polyharmonic_rows`); cached."""
    return _cached(xp, m, f"points:augmented:{name}", None, lambda: augmented_points(xp, *_points_of(xp, m, name)))


def _polyharmonic(xp, x, X, grad):
    """r^5 rows (n, N) and optionally their x-derivatives (n, N, d)."""
    diffs = _column_differences(xp, x, X)
    phi, dphi = _polyharmonic_columns(xp, diffs, grad)
    return phi, (xp.stack(dphi, axis=-1) if grad else None)


def _polyharmonic_columns(xp, diffs, grad):
    """r^5 rows (n, N) from column differences; with ``grad`` the d arrays d(r^5)/dx_i."""
    r2 = diffs[0] * diffs[0]
    for s in diffs[1:]:
        r2 = r2 + s * s
    r = xp.sqrt(r2)
    phi = r2 * r2 * r
    dphi = None
    if grad:
        c = 5.0 * r2 * r
        dphi = [c * s for s in diffs]
    return phi, dphi


def bspline_tables(xp, m, deg=3):
    """The knot tables of a tensor-spline model, made once (cached for NumPy): flat padded knots ``tx``,
    the ends ``lo``, ``hi`` of each axis, and as plain values ``K``, ``n_knots``, ``shape``, ``deg``."""
    def make():
        knots, n_knots = m["knots"], m["n_knots"]
        shape = [int(v) for v in m["coef_shape"]]
        d, K = knots.shape
        flat = [float(knots[a, j]) if j < int(n_knots[a]) else 0.0 for a in range(d) for j in range(K)]
        return {"tx": xp.asarray(flat, dtype=xp.float64),
                "lo": xp.asarray([float(knots[a, deg]) for a in range(d)], dtype=xp.float64),
                "hi": xp.asarray([float(knots[a, shape[a]]) for a in range(d)], dtype=xp.float64),
                "K": int(K), "n_knots": [int(v) for v in n_knots], "shape": shape, "deg": deg}

    return _cached(xp, m, "bspline_tables", None, make)


def _bspline_local(xp, T, x):
    """The deg + 1 B-splines of each axis that do not vanish at points x (n, d).

    ``T``: :func:`bspline_tables` (padded knot vectors with their counts).
    Returns the index of the first of them (n, d), and their values and
    x-derivatives (each a list of deg + 1 arrays (n, d)).  De Boor's triangle on
    the knot interval of each point (Piegl & Tiller 1997, The NURBS Book, A2.2
    and A2.3), vectorised over points and axes: the work per point does not grow
    with the number of knots.
    """
    tx, K, n_coef, deg = T["tx"], T["K"], T["shape"], T["deg"]
    d = x.shape[1]
    lo, hi = T["lo"], T["hi"]
    xc = xp.clip(x, lo, hi - 1e-12 * (hi - lo))
    cols = []
    for a in range(d):  # the knot interval t[i] <= x < t[i + 1], per axis
        ta = tx[a * K : a * K + T["n_knots"][a]]
        cols.append(xp.clip(xp.searchsorted(ta, xc[:, a], side="right") - 1, deg, n_coef[a] - 1) + a * K)
    i = xp.stack(cols, axis=-1)  # (n, d), offsets into tx

    def t(offset):
        return xp.reshape(xp.take(tx, xp.reshape(i + offset, (-1,)), axis=0), i.shape)

    left = [None] + [xc - t(1 - j) for j in range(1, deg + 1)]
    right = [None] + [t(j) - xc for j in range(1, deg + 1)]
    N = [xp.ones(x.shape, dtype=x.dtype)]
    prev = N
    for j in range(1, deg + 1):
        saved = xp.zeros(x.shape, dtype=x.dtype)
        new = []
        for r in range(j):
            temp = N[r] / (right[r + 1] + left[j - r])
            new.append(saved + right[r + 1] * temp)
            saved = left[j - r] * temp
        new.append(saved)
        prev, N = N, new
    # d/dx B_{i-deg+r} = deg (B_{i-deg+r, deg-1} / (t[i+r] - t[i-deg+r]) - B_{i-deg+r+1, deg-1} / (t[i+r+1] - t[i+r+1-deg]))
    dN = []
    for r in range(deg + 1):
        term = xp.zeros(x.shape, dtype=x.dtype)
        if r >= 1:
            term = term + prev[r - 1] / (t(r) - t(r - deg))
        if r <= deg - 1:
            term = term - prev[r] / (t(r + 1) - t(r + 1 - deg))
        dN.append(deg * term)
    first = i - xp.reshape(xp.asarray([a * K for a in range(d)], dtype=i.dtype), (1, d)) - deg
    return first, N, dN


def tensor_rows(xp, x, T, coef, grad):
    """Tensor-product spline sum at rows x (n, d): (n, n_out) and (n, n_out, d).

    ``T``: :func:`bspline_tables`; ``coef`` (prod(shape), n_out), C order over
    the shape.  Only the (deg + 1)^d coefficients whose B-splines cover a point
    are gathered, and weighted by the products of the one-dimensional values.
    """
    d = x.shape[1]
    shape = T["shape"]
    n = x.shape[0]
    first, vals, ders = _bspline_local(xp, T, x)
    V = xp.stack(vals, axis=-1)  # (n, d, deg + 1)
    dV = xp.stack(ders, axis=-1) if grad else None
    k = V.shape[-1]
    offsets = xp.reshape(xp.arange(k, dtype=first.dtype), (1, k))
    flat, w, dw = None, None, [None] * d
    stride = 1
    for a in range(d - 1, -1, -1):  # flat index and weights axis by axis, the last axis fastest
        idx = (first[:, a : a + 1] + offsets) * stride  # (n, k)
        v = V[:, a, :]
        if flat is None:
            flat, w = idx, v
            if grad:
                dw[a] = dV[:, a, :]
        else:
            flat = xp.reshape(idx[:, :, None] + flat[:, None, :], (n, -1))
            if grad:
                for b in range(a + 1, d):
                    dw[b] = xp.reshape(v[:, :, None] * dw[b][:, None, :], (n, -1))
                dw[a] = xp.reshape(dV[:, a, :][:, :, None] * w[:, None, :], (n, -1))
            w = xp.reshape(v[:, :, None] * w[:, None, :], (n, -1))
        stride *= shape[a]
    gathered = xp.reshape(xp.take(coef, xp.reshape(flat, (-1,)), axis=0), (n, flat.shape[1], coef.shape[1]))
    weights = xp.stack([w] + (dw if grad else []), axis=1)  # (n, 1 [+ d], (deg+1)^d)
    out = xp.matmul(weights, gathered)  # (n, 1 [+ d], n_out)
    return out[:, 0, :], (xp.permute_dims(out[:, 1:, :], (0, 2, 1)) if grad else None)


def _touches(a, b, columns):
    """True if the output range ``a:b`` overlaps any of the ranges ``columns``."""
    return any(c0 < b and a < c1 for c0, c1 in columns)


def _nan_block(xp, n, width, like, d=None):
    shape = (n, width) if d is None else (n, width, d)
    return xp.full(shape, float("nan"), dtype=like.dtype)


# ---------------------------------------------------------------------------
# The runtime part of each method: standardised outputs z (n, n_out) at unit-cube
# inputs x (n, d), and dz/dx (n, n_out, d) with ``grad``.  ``columns``: None (every
# output) or the output ranges ``(a, b)`` a query needs; a part may skip the others
# (their outputs are NaN, never stale numbers), but the outputs it returns have the
# bits of a full evaluation.
# ---------------------------------------------------------------------------


def _gp_part(xp, m, x, grad, columns):
    """Gaussian processes: Matern-5/2 kernel sums, one kernel per group of outputs."""
    groups = None
    if columns is not None:
        gb = [int(v) for v in m["group_bounds"]]
        groups = [g for g in range(len(gb) - 1) if _touches(gb[g], gb[g + 1], columns)]
    # rows per chunk from the training points alone, not from how many kernel groups a
    # query reads: every group then sees the same rows, so a query that skips groups gives
    # the same bits as a full evaluation
    return _chunked(xp, _gp_rows, x, m["X"].shape[0], m, grad, groups)


def gp_kernels_of(m):
    """The kernel of each group: the first group with the same hyperparameters (``group_kernel``), else itself."""
    share = m.get("group_kernel")
    n_groups = m["length"].shape[0]
    return [int(share[g]) if share is not None else g for g in range(n_groups)]


def _gp_rows(xp, x, m, grad, groups=None):
    """Kernel sums of a GP model at rows x (n, d): (n, n_out) and (n, n_out, d).

    ``groups``: the kernel groups to evaluate (default all); the outputs of the
    others are NaN.  Groups that share a kernel (same hyperparameters) name the
    same first group in ``group_kernel``: each kernel is evaluated once.
    """
    parts, dparts = [], []
    n_groups = m["length"].shape[0]
    if groups is None:
        groups = list(range(n_groups))
    kernel_of = gp_kernels_of(m)
    kernels = sorted({kernel_of[g] for g in groups})
    k, dk = _matern(xp, x, m, kernels, grad)
    folded = _folded_weights(xp, m)
    for g in range(n_groups):
        a, b = int(m["group_bounds"][g]), int(m["group_bounds"][g + 1])
        if g not in groups:
            parts.append(_nan_block(xp, x.shape[0], b - a, x))
            if grad:
                dparts.append(_nan_block(xp, x.shape[0], b - a, x, x.shape[1]))
            continue
        j = kernels.index(kernel_of[g])
        alpha = _weight_block(xp, m, folded, "gp_weight_blocks", a, b)
        parts.append(k[j] @ alpha)
        if grad:  # d arrays (n, N) @ (N, o) -> (n, o, d)
            dparts.append(xp.stack([c[j] @ alpha for c in dk], axis=-1))
    return xp.concat(parts, axis=-1), (xp.concat(dparts, axis=1) if grad else None)


def _rbf_part(xp, m, x, grad, columns):
    """Polyharmonic splines: r^5 kernel sums, by fixed output blocks (:func:`_rbf_blocks`)."""
    return _chunked(xp, _rbf_rows, x, m["X"].shape[0], m, grad, _rbf_blocks(m, columns))


def _rbf_blocks(m, columns):
    """Fixed output blocks of an RBF model (each scalar, then each curve) that ``columns`` touch.

    A query evaluates whole blocks, each by its own product, so that its bits
    equal those of a full evaluation (which evaluates every block).  Each
    scalar is its own block: a query at a mass reads M_max beside its curve,
    and one column's product costs a fifth of the scalars' (measured, 16 rows
    by 4,093 points on one core: 0.42 against 2.2 us per row for 3 columns).
    """
    cs = m["curve_slices"]
    blocks = [(i, i + 1) for i in range(int(cs[0, 0]))] + [(int(a), int(b)) for a, b in cs]
    # scalars after the curves (the far side of a two-sided model: the transition mass)
    width = m.get("out_mean")
    blocks += [(i, i + 1) for i in range(int(cs[-1, 1]), int(cs[-1, 1]) if width is None else width.shape[0])]
    if columns is None:
        return blocks
    return [(a, b) for a, b in blocks if _touches(a, b, columns)]


def _rbf_rows(xp, x, m, grad, spans):
    """RBF kernel sums phi @ alpha at rows x (and their x-derivatives), for the output ranges ``spans`` only."""
    phi, dphi = polyharmonic_rows(xp, x, *rbf_points(xp, m), grad,
                                  rbf_augmented(xp, m) if _is_numpy(xp) else None)
    alpha = m["alpha"]
    n_out = alpha.shape[1]
    n, d = phi.shape[0], len(dphi) if dphi is not None else 0
    parts, dparts, at = [], [], 0
    for a, b in spans + [(n_out, n_out)]:
        if a > at:  # not needed: NaN, never a stale number
            parts.append(_nan_block(xp, n, a - at, phi))
            if dphi is not None:
                dparts.append(_nan_block(xp, n, a - at, phi, d))
        if b > a:
            w = _weight_block(xp, m, alpha, "rbf_weight_blocks", a, b)
            parts.append(phi @ w)
            if dphi is not None:
                dparts.append(xp.stack([c @ w for c in dphi], axis=-1))
        at = b
    return xp.concat(parts, axis=-1), (xp.concat(dparts, axis=1) if dphi is not None else None)


def _tensor_part(xp, m, x, grad, columns):
    """Tensor-product cubic B-splines (every output: the gathered coefficients serve them all)."""
    return _chunked(xp, _tensor_rows, x, tensor_cells_per_row(m["coef"], x), bspline_tables(xp, m), m["coef"], grad)


def tensor_cells_per_row(coef, x):
    """What one row of a tensor-spline sum costs, scaled to the pairs of :data:`PAIRS_PER_CHUNK` (gathered
    coefficients / 8): sets its rows per chunk."""
    return int(coef.shape[1]) * 4 ** x.shape[1] // 8


def _tensor_rows(xp, x, T, coef, grad):
    return tensor_rows(xp, x, T, coef, grad)




def _bmm(xp, a, b):
    """(n, p, q) batched times (q, r) -> (n, p, r) without einsum (array-API friendly)."""
    return xp.matmul(a, b)


def standardised_outputs(xp, m, x, grad=False, columns=None):
    """Standardised outputs z (n, n_out) at unit-cube inputs x (n, d); and dz/dx (n, n_out, d).

    The polynomial trend plus the method's part (:data:`PARTS`).  ``columns``:
    optional list of output ranges ``(a, b)`` that are needed; outputs outside
    them may be skipped (NaN).
    """
    F, dF = _trend(xp, m, x, grad)
    z = F @ m["trend_coef"]
    # dF (n, t, d) -> (n, d, t) @ (t, o) -> (n, d, o) -> (n, o, d)
    dz = xp.permute_dims(_bmm(xp, xp.permute_dims(dF, (0, 2, 1)), m["trend_coef"]), (0, 2, 1)) if grad else None
    pz, pdz = PARTS[m.method](xp, m, x, grad, columns)
    z = z + pz
    if grad:
        dz = dz + pdz
    return z, dz


#: Training points the sigma of a GP conditions on (:func:`gp_local_std`), for models that record none
#: (``gp_neighbours``): those trained before it was recorded used 48.
GP_NEIGHBOURS_BEFORE = 48
#: ... and for new models: 32.  The sigma's scale is calibrated at training with the same number (the
#: median of |LOO residual| / sigma), so the calibrated sigma hardly moves (demo GP: see DEVELOPERS.md),
#: while one theta's sigma costs about half (the (K, K) Matern matrix and its factorisation).
GP_NEIGHBOURS = 32


def gp_neighbours(m) -> int:
    """The number of nearest training points the GP sigma of model ``m`` conditions on."""
    k = m.get("gp_neighbours")
    return GP_NEIGHBOURS_BEFORE if k is None else int(k)


def gp_local_std(xp, m, x, n_neighbours=None, columns=None, skip_nearest=0):
    """Predictive standard deviation of the GP part, in output units (n, n_out).

    The exact posterior variance needs the n-by-n kernel inverse, too large to
    ship; instead each prediction conditions on its nearest training points
    in the kernel's metric (a nearest-neighbour GP; Vecchia 1988, JRSS B 50,
    297; Datta et al. 2016, JASA 111, 800).  Conditioning on fewer points can
    only raise the variance, so this errs on the cautious side.  ``columns``
    as in :func:`standardised_outputs`: kernels that serve none are skipped
    (their outputs are NaN).  ``skip_nearest``: leave out that many nearest
    points (1 at a training point: its leave-one-out sigma, for calibration).
    """
    k = gp_neighbours(m) if n_neighbours is None else n_neighbours
    return _chunked(xp, _gp_local_std_rows, x, m["X"].shape[0], m, k, columns, skip_nearest)[0]


def nearest(xp, q, K):
    """Indices (..., K) of the K smallest entries along the last axis of ``q``, in no particular order."""
    if hasattr(xp, "argpartition") and K < q.shape[-1]:
        return xp.argpartition(q, K - 1, axis=-1)[..., :K]  # NumPy: select in O(N)
    return xp.argsort(q, axis=-1)[..., :K]


def local_sd(xp, x, X, nn, k, skip=0):
    """The standard deviation of a GP on the training points ``nn`` (G, n, K + skip) at rows x, (G, n).

    For each kernel of ``k`` (:func:`kernel_stack`) and row of x (n, d): the
    ``skip`` points nearest in the kernel's metric are left out (1 at a
    training point: its leave-one-out sigma); the posterior variance of a GP
    with the kernel on the K others (its Matern-5/2 matrix with the nugget
    and a 1e-10 jitter), clipped at zero.  In the kernel's units (its
    amplitude included).

    The variance is the Schur complement ``k(x, x) - k_x^T K^-1 k_x``: the
    square of the last diagonal element of the Cholesky factor of the
    kernel matrix of the K points and the query, the query last (Rasmussen &
    Williams 2006, GPML, Eq. 2.26 and Appendix A.3): one factorisation and
    no solve.  The jitter sits on the whole diagonal, the query's included,
    and is taken off afterwards.  Squared distances (5 r^2) come from one
    matrix product of the points scaled by sqrt5 / l, as in
    :func:`scaled_distances` (the cancellation costs ~1e-16 where the kernel
    is flat).  Should rounding leave the matrix not positive definite, and
    under other array libraries than NumPy, the variance is solved for
    directly.
    """
    G, n, Kt = nn.shape
    d = x.shape[1]
    s = k["s"]  # (G, d): sqrt5 / l
    B = xp.reshape(xp.take(X, xp.reshape(nn, (-1,)), axis=0), (G, n, Kt, d)) * s[:, None, None, :]
    a = (x[None, :, :] * s[:, None, :])[:, :, None, :]  # (G, n, 1, d)
    if skip:  # the nearest first, the skipped ones off
        diff = B - a
        order = xp.argsort(xp.sum(diff * diff, axis=-1), axis=-1)[..., skip:]
        B = xp.take_along_axis(B, order[..., None], axis=-2)
    K = Kt - skip
    P = xp.concat([B, a], axis=-2)  # (G, n, K + 1, d): the query last
    p2 = xp.sum(P * P, axis=-1)
    Q = xp.matmul(P * -2.0, xp.permute_dims(P, (0, 1, 3, 2)))
    Q += p2[..., :, None]
    Q += p2[..., None, :]
    amp2 = k["amp2"][..., None]  # (G, 1, 1, 1)
    jit = k["jitter"]  # (G, 1, 1, 1)
    C = amp2 * matern_values(xp, Q, False)[0] + jit * xp.eye(K + 1, dtype=x.dtype)
    var = None
    if _is_numpy(xp):
        # NumPy raises where the factorisation fails; other libraries may return NaN or run under a
        # tracer (jax.jit), where no Python test of the result is possible: they take the solve
        try:
            L = xp.linalg.cholesky(C)
        except xp.linalg.LinAlgError:
            L = None
        if L is not None:
            last = L[..., K, K]
            var = last * last - jit[..., 0, 0]
    if var is None:
        kv = C[..., :K, K]
        var = amp2[..., 0, 0] - xp.sum(kv * xp.linalg.solve(C[..., :K, :K], kv[..., None])[..., 0], axis=-1)
    var = xp.where(var > 0.0, var, 0.0)
    return xp.sqrt(var)


def _gp_local_std_rows(xp, x, m, n_neighbours, columns=None, skip_nearest=0):
    X = m["X"]
    K = min(n_neighbours, X.shape[0] - skip_nearest)
    kernel_of = gp_kernels_of(m)
    gb = [int(v) for v in m["group_bounds"]]
    groups = [g for g in range(len(gb) - 1) if columns is None or _touches(gb[g], gb[g + 1], columns)]
    kernels = sorted({kernel_of[g] for g in groups})
    sd = None
    if kernels:
        # the nearest points in each kernel's metric by the squared distances of the mean
        # (scaled_distances), ordered by distances formed point by point (local_sd)
        k = kernel_stack(xp, m, kernels)
        sd = local_sd(xp, x, X, nearest(xp, scaled_distances(xp, x, k), K + skip_nearest), k, skip_nearest)
    parts = []
    for g in range(len(gb) - 1):
        a, b = gb[g], gb[g + 1]
        if g not in groups:
            parts.append(_nan_block(xp, x.shape[0], b - a, x))
            continue
        parts.append(sd[kernels.index(kernel_of[g])][:, None] * m["resid_scale"][a:b] * m["out_scale"][a:b])
    return (xp.concat(parts, axis=-1),)


def spline_in_u(xp, m, values, u, weights=True):
    """Evaluate node curves at sequence coordinates.

    ``values`` (n, n_u) node values per row; ``u`` (n, q).  Returns the values
    (n, q), d/du (n, q) and, if ``weights``, the weights (n, q, n_u) of the node
    values (for gradients and error propagation; None otherwise).  Outside
    [0, u_max] gives NaN.
    """
    return spline_on(xp, m["u_nodes"], m["spline_c"], values, u, weights)


def spline_on(xp, un, C, values, u, weights=True):
    """:func:`spline_in_u` on any nodes ``un`` (k,) with their cardinal coefficients ``C`` (4, k - 1, k)."""
    n_int = un.shape[0] - 1
    flat = xp.reshape(u, (-1,))
    safe = xp.where(flat == flat, flat, 0.0)  # NaN-safe lookup
    j = xp.clip(xp.searchsorted(un, safe, side="right") - 1, 0, n_int - 1)
    t = xp.reshape(safe - xp.take(un, j, axis=0), u.shape)
    # each row's polynomial on each interval (n, n_int) per power, then one lookup per query:
    # memory (n, q) instead of (n, q, n_u) per power
    jj = xp.reshape(j, u.shape)
    q = u.shape[1]
    P = values @ xp.reshape(xp.permute_dims(C, (2, 0, 1)), (un.shape[0], 4 * n_int))  # column p n_int + j
    c = xp.take_along_axis(P, xp.concat([jj + p * n_int for p in range(4)], axis=1), axis=1)
    c0, c1, c2, c3 = (c[:, p * q : (p + 1) * q] for p in range(4))
    val = ((c0 * t + c1) * t + c2) * t + c3
    der = (3.0 * c0 * t + 2.0 * c1) * t + c2
    w = None
    if weights:
        tw = xp.reshape(t, u.shape + (1,))
        k0, k1, k2, k3 = (xp.reshape(xp.take(C[p], j, axis=0), u.shape + (un.shape[0],)) for p in range(4))
        w = ((k0 * tw + k1) * tw + k2) * tw + k3
    ok = (u >= 0.0) & (u <= un[-1])
    nan = float("nan")
    return xp.where(ok, val, nan), xp.where(ok, der, nan), w


# ---------------------------------------------------------------------------
# Predictions in physical units, and queries at given masses
# ---------------------------------------------------------------------------


def _gp_std(xp, m, x, columns):
    return gp_local_std(xp, m, x, columns=columns)


#: Training points whose leave-one-out residuals make the error model's sigma at a query.
ERROR_NEIGHBOURS = 12


def error_model_std(xp, m, x, skip_nearest=0):
    """The error model's sigma of every output (n, n_out) at unit inputs x (n, d), or None without one.

    A model with the arrays ``loo_residual`` (n_train, n_out: each training
    point's leave-one-out residual, in the model's output units) and
    ``error_scale`` (n_out,: the calibration factor) predicts its own error
    from the residuals of the :data:`ERROR_NEIGHBOURS` training points nearest
    to the query in the model's input metric: the root of their
    inverse-square-distance weighted mean square, times the factor.  The
    weights are ``1 / (d_j + d_1)^2`` (d_1 the nearest distance), so a query
    on top of a training point still averages over its neighbours.  The cost
    per query is one pass over the training points (as the mean's own), and
    the answer needs no kernel inverse.  ``skip_nearest``: leave out that many
    nearest points (1 at a training point: its leave-one-out sigma, for
    calibration).
    """
    if m.get("loo_residual") is None:
        return None
    return _chunked(xp, _error_model_rows, x, m["loo_residual"].shape[0], m, skip_nearest)[0]


def _error_points(xp, m):
    """The points of the error model: ``error_points`` if the model has them (training points plus points of
    measured errors, see ``Surrogate.with_measured_errors``), else the training points; as :func:`rbf_points`."""
    return _points_of(xp, m, error_points_name(m))


def error_points_name(m) -> str:
    """The array of the error model's points: ``error_points`` if the model has it, else ``X``."""
    return "X" if m.get("error_points") is None else "error_points"


def error_squares(xp, m):
    """The error model's squared calibrated residuals ``(loo_residual error_scale)^2`` (n_points, n_out); cached."""
    return _cached(xp, m, "error_sq", None, lambda: (m["loo_residual"] * m["error_scale"]) ** 2)


#: Error-model points from which a one-row query searches its neighbours in buckets (NumPy), not in every point.
#: Measured (one row, 4-D demo points, this 2-core machine): full search 45 / 59 / 120 / 176 us at 4k / 8k / 16k /
#: 32k points, buckets 51 / 92 / 85 / 107 us (sigma included).
BUCKET_MIN_POINTS = 16384
#: Mean points per bucket: a row reads the 3^d buckets around its own (1,296 points in 4-D); at 4 per bucket 22 %
#: of rows at 32k fell back to the full search, at 16 2 %.
BUCKET_POINTS = 16.0


def error_buckets(xp, m):
    """Buckets of the error model's points for :func:`error_neighbours_one` (NumPy; cached plain values).

    Cubes of one side over the points' bounding box, ``BUCKET_POINTS`` points each
    on average, and for every bucket the points of the 3^d buckets around it
    (``near_index[near_start[b]:near_start[b + 1]]``, int32), made once.
    """
    def make():
        P = m[error_points_name(m)]
        n, d = P.shape
        lo = xp.min(P, axis=0)
        ext = xp.max(P, axis=0) - lo
        ext = xp.where(ext > 0.0, ext, 1.0)
        side = float(math.prod(float(e) for e in ext) * BUCKET_POINTS / n) ** (1.0 / d)
        counts = xp.maximum(xp.ceil(ext / side), 1.0).astype(xp.int64)
        strides = xp.ones(d, dtype=xp.int64)
        for i in range(d - 2, -1, -1):
            strides[i] = strides[i + 1] * counts[i + 1]
        cell = xp.clip(xp.floor((P - lo) / side).astype(xp.int64), 0, counts - 1)
        flat = cell @ strides
        order = xp.argsort(flat, kind="stable")
        total = int(xp.prod(counts))
        starts = xp.searchsorted(flat[order], xp.arange(total + 1))
        # every bucket's neighbourhood: its 3^d neighbours' points, bucket after bucket
        coords = xp.stack(xp.meshgrid(*[xp.arange(int(c)) for c in counts], indexing="ij"), axis=-1).reshape(-1, d)
        offsets = xp.stack(xp.meshgrid(*[xp.arange(-1, 2)] * d, indexing="ij"), axis=-1).reshape(-1, d)
        nb = coords[:, None, :] + offsets[None, :, :]  # (buckets, 3^d, d)
        ok = xp.all((nb >= 0) & (nb < counts), axis=-1)
        ids = xp.where(ok, nb @ strides, 0)
        length = xp.where(ok, starts[ids + 1] - starts[ids], 0).reshape(-1)
        first = starts[ids].reshape(-1)
        pos = xp.repeat(first - (xp.cumsum(length) - length), length) + xp.arange(int(xp.sum(length)))
        near_index = order[pos].astype(xp.int32)
        near_start = xp.concat([xp.zeros(1, dtype=xp.int64),
                                xp.cumsum(xp.sum(length.reshape(total, -1), axis=1))])
        return {"lo": lo, "side": side, "counts": counts, "strides": strides, "near_index": near_index,
                "near_start": near_start.tolist()}

    return m.cache.plain("error_buckets", error_points_name(m), make)


def error_neighbours_one(xp, m, xr, K):
    """The K error-model points nearest to one row ``xr`` (d,) and their squared distances, by buckets; or None.

    Candidates are the points of the 3^d buckets around the row's bucket; the
    answer is exact (the K nearest of all points) when the K-th squared distance
    is below the squared distance from the row to the edge of those buckets
    (beyond a face of the bounding box there are no points), else None (the
    caller searches every point).  Squared distances as the full search computes
    them (one product with :func:`augmented_points`), so the cost per query
    follows the buckets, not the number of points.
    """
    B = error_buckets(xp, m)
    counts = B["counts"]
    c = xp.clip(((xr - B["lo"]) // B["side"]).astype(xp.int64), 0, counts - 1)
    b = int(c @ B["strides"])
    cand = B["near_index"][B["near_start"][b]:B["near_start"][b + 1]]
    if cand.shape[0] < K:
        return None
    q = xp.dot(augmented_rows(xp, xr), xp.take(rbf_augmented(xp, m, error_points_name(m)), cand, axis=1))
    pick = xp.argpartition(q, K - 1)[:K] if K < cand.shape[0] else xp.arange(cand.shape[0])
    d2 = q[pick]
    # the edges of the searched buckets; no constraint where no bucket lies beyond
    low = xr - B["lo"] - (c - 1) * B["side"]
    high = B["lo"] + (c + 2) * B["side"] - xr
    gap = min(float(xp.min(low, where=c >= 2, initial=math.inf)),
              float(xp.min(high, where=c + 2 < counts, initial=math.inf)))
    if not float(xp.max(d2)) * (1.0 + 1e-9) + 1e-15 < gap * gap:
        return None
    return cand[pick], d2


def _error_model_rows(xp, x, m, skip):
    found = None
    if (_is_numpy(xp) and x.shape[0] == 1 and skip == 0
            and m[error_points_name(m)].shape[0] >= BUCKET_MIN_POINTS):
        found = error_neighbours_one(xp, m, x[0], ERROR_NEIGHBOURS)
    if found is not None:  # the buckets around the one row
        nn, d2 = found[0][None, :], found[1][None, :]
    else:  # every point
        XT, X2 = _error_points(xp, m)
        q = xp.matmul(x * -2.0, XT)
        q += xp.sum(x * x, axis=-1)[:, None]
        q += X2
        nn = nearest(xp, q, min(ERROR_NEIGHBOURS + skip, X2.shape[1]))
        d2 = xp.take_along_axis(q, nn, axis=-1)
    order = xp.argsort(d2, axis=-1)
    nn = xp.take_along_axis(nn, order, axis=-1)[:, skip:]
    d2 = xp.take_along_axis(d2, order, axis=-1)[:, skip:]
    return (error_model_from_neighbours(xp, m, nn, xp.sqrt(xp.where(d2 > 0.0, d2, 0.0))),)


def error_model_from_neighbours(xp, m, nn, dist):
    """The error model's sigma (n, n_out) from each query's neighbours ``nn`` (n, k), nearest first, at distances
    ``dist`` (n, k) (see :func:`error_model_std`; training uses it with the neighbours of a k-d tree)."""
    w = 1.0 / (dist + dist[:, :1] + 1e-12) ** 2
    w = w / xp.sum(w, axis=-1)[:, None]
    E2 = error_squares(xp, m)
    n, k = nn.shape
    Ek = xp.reshape(xp.take(E2, xp.reshape(nn, (-1,)), axis=0), (n, k, E2.shape[1]))
    return xp.sqrt(xp.sum(w[:, :, None] * Ek, axis=1))


#: Methods with a predictive standard deviation; the others have none (NaN, see :func:`output_std`).
STD = {"gp": _gp_std}


def outputs(xp, m, theta, grad=False, columns=None):
    """All outputs at parameters ``theta`` (n, d): node values and scalars.

    Returns ``y`` (n, n_out) in the model's output units (NaN outside the
    box), ``inside`` (n,), and ``dy/dtheta`` (n, n_out, d) if ``grad``.
    ``columns``: optional list of the output ranges ``(a, b)`` a query needs
    (see :func:`needed_columns`); GP outputs outside them may be NaN.
    """
    x, inside = unit_inputs(xp, m, theta)
    z, dz = standardised_outputs(xp, m, x, grad, columns)
    y = m["out_mean"] + m["out_scale"] * z
    nan = float("nan")
    y = xp.where(inside[:, None], y, nan)
    dy = None
    if grad:
        span = input_span(xp, m, theta)
        dy = (m["out_scale"][:, None] * dz) / (span[:, None, :] if span.ndim == 2 else span)
        dy = xp.where(inside[:, None, None], dy, nan)
    return y, inside, dy


def output_std(xp, m, theta, columns=None):
    """Predictive standard deviation of every output (n, n_out), in the model's output units.

    The method's own (:data:`STD`) and the error model's (:func:`error_model_std`)
    in quadrature, whichever the model has.  NaN for a model with neither: it
    carries no error estimate, and zeros would claim it is exact.  ``columns``: optional
    output ranges a query needs (as in :func:`outputs`); outputs outside them
    may be NaN.
    """
    x, inside = unit_inputs(xp, m, theta)
    nan = float("nan")
    part = STD.get(m.method)
    err = error_model_std(xp, m, x)
    if part is None and err is None:
        return xp.full((x.shape[0], m["out_mean"].shape[0]), nan, dtype=x.dtype)
    if part is None:
        s = err
    else:
        s = part(xp, m, x, columns)
        if err is not None:  # the method's own sigma and the error model's, in quadrature
            s = xp.sqrt(s * s + err * err)
    return xp.where(inside[:, None], s, nan)


def inverse(xp, transform, v):
    """A quantity from its modelled value: undoes the model transform (``identity``, ``ln``, ``log10``)."""
    if transform == "ln":
        return xp.exp(v)
    if transform == "log10":
        return 10.0 ** v
    return v


def _inverse_with(xp, transform, val, g, s):
    """:func:`inverse` of a value (n, q) with its gradient (n, q, d) and sigma (n, q) (each may be None)."""
    if transform == "identity":
        return val, g, s
    val = inverse(xp, transform, val)
    f = val if transform == "ln" else val * LN10  # d quantity / d modelled value
    if g is not None:
        g = f[:, :, None] * g
    if s is not None:
        s = f * s
    return val, g, s


def _column(o, y):
    """The columns of output ``o`` in y (n, n_out): (n,) for a sequence quantity, (n, n_u) for a curve."""
    return y[:, o[5]] if o[2] == "sequence" else y[:, o[5] : o[6]]


def named_outputs(xp, m, y):
    """Every emulated quantity, by its name, from outputs y (n, n_out).

    Sequence quantities (n,) and curves at the nodes (n, n_u), in their own
    units (the model transform undone); also ``u_nodes`` (n_u,) and
    ``mass_msun`` (n, n_u), M_max (1 - u^2) at the nodes.
    """
    f = {o[1]: inverse(xp, o[3], _column(o, y)) for o in m.outputs}
    f["u_nodes"] = m["u_nodes"]
    f["mass_msun"] = f[MASS_MAX][:, None] * (1.0 - m["u_nodes"] ** 2)
    return f


def named_std(xp, m, sd, fields):
    """Standard deviations (from :func:`output_std`) of the quantities of :func:`named_outputs` (``fields``).

    For a modelled ln q (log10 q) the sigma of q is q (q ln 10) times that of the modelled value.
    """
    std = {}
    for o in m.outputs:
        s = _column(o, sd)
        if o[3] == "ln":
            s = fields[o[1]] * s
        elif o[3] == "log10":
            s = fields[o[1]] * LN10 * s
        std[o[1]] = s
    return std


def _k2(xp, mass, parts, grad, std):
    """k2 = (3/2) Lambda C^5 at masses (n, q), from the radius and Lambda there (each (value, grad, std))."""
    (R, dR, sR), (L, dL, sL) = parts
    c5 = (mass * MSUN_KM / R) ** 5
    val = 1.5 * L * c5
    g = None
    if grad:
        # d ln k2 = d ln Lambda - 5 d ln R
        g = val[:, :, None] * (dL / L[:, :, None] - 5.0 * dR / R[:, :, None])
    s = None
    if std:
        s = val * xp.sqrt((sL / L) ** 2 + (5.0 * sR / R) ** 2)
    return val, g, s


#: Queries at a mass computed from others: name -> (the queries it reads, the rule).
DERIVED = {"k2": (("radius", "tidal_deformability"), _k2)}


def _star_output(m, query):
    """The curve output a query at a mass reads."""
    for o in m.outputs:
        if o[2] == "star" and o[4] == query:
            return o
    raise KeyError(query)


def star_queries(m):
    """The queries at a mass the model answers: its emulated curves, then those derived from them."""
    own = [o[4] for o in m.outputs if o[2] == "star" and o[4]]
    return tuple(own + [q for q, (needs, _) in DERIVED.items() if all(n in own for n in needs)])


def needed_columns(m, queries):
    """Output ranges ``(a, b)`` that M_max and the given queries at a mass read."""
    im = m.i_mass_max
    cols = [(im, im + 1)]
    for q in queries:
        for base in (DERIVED[q][0] if q in DERIVED else (q,)):
            o = _star_output(m, base)
            cols.append((o[5], o[6]))
    return cols


def _curve_weights(xp, m, u):
    """Spline weights (n_u, q) of the node values at the points ``u`` (q,); cached for NumPy."""
    def make():
        n_u = m["u_nodes"].shape[0]
        eye = xp.eye(n_u, dtype=u.dtype)
        return spline_in_u(xp, m, eye, xp.broadcast_to(u[None, :], (n_u, u.shape[0])), weights=False)[0]

    key = u.tobytes() if _is_numpy(xp) else None  # exactly these points
    return m.cache.array(xp, "curve_weights", key, make)


def branch_curve(xp, m, y, s):
    """Masses, radii and Lambdas (n, q) along the stable branch at ``u = u_max s``.

    ``y`` (n, n_out) from :func:`outputs`; ``s`` (q,) in [0, 1] (1: the
    lightest emulated star, 0: M_max).  The points sit at the same ``u`` for
    every row, so one matrix of spline weights (n_u, q) serves all rows:
    the same values as :func:`curve_at_mass` at these masses, to rounding
    (two-sided models, whose far rows' curves sit at nodes of t: through it).
    """
    un = m["u_nodes"]
    u = un[-1] * s
    masses = y[:, m.i_mass_max][:, None] * (1.0 - u * u)[None, :]
    if not curves_in_u(m):
        return (masses,) + tuple(curve_at_mass(xp, m, y, None, None, masses, q)[0]
                                 for q in ("radius", "tidal_deformability"))
    W = _curve_weights(xp, m, u)
    out = [masses]
    for query in ("radius", "tidal_deformability"):
        o = _star_output(m, query)
        out.append(inverse(xp, o[3], y[:, o[5] : o[6]] @ W))
    return tuple(out)


def curve_at_mass(xp, m, y, dy, sd, mass, query):
    """A query at gravitational masses, through u = sqrt(1 - M / M_max), from outputs already evaluated.

    ``y`` (n, n_out) and ``dy`` (n, n_out, d) or None from :func:`outputs`;
    ``sd`` (n, n_out) or None from :func:`output_std`; ``mass`` broadcastable
    to (n, q) in Msun; ``query`` one of :func:`star_queries`.  Returns
    ``(value, grad, std)``: value (n, q), NaN above M_max, below the emulated
    range or outside the box; grad (n, q, d) and std (n, q), or None.
    Two-sided models interpolate their far rows' curves in t instead
    (:func:`_t_curve`).
    """
    grad, std = dy is not None, sd is not None
    n = y.shape[0]
    mass = xp.asarray(mass, dtype=y.dtype) if not hasattr(mass, "shape") else mass
    mass = xp.broadcast_to(xp.reshape(mass, (1, -1)) if mass.ndim < 2 else mass, (n, mass.shape[-1] if mass.ndim else 1))
    if query in DERIVED:
        needs, rule = DERIVED[query]
        return rule(xp, mass, [curve_at_mass(xp, m, y, dy, sd, mass, q) for q in needs], grad, std)
    o = _star_output(m, query)
    out = _u_curve(xp, m, y, dy, sd, mass, o) if curves_in_u(m) else _sided_curve(xp, m, y, dy, sd, mass, o)
    return _inverse_with(xp, o[3], *out)


def _u_curve(xp, m, y, dy, sd, mass, o, positions=True):
    """The output ``o``'s node curve at masses (n, q) through u, in the modelled units: (value, grad, std).

    ``positions``: the sigma carries the move of u with M_max (without: the node values' alone)."""
    grad, std = dy is not None, sd is not None
    im = m.i_mass_max
    mmax = y[:, im][:, None]
    ratio = mass / mmax
    ok = (mass > 0.0) & (ratio <= 1.0)
    u = xp.sqrt(xp.where(ok, 1.0 - ratio, float("nan")))
    a, b = o[5], o[6]
    val, der, w = spline_in_u(xp, m, y[:, a:b], u, weights=grad or std)
    g = None
    if grad:
        # d/dtheta = sum_k w_k dy_k/dtheta + (dv/du) (du/dM_max) dM_max/dtheta,
        # with du/dM_max = M / (2 u M_max^2).
        dnodes = xp.matmul(w, dy[:, a:b, :])  # (n, q, d)
        dudm = mass / (2.0 * u * mmax * mmax)
        g = dnodes + (der * dudm)[:, :, None] * dy[:, im, :][:, None, :]
    s = None
    if std:
        s = xp.sum(xp.abs(w) * sd[:, None, a:b], axis=-1)  # correlated nodes: a safe bound
        if positions:
            dudm = mass / (2.0 * u * mmax * mmax)
            s = xp.sqrt(s * s + (der * dudm * sd[:, im][:, None]) ** 2)
    return val, g, s


# ---------------------------------------------------------------------------
# Curves of a two-sided model: the base family's below the transition mass, each side's above it
# ---------------------------------------------------------------------------

def curves_in_u(m):
    """True where a model's curve outputs are node values in u for every row, read by :func:`_u_curve` (False
    for two-sided models: the base block below M_t, the far side's nodes of t, see :func:`_sided_curve`)."""
    return m.method != "sided"


def transition_column(m):
    """The output column of the transition mass M_t in a two-sided model (after its sides' curves)."""
    return m["curve_slices"][-1, 1]


def base_offset(m):
    """The first output column of a two-sided model's base block (the base family's outputs, after M_t)."""
    return m["curve_slices"][-1, 1] + 1


def t_node_masses(xp, t_nodes, mmax, mt):
    """Masses (n, k) [Msun] of the far side's nodes ``t_nodes`` (k,) in [0, 1], for M_max and M_t (n,) in Msun:
    ``M = M_max - (M_max - M_t) (1 - t)^2`` (M_t at t = 0; crowded towards M_max as ``u`` crowds them)."""
    h = 1.0 - t_nodes[None, :]
    return mmax[:, None] - (mmax - mt)[:, None] * h * h


def _t_curve(xp, m, y, dy, sd, mass, o, positions=True):
    """:func:`_u_curve` for the far side's hybrid stars: a cubic spline in ``t`` (see :func:`t_node_masses`),
    for masses in [M_t, M_max] (NaN elsewhere).  The gradient and sigma carry the moves of t with M_max and M_t
    (``positions``; without: the node values' alone)."""
    grad, std = dy is not None, sd is not None
    im, it = m.i_mass_max, transition_column(m)
    mmax, mt = y[:, im][:, None], y[:, it][:, None]
    on = (mass >= mt) & (mass <= mmax)
    sr = xp.sqrt(xp.where(on, (mmax - mass) / (mmax - mt), float("nan")))
    a, b = o[5], o[6]
    val, der, w = spline_on(xp, m["t_nodes"], m["t_c"], y[:, a:b], 1.0 - sr, grad or std)
    g = xp.matmul(w, dy[:, a:b, :]) if grad else None
    s = xp.sum(xp.abs(w) * sd[:, None, a:b], axis=-1) if std else None  # correlated nodes: a safe bound
    if not positions or not (grad or std):
        return val, g, s
    # t = 1 - sqrt(r), r = (M_max - M) / (M_max - M_t): dv/dM_max and dv/dM_t at a fixed mass (infinite at
    # M = M_max, as du/dM_max)
    span2 = (mmax - mt) * (mmax - mt)
    dv_dr = -0.5 * der / sr
    dv_dmax = dv_dr * (mass - mt) / span2
    dv_dmt = dv_dr * (mmax - mass) / span2
    if grad:
        g = g + dv_dmax[:, :, None] * dy[:, im, :][:, None, :] + dv_dmt[:, :, None] * dy[:, it, :][:, None, :]
    if std:
        s = xp.sqrt(s * s + (dv_dmax * sd[:, im][:, None]) ** 2 + (dv_dmt * sd[:, it][:, None]) ** 2)
    return val, g, s


def _block(a, lo, hi):
    return None if a is None else a[:, lo:hi]


def _sided_curve(xp, m, y, dy, sd, mass, o, positions=True):
    """A two-sided model's curve ``o`` at masses (n, q): up to the emulated transition mass M_t the base
    family's star (the base block's u spline: such a star holds none of the dense phase), above it the row's
    side: the near side's u spline, or the far side's t spline (its rows have their curves at nodes of t).
    ``positions`` as in :func:`_t_curve`."""
    n_side = transition_column(m)
    off = base_offset(m)
    mt = y[:, n_side][:, None]
    # (the emulated M_t of a cusp may exceed its emulated M_max by a little: no answer above M_max all the same)
    below = (mass <= mt) & (mass <= y[:, m.i_mass_max][:, None])
    base = _u_curve(xp, m, _block(y, off, off + n_side), _block(dy, off, off + n_side),
                    _block(sd, off, off + n_side), mass, o, positions)
    far = _far_mask(xp, m, y)
    if bool(xp.all(far)):
        side = _t_curve(xp, m, y, dy, sd, mass, o, positions)
    elif not bool(xp.any(far)):
        side = _u_curve(xp, m, y, dy, sd, mass, o, positions)
    else:  # each row from its own side's curve
        side = _pick(xp, far[:, None], _t_curve(xp, m, y, dy, sd, mass, o, positions),
                     _u_curve(xp, m, y, dy, sd, mass, o, positions))
    return _pick(xp, below, base, side)


def _pick(xp, where, a, b):
    """``a`` where ``where`` (rows, masses) holds, else ``b``: each of (value, grad, std) (grad with one more
    axis; None stays None)."""
    return tuple(None if u is None else xp.where(where if u.ndim == 2 else where[..., None], u, v)
                 for u, v in zip(a, b))


def _far_mask(xp, m, y):
    """Rows of a two-sided model's outputs y that its far side answered (flagged by the column after the base
    block: see :func:`_sided_part`)."""
    return y[:, base_offset(m) + transition_column(m)] > 0.5


def nodes_at_u(xp, m, y, sd):
    """Outputs y (n, n_out) and sigmas sd (or None) with every curve at the u nodes.

    A two-sided model's curves at the u nodes' masses ``M_max (1 - u^2)`` come
    from its base block below M_t and its side above (:func:`_sided_curve`;
    sigmas of the node values alone: the u nodes move with M_max).  Other
    models' outputs as they are.
    """
    if curves_in_u(m):
        return y, sd
    mass = y[:, m.i_mass_max][:, None] * (1.0 - m["u_nodes"] ** 2)[None, :]
    y = xp.asarray(y, copy=True)
    sd = None if sd is None else xp.asarray(sd, copy=True)
    for o in m.outputs:
        if o[2] == "star":
            val, _, s = _sided_curve(xp, m, y, None, sd, mass, o, positions=False)
            y[:, o[5] : o[6]] = val
            if sd is not None:
                sd[:, o[5] : o[6]] = s
    return y, sd


# ---------------------------------------------------------------------------
# Local polyharmonic splines (partition of unity of r^5 interpolants on cells)
# ---------------------------------------------------------------------------


def local_weights_1d(xp, t, edges, half, grad):
    """One parameter's partition-of-unity weights at t (n,), for cells with ``edges`` and blend ``half`` (lists).

    Returns the lower cell each row touches ``low`` (n,) int, its weight, the
    weight of the cell above (zero outside a blend zone), and their
    t-derivatives (or None): around interior edge j the weights are
    ``1 - s`` and ``s`` with ``s`` the quintic smoothstep of
    ``(t - e_j + h_j) / (2 h_j)`` (C^2).  Blend zones do not overlap
    (``h_j`` < half the narrower cell), so a row touches at most two cells.
    """
    k = len(edges) - 1
    if _is_numpy(xp) and t.shape == (1,):  # one row: the same operations on Python floats (the same bits), no
        return _local_weights_one(xp, float(t[0]), edges, half, grad, t.dtype)  # array call per edge
    low = xp.zeros(t.shape, dtype=xp.int64)
    wl = xp.ones(t.shape, dtype=t.dtype)
    wh = xp.zeros(t.shape, dtype=t.dtype)
    dl = xp.zeros(t.shape, dtype=t.dtype) if grad else None
    dh = xp.zeros(t.shape, dtype=t.dtype) if grad else None
    for j in range(1, k):
        e, h = float(edges[j]), float(half[j])
        above = t >= e + h
        low = xp.where(above, j, low)
        wl = xp.where(above, 1.0, wl)
        wh = xp.where(above, 0.0, wh)
        if grad:
            dl = xp.where(above, 0.0, dl)
            dh = xp.where(above, 0.0, dh)
        if h <= 0.0:
            continue
        u = (t - (e - h)) / (2.0 * h)
        zone = (u > 0.0) & (u < 1.0)
        u = xp.clip(u, 0.0, 1.0)
        s = u * u * u * (u * (6.0 * u - 15.0) + 10.0)
        low = xp.where(zone, j - 1, low)
        wl = xp.where(zone, 1.0 - s, wl)
        wh = xp.where(zone, s, wh)
        if grad:
            ds = (30.0 / (2.0 * h)) * (u * (u - 1.0)) ** 2
            dl = xp.where(zone, -ds, dl)
            dh = xp.where(zone, ds, dh)
    return low, wl, wh, dl, dh


def _local_weights_one(xp, t, edges, half, grad, dtype):
    """:func:`local_weights_1d` of one row t (a float), as arrays of shape (1,)."""
    low, wl, wh, dl, dh = 0, 1.0, 0.0, 0.0, 0.0
    for j in range(1, len(edges) - 1):
        e, h = float(edges[j]), float(half[j])
        if t >= e + h:
            low, wl, wh, dl, dh = j, 1.0, 0.0, 0.0, 0.0
        if h <= 0.0:
            continue
        u = (t - (e - h)) / (2.0 * h)
        if 0.0 < u < 1.0:
            s = u * u * u * (u * (6.0 * u - 15.0) + 10.0)
            low, wl, wh = j - 1, 1.0 - s, s
            v = u * (u - 1.0)
            ds = (30.0 / (2.0 * h)) * (v * v)  # as NumPy's square (Python's ** 2 calls pow: another rounding)
            dl, dh = -ds, ds
    one = [xp.asarray([v], dtype=dtype) for v in (wl, wh, dl, dh)]
    return (xp.asarray([low], dtype=xp.int64), one[0], one[1], one[2] if grad else None, one[3] if grad else None)


def local_partition_weights(xp, x, counts, edges, half):
    """Partition weights (n, P) of every cell of one metric group at stretched inputs x (n, d) (cells in C order)."""
    n, d = x.shape
    w = xp.ones((n, 1), dtype=x.dtype)
    rows = xp.arange(n)
    for i in range(d):
        k = int(counts[i])
        low, wl, wh = local_weights_1d(xp, x[:, i], [float(v) for v in edges[i][: k + 1]],
                                       [float(v) for v in half[i][: k + 1]], False)[:3]
        W = xp.zeros((n, k), dtype=x.dtype)
        W[rows, low] += wl
        up = xp.minimum(low + 1, k - 1)
        W[rows, up] += xp.where(low + 1 < k, wh, 0.0)
        w = xp.reshape(w[:, :, None] * W[:, None, :], (n, -1))  # C order: the last parameter fastest
    return w


def saddle_matrix(xp, x, P):
    """The interpolation matrix ``[[Phi, P], [P^T, 0]]`` of an r^5 spline plus a polynomial at points x (n, d).

    ``P`` (n, n_terms): the polynomial's monomials at x; ``Phi`` the r^5 kernel between the points
    (conditionally positive definite of order 3: the polynomial needs degree >= 2).  NumPy only.
    """
    phi = _polyharmonic(xp, x, x, False)[0]
    n, t = P.shape
    A = xp.zeros((n + t, n + t), dtype=x.dtype)
    A[:n, :n] = phi
    A[:n, n:] = P
    A[n:, :n] = xp.permute_dims(P, (1, 0))
    return A


def local_solve_cell(xp, x, Z, powers):
    """One cell's r^5 + polynomial interpolant of Z (n, k) at its points x (n, d); NumPy only.

    The polynomial is in ``(x - centre) / scale`` (the points' mean and largest
    offset).  Returns the r^5 weights (n, k), the polynomial coefficients (t, k),
    the centre (d,), the scale, and the leave-one-out residuals (n, k): with the
    inverse ``B`` of the interpolation matrix, weights ``B z`` and residuals
    ``c_i / B_ii`` (Rippa 1999) from one factorisation.  Training and the import
    of an exported file (which rebuilds the weights from the training outputs,
    :func:`local_rebuild`) call this same function, so their numbers agree bit for bit
    on one machine; on another BLAS they agree to the rounding of the solve.
    """
    centre = xp.mean(x, axis=0)
    scale = float(xp.max(xp.abs(x - centre))) or 1.0
    P = trend_terms(xp, powers, trend_plan(powers), (x - centre) / scale, False)[0]
    n = P.shape[0]
    inv = xp.linalg.inv(saddle_matrix(xp, x, P))
    sol = inv[:, :n] @ Z  # the right-hand side's polynomial rows are zero
    return sol[:n], sol[n:], centre, scale, sol[:n] / xp.diagonal(inv)[:n, None]


def local_solve_group(xp, x, Z, index, rows, counts, edges, half, powers):
    """Every cell of one metric group: weights (S, k), coefficients (P, t, k), centres (P, d), scales (P,) and the
    partition's leave-one-out residuals (n, k), from the stretched inputs x (n, d), the outputs Z (n, k) and each
    cell's points ``index[rows[p]:rows[p + 1]]``.  Since the margin is >= the overlap a cell's weight vanishes
    outside the points it learned, so the partition's residual at x_i is the weighted sum of its cells' ones."""
    weight = local_partition_weights(xp, x, counts, edges, half)
    loo = xp.zeros(Z.shape, dtype=Z.dtype)
    alphas, coefs, centres, scales = [], [], [], []
    for p in range(len(rows) - 1):
        idx = index[rows[p]:rows[p + 1]]
        a, c, centre, scale, e = local_solve_cell(xp, xp.take(x, idx, axis=0), xp.take(Z, idx, axis=0), powers)
        loo[idx] += weight[idx, p][:, None] * e
        alphas.append(a)
        coefs.append(c)
        centres.append(centre)
        scales.append(scale)
    return {"alpha": xp.concat(alphas), "patch_coef": xp.stack(coefs), "patch_centre": xp.stack(centres),
            "patch_scale": xp.asarray(scales, dtype=x.dtype), "loo": loo}


#: The arrays :func:`local_rebuild` makes from ``local_targets``: exported files of local models leave them out.
LOCAL_REBUILT = ("alpha", "patch_coef", "patch_centre", "patch_scale", "loo_residual")


def local_rebuild(xp, arrays):
    """The arrays of :data:`LOCAL_REBUILT` of a local model, solved again from its training outputs.

    ``arrays`` holds ``local_targets`` (n, n_out: the standardised outputs each
    cell interpolated) and the cells (``X``, ``group_scale``, ``group_columns``,
    ``group_patches``, ``patch_index``, ``patch_rows``, ``cell_counts``,
    ``cell_edges``, ``cell_half``, ``local_powers``, ``out_scale``).  The weights
    are as many numbers as the points times the cells that learn each (3.5 per
    point at 32k), the outputs one per point: exported files carry the outputs
    and solve the cells at import (the training's solves again, seconds).
    """
    X, Z = arrays["X"], arrays["local_targets"]
    gc = [int(v) for v in arrays["group_columns"]]
    gp = [int(v) for v in arrays["group_patches"]]
    rows_all = [int(v) for v in arrays["patch_rows"]]
    n_out = Z.shape[1]
    S, P = rows_all[-1], gp[-1]
    t = arrays["local_powers"].shape[0]
    out = {"alpha": xp.zeros((S, n_out), dtype=Z.dtype), "patch_coef": xp.zeros((P, t, n_out), dtype=Z.dtype),
           "patch_centre": xp.zeros((P, X.shape[1]), dtype=X.dtype), "patch_scale": xp.zeros((P,), dtype=X.dtype)}
    loo = xp.zeros(Z.shape, dtype=Z.dtype)
    for g in range(len(gc) - 1):
        a, b = gc[g], gc[g + 1]
        p0, p1 = gp[g], gp[g + 1]
        r0 = rows_all[p0]
        rows = [r - r0 for r in rows_all[p0:p1 + 1]]
        fit = local_solve_group(xp, X * arrays["group_scale"][g], Z[:, a:b], arrays["patch_index"][r0:rows_all[p1]],
                                rows, arrays["cell_counts"][g], arrays["cell_edges"][g], arrays["cell_half"][g],
                                arrays["local_powers"])
        out["alpha"][r0:rows_all[p1], a:b] = fit["alpha"]
        out["patch_coef"][p0:p1, :, a:b] = fit["patch_coef"]
        out["patch_centre"][p0:p1] = fit["patch_centre"]
        out["patch_scale"][p0:p1] = fit["patch_scale"]
        loo[:, a:b] = fit["loo"]
    out["loo_residual"] = loo * arrays["out_scale"]
    return out


def local_tables(m):
    """The cells of a local model as plain Python values (cached): per metric group its output columns,
    stretch, counts, strides, edges, half-widths and first cell; the rows of every cell; the polynomial plan."""
    def make():
        gc = [int(v) for v in m["group_columns"]]
        gp = [int(v) for v in m["group_patches"]]
        groups = []
        for g in range(len(gc) - 1):
            counts = [int(c) for c in m["cell_counts"][g]]
            d = len(counts)
            strides = [1] * d
            for i in range(d - 2, -1, -1):
                strides[i] = strides[i + 1] * counts[i + 1]
            groups.append({"columns": (gc[g], gc[g + 1]), "first": gp[g], "counts": counts, "strides": strides,
                           "edges": [[float(v) for v in m["cell_edges"][g][i][: counts[i] + 1]] for i in range(d)],
                           "half": [[float(v) for v in m["cell_half"][g][i][: counts[i] + 1]] for i in range(d)]})
        return {"groups": groups, "rows": [int(v) for v in m["patch_rows"]], "plan": trend_plan(m["local_powers"])}

    return m.cache.plain("local_tables", None, make)


def local_cells(xp, x, T, grad):
    """The (row, cell, weight) triples of rows x (n, d) with a nonzero partition weight, and d weight / dx.

    Returns ``rows`` (k,) int, ``cells`` (k,) int (C order over the counts),
    ``w`` (k,) and ``dw`` (k, d) or None.  Only parameters along which some
    row sits in a blend zone multiply the combinations, so one theta inside a
    cell costs one combination.
    """
    n, d = x.shape
    per = [local_weights_1d(xp, x[:, i], T["edges"][i], T["half"][i], grad) for i in range(d)]
    base = per[0][0] * T["strides"][0]
    for i in range(1, d):
        base = base + per[i][0] * T["strides"][i]
    active = [i for i in range(d) if bool(xp.any(per[i][2] > 0.0))]
    all_rows = xp.arange(n, dtype=xp.int64)
    rows, cells, ws, dws = [], [], [], []
    for combo in range(2 ** len(active)):
        up = {i: (combo >> b) & 1 for b, i in enumerate(active)}
        f = [per[i][2] if up.get(i) else per[i][1] for i in range(d)]
        w = f[0]
        for i in range(1, d):
            w = w * f[i]
        keep = xp.nonzero(w > 0.0)[0]
        if keep.shape[0] == 0:
            continue
        cell = base + sum(T["strides"][i] for i in active if up[i])
        rows.append(xp.take(all_rows, keep, axis=0))
        cells.append(xp.take(cell, keep, axis=0))
        ws.append(xp.take(w, keep, axis=0))
        if grad:
            cols = []
            for i in range(d):
                g = per[i][4] if up.get(i) else per[i][3]
                for j in range(d):
                    if j != i:
                        g = g * f[j]
                cols.append(xp.take(g, keep, axis=0))
            dws.append(xp.stack(cols, axis=-1))
    return (xp.concat(rows), xp.concat(cells), xp.concat(ws), xp.concat(dws, axis=0) if grad else None)


def _local_patch(xp, m, g, c, T):
    """Cell c's training points in its group's stretch, transposed (d, N_c), their squared norms (1, N_c), and its
    first and last weight rows."""
    def make():
        a, b = T["rows"][c], T["rows"][c + 1]
        X = xp.take(m["X"], m["patch_index"][a:b], axis=0) * m["group_scale"][g]
        XT = xp.permute_dims(X, (1, 0))
        if _is_numpy(xp):
            XT = xp.ascontiguousarray(XT)
        return XT, xp.reshape(xp.sum(X * X, axis=-1), (1, -1)), a, b

    return _cached(xp, m, "local_patch", c, make)


def _local_part(xp, m, x, grad, columns):
    """Local polyharmonic splines: each row blends the r^5 sums of the cells it touches (NumPy only)."""
    if not _is_numpy(xp):
        raise TypeError("local splines evaluate under NumPy only (rows are gathered per cell by index assignment).")
    T = local_tables(m)
    step = max(T["rows"][c + 1] - T["rows"][c] for c in range(len(T["rows"]) - 1))
    return _chunked(xp, _local_rows, x, 2 * step, m, grad, _rbf_blocks(m, columns), T)


def _local_geometry(xp, x, m, g, G, grad, T):
    """What group g's sums at rows x need, per cell the row touches: ``(p, r, w, dw, phi, dphi, F, dF, s0, s1)``.

    The cell p, its rows r and weights w (and d w / dx), its r^5 and polynomial rows
    and first and last weight rows.  Kept for the latest single row (a likelihood asks
    M_max, then R and Lambda at masses of one theta): each query then reuses them, and
    the numbers are those of a fresh evaluation (the same operations on the same row).
    """
    if x.shape[0] == 1:
        key = (x.tobytes(), g, grad)
        slot = m.cache.plain("local_last", g, dict)
        if slot.get("key") != key:
            slot["key"], slot["value"] = key, _local_geometry_rows(xp, x, m, g, G, grad, T)
        return slot["value"]
    return _local_geometry_rows(xp, x, m, g, G, grad, T)


def _local_geometry_rows(xp, x, m, g, G, grad, T):
    stretch = m["group_scale"][g]
    xg = x * stretch
    rows, cells, ws, dws = local_cells(xp, xg, G, grad)
    out = []
    for c in [int(v) for v in xp.unique(cells)]:
        pick = xp.nonzero(cells == c)[0]
        r = xp.take(rows, pick, axis=0)  # distinct rows: each row meets a cell once
        xr = xp.take(xg, r, axis=0)
        p = G["first"] + c
        XT, X2, s0, s1 = _local_patch(xp, m, g, p, T)
        phi, dphi = polyharmonic_rows(xp, xr, XT, X2, grad)
        F, dF = trend_terms(xp, m["local_powers"], T["plan"], (xr - m["patch_centre"][p]) / float(m["patch_scale"][p]),
                            grad)
        out.append((p, r, xp.take(ws, pick, axis=0)[:, None], xp.take(dws, pick, axis=0) if grad else None,
                    phi, dphi, F, dF, s0, s1))
    return out


def _local_rows(xp, x, m, grad, spans, T):
    """The partition's sums at rows x (n, d): (n, n_out) and (n, n_out, d); outputs outside ``spans`` NaN.

    Each metric group blends its own cells in its own stretch of x; gradients are taken in the
    stretched inputs and multiplied by the stretch at the end.
    """
    n, d = x.shape
    n_out = m["alpha"].shape[1]
    nan = float("nan")
    out = xp.full((n, n_out), nan, dtype=x.dtype)
    dout = xp.full((n, n_out, d), nan, dtype=x.dtype) if grad else None
    for a, b in spans:
        out[:, a:b] = 0.0
        if grad:
            dout[:, a:b, :] = 0.0
    for g, G in enumerate(T["groups"]):
        lo, hi = G["columns"]
        mine = [(max(a, lo), min(b, hi)) for a, b in spans if a < hi and lo < b]
        if not mine:
            continue
        stretch = m["group_scale"][g]
        for p, r, w, dw, phi, dphi, F, dF, s0, s1 in _local_geometry(xp, x, m, g, G, grad, T):
            scale = float(m["patch_scale"][p])
            coef = m["patch_coef"][p]
            for a, b in mine:
                alpha = _cached(xp, m, "local_alpha", (p, a, b), lambda: m["alpha"][s0:s1, a:b] * 1.0)
                f = phi @ alpha + F @ coef[:, a:b]
                out[r, a:b] += w * f
                if grad:
                    df = xp.stack([q @ alpha for q in dphi], axis=-1)
                    df = df + xp.permute_dims(_bmm(xp, xp.permute_dims(dF, (0, 2, 1)), coef[:, a:b]), (0, 2, 1)) / scale
                    dout[r, a:b, :] += (w[:, :, None] * df + f[:, :, None] * dw[:, None, :]) * stretch
    return out, dout


# ---------------------------------------------------------------------------
# Two-sided models (transition families): one sub-model per side of a discontinuity,
# chosen per row by the signs of emulated margins
# ---------------------------------------------------------------------------

#: Prefixes of the arrays of a two-sided model's sub-models (an RBF spline each, with its error model),
#: in the one arrays file: the side where the first maximum lies at the jump, and the far side.
SIDE_PREFIXES = ("near__", "far__")
#: Prefix of its base model: the spline of the base family (the parameters before the transition's) on the
#: same rows, which answers every star up to the transition mass.
BASE_PREFIX = "base__"
#: Prefixes of its margin models (r^5 + quadratic RBF of one value, with leave-one-out residuals): Seidov's
#: margin s, and asinh(g / 10 Msun) of the scanned margin g, learned where s < 0.
MARGIN_PREFIXES = ("seidov__", "scanned__")
#: The sigma of every output of a row whose side is uncertain, in the model's output units (1 Msun of M_max,
#: 1 km of R, a factor e of Lambda, a decade of p_c): far above every default trust limit, so such rows are
#: never trusted.  A row on the wrong side is off by up to about this much (research/surrogates/LOG.md).
BAND_SIGMA = 1.0


def prefixed(arrays, prefix):
    """The arrays whose names start with ``prefix``, without it."""
    return {k[len(prefix):]: v for k, v in arrays.items() if k.startswith(prefix)}


def sided_parts(m):
    """A two-sided model's sub-models and margin models, as runtime :class:`Model` objects (made once)."""
    def make():
        subs = {p: Model(prefixed(m.arrays, p), "rbf", m.outputs, m.parameters, m.bounds, m.mass_floor_msun,
                         m.trust_limits) for p in SIDE_PREFIXES}
        nb = m[BASE_PREFIX + "lo"].shape[0]
        subs[BASE_PREFIX] = Model(prefixed(m.arrays, BASE_PREFIX), "rbf", m.outputs, m.parameters[:nb],
                                  m.bounds[:nb], m.mass_floor_msun, m.trust_limits)
        return subs, {p: Model(prefixed(m.arrays, p)) for p in MARGIN_PREFIXES}

    return m.cache.plain("sided_parts", None, make)


def _margin_rows(xp, x, mm):
    phi, _ = polyharmonic_rows(xp, x, *rbf_points(xp, mm), False, rbf_augmented(xp, mm))
    return (phi @ mm["alpha"] + _trend(xp, mm, x, False)[0] @ mm["trend_coef"],)


def margin_values(xp, mm, x):
    """A margin model's value (n,) and the sigma of its error model (n,) at unit inputs x (n, d).

    The sigma: the weighted root mean square of the nearest training points'
    leave-one-out residuals (:func:`error_model_std`; ``error_scale`` 1).
    """
    value = _chunked(xp, _margin_rows, x, mm["X"].shape[0], mm)[0]
    return value[:, 0], error_model_std(xp, mm, x)[:, 0]


def sided_choice(xp, m, x):
    """The side of each row (True: near) and whether it is uncertain, at unit inputs x (n, d).

    Near where the emulated Seidov margin s > 0 or the emulated scanned margin
    g < 0; uncertain where ``|s| < k sigma_s``, or ``s <= 0`` and ``|g| < k
    sigma_g`` (k = ``side_band``, each sigma from its margin's error model).
    NumPy only.  Kept for the latest single row (a likelihood asks M_max, then
    R and Lambda at masses of one theta, each with its sigma): the same
    operations on the same row, the same numbers.
    """
    if not _is_numpy(xp):
        raise TypeError("two-sided models evaluate under NumPy only (rows are grouped by side by index assignment).")
    if x.shape[0] != 1:
        return _sided_choice_rows(xp, m, x)
    slot = m.cache.plain("sided_last", None, dict)
    key = x.tobytes()
    if slot.get("key") != key:
        slot["key"], slot["value"] = key, _sided_choice_rows(xp, m, x)
    return slot["value"]


def _sided_choice_rows(xp, m, x):
    k = float(m["side_band"][0])
    margins = sided_parts(m)[1]
    s, ss = margin_values(xp, margins["seidov__"], x)
    g, gs = margin_values(xp, margins["scanned__"], x)
    return (s > 0.0) | (g < 0.0), (xp.abs(s) < k * ss) | ((s <= 0.0) & (xp.abs(g) < k * gs))


def _sided_theta(xp, m, x):
    """The parameters of rows x (n, d) of a two-sided model's plain unit box (clipped to the box against
    rounding): its sub-models have their own input maps and read these."""
    lo, hi = m["lo"], m["hi"]
    return xp.clip(lo + x * (hi - lo), lo, hi)


def _by_side(xp, m, x, near, fn):
    """``fn(sub_model, theta_rows)`` (a tuple of arrays, rows first) on each side's rows, joined over the rows of
    x (n, d) (NaN-filled).

    Each sub-model reads the parameters (:func:`_sided_theta`).
    """
    subs = sided_parts(m)[0]
    theta = _sided_theta(xp, m, x)
    out = None
    for prefix, rows in (("near__", xp.nonzero(near)[0]), ("far__", xp.nonzero(~near)[0])):
        if rows.shape[0] == 0 and (prefix == "near__" or out is not None):
            continue  # (no rows at all: the far side's empty answer gives the shapes)
        values = fn(subs[prefix], xp.take(theta, rows, axis=0))
        if out is None:
            out = [xp.full((x.shape[0],) + tuple(v.shape[1:]), float("nan"), dtype=x.dtype) for v in values]
        for o, v in zip(out, values):
            o[rows] = v
    return out


def _sided_columns(m, columns):
    """The output ranges a two-sided model's sides evaluate: ``columns`` and the transition mass's (the curves
    switch from the base block to the side there)."""
    if columns is None:
        return None
    it = transition_column(m)
    return [c for c in columns if c[0] < it] + [(it, it + 1)]


def _base_columns(m, columns):
    """The output ranges of a two-sided model's base block a query reads (``columns`` below M_t's)."""
    return None if columns is None else [c for c in columns if c[0] < transition_column(m)]


def _base_rows(xp, m, x, fn, columns):
    """``fn(base_model, theta_base)`` at every row of x (n, d): the base model reads the base parameters.  NaN
    (the base model not evaluated) when the ``columns`` asked hold no curve: only curves read the base block."""
    base = sided_parts(m)[0][BASE_PREFIX]
    if columns is not None and all(b - a == 1 for a, b in columns):
        return _nan_block(xp, x.shape[0], transition_column(m), x), None
    return fn(base, _sided_theta(xp, m, x)[:, : base["lo"].shape[0]])


def _sided_part(xp, m, x, grad, columns):
    """Two-sided models: each row's outputs from the sub-model of its emulated side, M_t, the base model's
    block and the side flag (1: far), see :func:`_sided_curve` (NumPy only)."""
    near = sided_choice(xp, m, x)[0]
    span = m["hi"] - m["lo"]
    cols, base_cols = _sided_columns(m, columns), _base_columns(m, columns)

    def side(sub, t):
        y, _, dy = outputs(xp, sub, t, grad, cols)
        # d/dx of the plain unit box: d/dtheta times its span (outputs() divides by it again)
        return (y, dy * span) if grad else (y,)

    def base(sub, t):
        y, _, dy = outputs(xp, sub, t, grad, base_cols)
        if not grad:
            return y, None
        nb = t.shape[1]
        dy = dy * span[:nb]
        # the base block does not depend on the transition's parameters
        return y, xp.concat([dy, xp.zeros(dy.shape[:2] + (x.shape[1] - nb,), dtype=dy.dtype)], axis=-1)

    out = _by_side(xp, m, x, near, side)
    yb, dyb = _base_rows(xp, m, x, base, base_cols)
    flag = xp.reshape(xp.where(near, 0.0, 1.0), (-1, 1))
    y = xp.concat([out[0], yb, flag], axis=1)
    dy = None
    if grad:
        dyb = _nan_block(xp, x.shape[0], yb.shape[1], x, x.shape[1]) if dyb is None else dyb
        dy = xp.concat([out[1], dyb, xp.zeros((x.shape[0], 1, x.shape[1]), dtype=x.dtype)], axis=1)
    return y, dy


def _sided_std(xp, m, x, columns):
    """Two-sided models: the sigma of each row's side (its sub-model's error model; ``BAND_SIGMA`` at least
    where the side is uncertain), then the base model's (whatever the side: its stars hold none of the dense
    phase), and 0 for the side flag."""
    near, unsure = sided_choice(xp, m, x)
    cols, base_cols = _sided_columns(m, columns), _base_columns(m, columns)
    s = _by_side(xp, m, x, near, lambda sub, t: (output_std(xp, sub, t, cols),))[0]
    s = xp.where(unsure[:, None], xp.maximum(s, BAND_SIGMA), s)
    sb = _base_rows(xp, m, x, lambda sub, t: (output_std(xp, sub, t, base_cols), None), base_cols)[0]
    return xp.concat([s, sb, xp.zeros((x.shape[0], 1), dtype=x.dtype)], axis=1)


STD["sided"] = _sided_std

#: The runtime part of each method (``Model.method``).
PARTS = {"gp": _gp_part, "rbf": _rbf_part, "tensor": _tensor_part, "local": _local_part, "sided": _sided_part}

#: Methods whose exported files leave arrays out and rebuild them at import: method -> (the arrays left out,
#: the array the rebuild reads, ``rebuild(xp, arrays) -> dict`` of them).  Used only when the model has the
#: array the rebuild reads (models saved before it existed export their arrays as they are).
REBUILT = {"local": (LOCAL_REBUILT, "local_targets", local_rebuild)}


def shipped_arrays(method, arrays):
    """The arrays an exported file carries: without those its import rebuilds (see :data:`REBUILT`)."""
    left_out, source, _ = REBUILT.get(method, ((), None, None))
    if not left_out or arrays.get(source) is None:
        return dict(arrays)
    return {k: v for k, v in arrays.items() if k not in left_out}


def rebuilt_arrays(xp, method, arrays):
    """``arrays`` with what an exported file left out solved again (the arrays as they are if nothing is missing)."""
    left_out, _, rebuild = REBUILT.get(method, ((), None, None))
    if not left_out or all(k in arrays for k in left_out):
        return arrays
    return {**arrays, **rebuild(xp, arrays)}
