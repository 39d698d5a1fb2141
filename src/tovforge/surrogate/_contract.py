"""The query contract of a trained surrogate: one implementation for the library and every exported file.

:class:`tovforge.surrogate.Surrogate` answers its queries through the
``query_*`` functions below, and the exporter copies the source below the
marker line verbatim into each standalone file (after the runtime, which it
calls), so the library model and the exported file cannot differ in shapes,
containers, defaults or return types.  The contract is written down in
``docs/reference/query-contract.md``; in short:

- Shapes follow the inputs and are never squeezed by count: results have the
  leading axes ``theta.shape[:-1]`` (none for one theta of shape (d,)), then
  the mass axis: none for a scalar mass, (q,) for masses of shape (q,) (the
  same for every theta) or of shape ``theta.shape[:-1] + (q,)`` (one row of
  masses per theta).  Gradients add a last axis (d,).
- One return type per function: :class:`Estimate` for ``mass_max`` and the
  queries at masses, :class:`Curve`, :class:`Prediction`,
  :class:`MassPrediction`; ``return_grad`` / ``return_std`` fill a field
  (None when not asked), never change the type.  ``return_std`` is False by
  default everywhere; models without a predictive sigma (splines) give NaN.
- NaN outside the box, above M_max and below the lowest emulated mass;
  ``strict=True`` raises :class:`QueryError` (a ``ValueError``) instead.

Like the runtime, the code imports only the standard library's
``dataclasses`` besides the runtime's names, and works on any array-API
namespace ``xp``.
"""

import dataclasses

from ._runtime import (MASS_MAX, TRUST_LIMITS, branch_curve, curve_at_mass, named_outputs, named_std,
                       needed_columns, nodes_at_u, output_std, outputs, star_queries, unit_inputs)

__all__ = ["QueryError", "Estimate", "Curve", "Prediction", "MassPrediction", "AT_MASS_FIELDS", "QUERY_DOCS",
           "device_of", "query_in_domain", "query_mass_max", "query_at_mass", "query_curve", "query_predict",
           "query_predict_at_masses", "query_set_trust_limits", "trusted_mass_max", "trusted_at_mass"]

# ---- the exported code starts below this line ----


class QueryError(ValueError):
    """A query got an input it cannot answer (a shape, or with ``strict=True`` a value off the model)."""


@dataclasses.dataclass(frozen=True)
class Estimate:
    """A model's answer for one quantity.

    Attributes
    ----------
    value : array
        The quantity, shape ``theta.shape[:-1]`` plus the mass axis of the
        query (if any); NaN where the model has no answer.
    grad : array or None
        d value / d theta, shape ``value.shape + (d,)``, in the value's unit
        per unit of each parameter (``return_grad=True``; None otherwise).
    std : array or None
        Predictive standard deviation, shape ``value.shape``, in the value's
        unit (``return_std=True``; None otherwise).  NaN for models without a
        predictive sigma.
    trusted : array of bool or None
        ``return_std=True``: True where the answer can be used, shape
        ``value.shape``: inside the box, ``std`` within the trust limits
        (``set_trust_limits``) and, at a mass, the mass at least
        ``max(0.02 Msun, 3 sigma_M)`` below the emulated M_max.  False where
        the model has no sigma.  None otherwise.
    """

    value: object
    grad: object = None
    std: object = None
    trusted: object = None


@dataclasses.dataclass(frozen=True)
class Curve:
    """The emulated stable branch from the lowest emulated mass up to M_max.

    Attributes
    ----------
    masses_msun, radius_km, tidal_deformability : array, shape theta.shape[:-1] + (n,)
        Gravitational masses in Msun (increasing), radii in km and the
        dimensionless tidal deformabilities at ``n`` points uniform in
        ``u = sqrt(1 - M / M_max)``.
    """

    masses_msun: object
    radius_km: object
    tidal_deformability: object


@dataclasses.dataclass(frozen=True)
class Prediction:
    """Everything a surrogate predicts at a set of parameter points.

    Scalars have shape ``theta.shape[:-1]``; curves at the nodes add an axis (n_u,).

    Attributes
    ----------
    mass_max_msun : array
        Maximum mass of the stable branch (Msun).
    central_pressure_at_mass_max_dyn_cm2 : array
        Central pressure of the maximum-mass star (dyn/cm^2).
    max_sound_speed_sq : array
        Largest c_s^2 (units of c^2) from the surface to the centre of the maximum-mass star.
    u_nodes : array, shape (n_u,)
        The sequence coordinate ``u = sqrt(1 - M / M_max)`` of the curve nodes.
    mass_msun, radius_km, tidal_deformability, moment_of_inertia_1e45_g_cm2 : array (..., n_u)
        The stable branch at the nodes: M (Msun), R (km), Lambda, I (1e45 g cm^2).
    mass_max_margin_msun : array
        ``M_max`` minus the floor of the training grid (negative: below the floor).
    causality_margin : array
        ``1 - max c_s^2``; negative means the EOS is acausal below M_max.
    out_of_box : array of bool
        True where the parameters lie outside the trained box (values are NaN).
    std : dict or None
        Predictive standard deviations of the emulated quantities, by field
        name, in their units (``return_std=True``; NaN for models without a
        sigma).
    trusted : array of bool or None
        ``return_std=True``: True where M_max and every node of the radius,
        Lambda and I curves have sigmas within the trust limits (shape
        ``theta.shape[:-1]``); None otherwise.
    """

    mass_max_msun: object
    central_pressure_at_mass_max_dyn_cm2: object
    max_sound_speed_sq: object
    u_nodes: object
    mass_msun: object
    radius_km: object
    tidal_deformability: object
    moment_of_inertia_1e45_g_cm2: object
    mass_max_margin_msun: object
    causality_margin: object
    out_of_box: object
    std: object = None
    trusted: object = None


@dataclasses.dataclass(frozen=True)
class MassPrediction:
    """A surrogate's predictions at given masses, with everything of :class:`Prediction`, from one evaluation.

    Attributes
    ----------
    prediction : Prediction
        Scalars and node curves at the same parameters.
    masses_msun : array
        The gravitational masses asked for, as given.
    radius_km, tidal_deformability, moment_of_inertia_1e45_g_cm2, k2 : array
        Radius (km), dimensionless Lambda, I (1e45 g cm^2) and the Love number
        k2 at each mass, shaped as the queries' values; NaN above M_max, below
        the emulated branch or outside the box.
    std : dict or None
        Predictive standard deviations of the four per-mass arrays (``return_std=True``).
    trusted : array of bool or None
        ``return_std=True``: True where the star at each mass is trusted for
        every per-mass quantity (as ``Estimate.trusted``); None otherwise.
    """

    prediction: object
    masses_msun: object
    radius_km: object
    tidal_deformability: object
    moment_of_inertia_1e45_g_cm2: object
    k2: object
    std: object = None
    trusted: object = None


#: The per-mass fields of MassPrediction and the query that answers each.
AT_MASS_FIELDS = (("radius_km", "radius"), ("tidal_deformability", "tidal_deformability"),
                  ("moment_of_inertia_1e45_g_cm2", "moment_of_inertia"), ("k2", "k2"))


def device_of(like):
    """``device=`` of ``like`` for array creation (nothing for arrays without one, as in NumPy 1.x)."""
    device = getattr(like, "device", None)
    return {} if device is None else {"device": device}


def _rows(xp, m, theta):
    """theta as float64 rows (N, d), and its leading axes ``theta.shape[:-1]``."""
    t = xp.asarray(theta, dtype=xp.float64)
    d = len(m.parameters)
    if t.ndim == 0 or t.shape[-1] != d:
        raise QueryError(f"theta must have shape ({d},) or (n, {d}) (or more leading axes) for the parameters "
                         f"{', '.join(m.parameters)}; got shape {tuple(t.shape)}.")
    batch = tuple(t.shape[:-1])
    return (t if t.ndim == 2 else xp.reshape(t, (-1, d))), batch


def _masses(xp, mass, batch, n, like):
    """Masses as rows (n, q) for the n rows of theta, and the mass axes of the answer."""
    mass = xp.asarray(mass, dtype=xp.float64, **device_of(like))
    if mass.ndim == 0:
        return xp.broadcast_to(xp.reshape(mass, (1, 1)), (n, 1)), ()
    if mass.ndim == 1:
        return xp.broadcast_to(xp.reshape(mass, (1, -1)), (n, mass.shape[0])), (mass.shape[0],)
    q = mass.shape[-1]
    if mass.ndim == len(batch) + 1 and all(a in (1, b) for a, b in zip(mass.shape[:-1], batch)):
        rows = xp.broadcast_to(mass, batch + (q,))
        return (rows if len(batch) == 1 else xp.reshape(rows, (n, q))), (q,)
    raise QueryError(f"mass must be a scalar, shape (q,) shared by every theta, or shape theta.shape[:-1] + (q,) "
                     f"with one row per theta (theta.shape[:-1] = {batch}); got shape {tuple(mass.shape)}.")


def _shape(xp, a, batch, tail):
    """A result (N, ...) reshaped to the documented shape ``batch + tail``."""
    return xp.reshape(a, batch + tuple(tail))


def _first(xp, bad):
    """Index of the first True of a boolean (n,) array."""
    return int(xp.argmax(xp.astype(bad, xp.int32)))


#: Rows of theta evaluated at a time.  A query's work arrays (every output, with gradients every output's
#: derivative, spline weights in u) take up to about 8 kB per row for the demo models, so a block's stay
#: below about 20 MB: a batch of any size costs that plus its answers, instead of growing with every row.
BLOCK_ROWS = 2048


def _own(a):
    """A float array that does not keep a larger array alive (a column of the outputs is a view of them)."""
    return None if a is None else a * 1.0


def _join(xp, parts):
    """Per-block results (tuples or dicts of arrays with the rows first, or None) joined along the rows."""
    first = parts[0]
    if first is None:
        return None
    if isinstance(first, tuple):
        return tuple(_join(xp, [p[i] for p in parts]) for i in range(len(first)))
    if isinstance(first, dict):
        return {k: _join(xp, [p[k] for p in parts]) for k in first}
    return xp.concat(parts, axis=0)


def _by_blocks(xp, n, fn):
    """``fn(start, stop)`` on blocks of at most :data:`BLOCK_ROWS` rows, its results joined (one block: as is)."""
    if n <= BLOCK_ROWS:
        return fn(0, n)
    return _join(xp, [fn(a, min(a + BLOCK_ROWS, n)) for a in range(0, n, BLOCK_ROWS)])


def _require_inside(xp, m, t, inside, offset=0):
    if bool(xp.all(inside)):
        return
    i = _first(xp, ~inside)
    for j, name in enumerate(m.parameters):
        v, (lo, hi) = float(t[i, j]), m.bounds[j]
        if not lo <= v <= hi:  # also true for NaN
            raise QueryError(f"theta row {offset + i}: the {name!r} parameter must be in [{lo}, {hi}] (the trained "
                             f"box). Got {v} instead.")
    raise QueryError(f"theta row {offset + i} is outside the trained box.")


def _require_on_branch(xp, m, value, mass, mmax, offset=0):
    ok = ~xp.isnan(value)
    if bool(xp.all(ok)):
        return
    flat = xp.reshape(ok, (ok.shape[0], -1))
    i = _first(xp, ~xp.all(flat, axis=1))
    j = _first(xp, ~flat[i])
    mm = float(mmax[i])
    lowest = mm * (1.0 - float(m["u_nodes"][-1]) ** 2)
    raise QueryError(f"theta row {offset + i}: mass {float(mass[i, j])} Msun is outside the emulated stable branch "
                     f"[{lowest}, {mm}] Msun (above M_max, or below the lowest emulated mass).")


#: The trust limit of each query at a mass, and whether it bounds the relative sigma.
_TRUST_OF = {"radius": ("radius_km", False), "tidal_deformability": ("tidal_deformability_rel", True),
             "moment_of_inertia": ("moment_of_inertia_rel", True), "k2": ("k2_rel", True)}


def trusted_mass_max(xp, m, value, std):
    """The trust flag of M_max: an answer, with a sigma within the limit (False where either is NaN)."""
    return (value == value) & (std <= m.trust_limits["mass_max_msun"])


def trusted_at_mass(xp, m, query, value, std, mass, mmax, std_mmax):
    """The trust flag of a query at masses: values, sigmas and masses (n, q), M_max and its sigma (n, 1).

    False where there is no answer or no sigma, where the sigma (relative for Lambda, I and k2)
    exceeds the query's limit, and for masses within ``max(mass_margin_msun, mass_margin_sigmas
    sigma_M)`` of the emulated M_max.
    """
    lim = m.trust_limits
    key, relative = _TRUST_OF[query]
    spread = xp.abs(std / value) if relative else std
    margin = lim["mass_margin_sigmas"] * std_mmax
    margin = xp.where(margin > lim["mass_margin_msun"], margin, lim["mass_margin_msun"])
    return (value == value) & (spread <= lim[key]) & (mass <= mmax - margin)


def query_set_trust_limits(m, limits):
    """Change some trust limits of the model ``m`` (names of :data:`TRUST_LIMITS`); the limits now in effect.

    The limits are kept by the model (and the models made from it), so every later query uses them.
    """
    new = {}
    for key, v in limits.items():
        if key not in TRUST_LIMITS:
            raise QueryError(f"unknown trust limit {key!r}; known: {', '.join(TRUST_LIMITS)}.")
        if isinstance(v, bool) or not isinstance(v, (int, float)) or not v >= 0.0 or v == float("inf"):
            raise QueryError(f"trust limit {key} must be a finite number >= 0; got {v!r}.")
        new[key] = float(v)
    m.trust_limits.update(new)
    return dict(m.trust_limits)


def query_in_domain(xp, m, theta):
    """True where ``theta`` lies inside the trained box, shape ``theta.shape[:-1]``."""
    t, batch = _rows(xp, m, theta)
    inside = _by_blocks(xp, t.shape[0], lambda a, b: unit_inputs(xp, m, t[a:b])[1])
    return _shape(xp, inside, batch, ())


def query_mass_max(xp, m, theta, return_grad=False, return_std=False, strict=False):
    """Maximum mass of the stable branch as an :class:`Estimate` (see :data:`QUERY_DOCS`)."""
    t, batch = _rows(xp, m, theta)
    columns = needed_columns(m, ())
    i = m.i_mass_max

    def block(a, b):
        tb = t[a:b]
        y, inside, dy = outputs(xp, m, tb, return_grad, columns)
        if strict:
            _require_inside(xp, m, tb, inside, a)
        sd = output_std(xp, m, tb, columns)[:, i] if return_std else None
        ok = trusted_mass_max(xp, m, y[:, i], sd) if return_std else None
        return _own(y[:, i]), _own(dy[:, i, :]) if return_grad else None, _own(sd), ok

    val, g, s, ok = _by_blocks(xp, t.shape[0], block)
    return Estimate(
        value=_shape(xp, val, batch, ()),
        grad=_shape(xp, g, batch, (t.shape[1],)) if return_grad else None,
        std=_shape(xp, s, batch, ()) if return_std else None,
        trusted=_shape(xp, ok, batch, ()) if return_std else None,
    )


def query_at_mass(xp, m, query, theta, mass, return_grad=False, return_std=False, strict=False):
    """The query ``query`` (``"radius"``, ``"k2"``, ...) at gravitational masses, as an :class:`Estimate`."""
    if query not in star_queries(m):
        raise QueryError(f"unknown query {query!r}; this model answers {', '.join(star_queries(m))}.")
    t, batch = _rows(xp, m, theta)
    rows, tail = _masses(xp, mass, batch, t.shape[0], t)
    columns = needed_columns(m, (query,))

    def block(a, b):
        tb, rb = t[a:b], rows[a:b]
        y, inside, dy = outputs(xp, m, tb, return_grad, columns)
        if strict:
            _require_inside(xp, m, tb, inside, a)
        sd = output_std(xp, m, tb, columns) if return_std else None
        val, g, s = curve_at_mass(xp, m, y, dy, sd, rb, query)
        if strict:
            _require_on_branch(xp, m, val, rb, y[:, m.i_mass_max], a)
        ok = None
        if return_std:
            im = m.i_mass_max
            ok = trusted_at_mass(xp, m, query, val, s, rb, y[:, im][:, None], sd[:, im][:, None])
        return _own(val), _own(g), _own(s), ok

    val, g, s, ok = _by_blocks(xp, t.shape[0], block)
    return Estimate(
        value=_shape(xp, val, batch, tail),
        grad=_shape(xp, g, batch, tail + (t.shape[1],)) if return_grad else None,
        std=_shape(xp, s, batch, tail) if return_std else None,
        trusted=_shape(xp, ok, batch, tail) if return_std else None,
    )


def query_curve(xp, m, theta, n=100, strict=False):
    """The emulated stable branch at ``n`` points, as a :class:`Curve`."""
    if isinstance(n, bool) or int(n) != n or n < 1:
        raise QueryError(f"n (points along the branch) must be a positive integer; got {n!r}.")
    n = int(n)
    t, batch = _rows(xp, m, theta)
    u = xp.linspace(1.0, 0.0, n, dtype=xp.float64, **device_of(t))

    def block(a, b):
        tb = t[a:b]
        # one evaluation serves M_max and both curves (the masses then sit exactly on the branch)
        y, inside, _ = outputs(xp, m, tb, False, needed_columns(m, ("radius", "tidal_deformability")))
        if strict:
            _require_inside(xp, m, tb, inside, a)
        return tuple(_own(c) for c in branch_curve(xp, m, y, u))

    return Curve(*(_shape(xp, c, batch, (n,)) for c in _by_blocks(xp, t.shape[0], block)))


def _prediction(xp, m, y, inside, sd, batch):
    y, sd = nodes_at_u(xp, m, y, sd)
    f = named_outputs(xp, m, y)
    f["mass_max_margin_msun"] = f[MASS_MAX] - m.mass_floor_msun
    f["causality_margin"] = 1.0 - f["max_sound_speed_sq"]
    f["out_of_box"] = ~inside
    std = ok = None
    if sd is not None:
        named = named_std(xp, m, sd, f)
        ok = trusted_mass_max(xp, m, f[MASS_MAX], named[MASS_MAX])
        for o in m.outputs:
            if o[2] == "star" and o[4] in _TRUST_OF:
                key, relative = _TRUST_OF[o[4]]
                spread = xp.abs(named[o[1]] / f[o[1]]) if relative else named[o[1]]
                ok = ok & xp.all(spread <= m.trust_limits[key], axis=-1)
        std = {k: _shape(xp, v, batch, tuple(v.shape[1:])) for k, v in named.items()}
        ok = _shape(xp, ok, batch, ())
    fields = {k: (v if k == "u_nodes" else _shape(xp, v, batch, tuple(v.shape[1:]))) for k, v in f.items()}
    return Prediction(std=std, trusted=ok, **fields)


def _evaluated(xp, m, t, return_std, strict):
    """Every output ``(y, inside, sd)`` at the rows ``t``, by blocks (the outputs are the answer here)."""
    def block(a, b):
        tb = t[a:b]
        y, inside, _ = outputs(xp, m, tb)
        if strict:
            _require_inside(xp, m, tb, inside, a)
        return y, inside, output_std(xp, m, tb) if return_std else None

    return _by_blocks(xp, t.shape[0], block)


def query_predict(xp, m, theta, return_std=False, strict=False):
    """Everything the model predicts at ``theta``, as a :class:`Prediction`."""
    t, batch = _rows(xp, m, theta)
    y, inside, sd = _evaluated(xp, m, t, return_std, strict)
    return _prediction(xp, m, y, inside, sd, batch)


def query_predict_at_masses(xp, m, theta, masses, return_std=False, strict=False):
    """:func:`query_predict` and every query at ``masses``, from one evaluation, as a :class:`MassPrediction`."""
    t, batch = _rows(xp, m, theta)
    rows, tail = _masses(xp, masses, batch, t.shape[0], t)
    y, inside, sd = _evaluated(xp, m, t, return_std, strict)

    im = m.i_mass_max

    def block(a, b):
        values, std, ok = {}, ({} if return_std else None), None
        for field, query in AT_MASS_FIELDS:
            v, _, s = curve_at_mass(xp, m, y[a:b], None, None if sd is None else sd[a:b], rows[a:b], query)
            if strict and field == "radius_km":
                _require_on_branch(xp, m, v, rows[a:b], y[a:b, im], a)
            values[field] = _own(v)
            if return_std:
                std[field] = _own(s)
                flag = trusted_at_mass(xp, m, query, v, s, rows[a:b], y[a:b, im][:, None], sd[a:b, im][:, None])
                ok = flag if ok is None else ok & flag
        return values, std, ok

    values, std, ok = _by_blocks(xp, t.shape[0], block)
    values = {k: _shape(xp, v, batch, tail) for k, v in values.items()}
    std = None if std is None else {k: _shape(xp, v, batch, tail) for k, v in std.items()}
    return MassPrediction(prediction=_prediction(xp, m, y, inside, sd, batch),
                          masses_msun=xp.asarray(masses, dtype=xp.float64, **device_of(t)), std=std,
                          trusted=None if ok is None else _shape(xp, ok, batch, tail), **values)


_THETA = """theta : array_like, shape (d,) or (n, d)
        Parameters in the order of the model's parameter names, in their
        units (more leading axes are allowed: they lead the result too)."""
_STRICT = """strict : bool
        Raise ValueError (QueryError) instead of returning NaN outside the
        box{more}."""
_STD = """return_std : bool
        Also fill ``std``, the predictive standard deviation (NaN for models
        without one), and ``trusted``, the trust flag."""
_AT_MASS = f"""

    Parameters
    ----------
    {_THETA}
    mass : float or array_like, shape (q,) or theta.shape[:-1] + (q,)
        Gravitational masses in Msun: a scalar or (q,) for every theta, or
        one row per theta (``masses[:, None]`` for one mass per theta).
    return_grad : bool
        Also fill ``grad``: the analytic derivative with respect to theta,
        shape ``value.shape + (d,)``.
    {_STD}
    {_STRICT.format(more=", above M_max or below the lowest emulated mass")}

    Returns
    -------
    Estimate
        ``value`` of shape ``theta.shape[:-1]`` plus ``mass.shape[-1:]``
        (nothing for a scalar mass); NaN where undefined.
    """

#: Docstrings of the queries, shared by the library's Surrogate and the exported files.
QUERY_DOCS = {
    "in_domain": f"""True where ``theta`` lies inside the trained box.

    Parameters
    ----------
    {_THETA}

    Returns
    -------
    array of bool, shape theta.shape[:-1]
    """,
    "mass_max": f"""Maximum gravitational mass of the stable branch, in Msun.

    Parameters
    ----------
    {_THETA}
    return_grad : bool
        Also fill ``grad``: d M_max / d theta, shape ``theta.shape``, in Msun
        per unit of each parameter.
    {_STD}
    {_STRICT.format(more="")}

    Returns
    -------
    Estimate
        ``value`` of shape ``theta.shape[:-1]``; NaN outside the box.
    """,
    "radius": "Circumferential radius in km at gravitational masses (Msun) on the stable branch." + _AT_MASS,
    "tidal_deformability": "Dimensionless tidal deformability Lambda at masses (Msun)." + _AT_MASS,
    "moment_of_inertia": "Moment of inertia in 1e45 g cm^2 at masses (Msun), slow rotation." + _AT_MASS,
    "k2": "Tidal Love number k2 = (3/2) Lambda (G M / R c^2)^5 at masses (Msun)." + _AT_MASS,
    "curve": f"""The stable branch from the lowest emulated mass up to M_max.

    Parameters
    ----------
    {_THETA}
    n : int
        Points along the branch, uniform in ``u = sqrt(1 - M / M_max)``.
    {_STRICT.format(more="")}

    Returns
    -------
    Curve
        ``masses_msun``, ``radius_km``, ``tidal_deformability``, each of shape
        ``theta.shape[:-1] + (n,)``.
    """,
    "predict": f"""Everything the model predicts at ``theta``.

    Parameters
    ----------
    {_THETA}
    {_STD}
    {_STRICT.format(more="")}

    Returns
    -------
    Prediction
        Scalars of shape ``theta.shape[:-1]``, curves at the ``u_nodes`` with a
        last axis (n_u,), the validity margins, ``out_of_box`` and ``std``
        (a dict of the same fields, or None).
    """,
    "set_trust_limits": """Change limits of the trust flag (``trusted`` of the answers with ``return_std=True``).

    Parameters
    ----------
    **limits : float
        Any of ``mass_max_msun`` (sigma of M_max, Msun; default 0.01),
        ``radius_km`` (sigma of R, km; 0.05), ``tidal_deformability_rel``,
        ``moment_of_inertia_rel`` (relative sigmas; 0.02), ``k2_rel`` (0.03),
        ``mass_margin_msun`` (0.02) and ``mass_margin_sigmas`` (3): a star is
        not trusted within ``max(mass_margin_msun, mass_margin_sigmas
        sigma_M)`` of the emulated M_max.  Nothing: only read them.

    Returns
    -------
    dict
        The limits now in effect (every later query uses them).
    """,
    "predict_at_masses": f"""Everything of ``predict`` plus R, Lambda, I and k2 at masses, from one evaluation.

    Parameters
    ----------
    {_THETA}
    masses : float or array_like, shape (q,) or theta.shape[:-1] + (q,)
        Gravitational masses in Msun, as in the queries at masses.
    {_STD}
    {_STRICT.format(more=", above M_max or below the lowest emulated mass")}

    Returns
    -------
    MassPrediction
    """,
}
