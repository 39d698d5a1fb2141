"""The table of surrogate kinds: everything the rest of the package needs to know about each.

A *method* is one way of fitting and evaluating a model (``gp``, ``rbf``,
``tensor``, ``local``, ``sided``); users ask for a *kind* (``--kind gp``, ``spline`` or
``local``), and the first method offered as that kind that applies to the training data
is used (for splines: two-sided splines on transition families, tensor splines on
complete regular grids, the RBF up to :data:`DENSE_LIMIT` scattered points); if none
applies, the first method that *serves* the kind (``Method.serves``) and applies: the
local splines serve the spline kind above :data:`DENSE_LIMIT` points, where a dense
fit's n^3 cost and n^2 memory are out of reach of a laptop.
Models record both: ``kind`` (what users asked for, shown first) and
``method`` (the implementation, shown beside it).

Adding a method: a module with its fit (``fit(data, settings) ->
FitResult``), its settings and its record of what the fit found; a runtime
part in ``_runtime.py`` (an entry of ``PARTS``, and of ``STD`` if it has a
predictive sigma); and an entry in :data:`METHODS` here.  Training, saving,
loading, checks, export and the tables then take it as it is.  For fast
exported files, a template of generated code beside it (``_<name>_code.py``,
see :mod:`._codegen`); without one, exported files evaluate the method with
its runtime part.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from dataclasses import dataclass

from ..errors import InputError
from . import _gp_code, _rbf_code, _tensor_code
from ._codegen import Template
from ._data import TrainingData
from ._gp import GPFit, GPSettings, describe_gp, fit_gp
from ._local import LocalFit, LocalSettings, describe_local, fit_local, reverse_patches
from ._rbf import DENSE_LIMIT, RBFFit, SplineSettings, fit_rbf
from ._sided import SIDED_ARRAYS, SIDED_STATIC, SidedFit, applies_sided, describe_sided, fit_sided, reverse_sides
from ._tensor import TensorFit, fit_tensor, is_regular

__all__ = ["Method", "METHODS", "COMMON_ARRAYS", "COMMON_STATIC", "DENSE_LIMIT", "check_kind", "kinds", "method",
           "resolve", "settings_for"]

#: Arrays of every model (see :mod:`tovforge.surrogate._runtime`).
COMMON_ARRAYS = ("lo", "hi", "out_mean", "out_scale", "trend_powers", "trend_coef", "u_nodes", "spline_c",
                 "curve_slices")
#: Arrays of every model that steer loops or index (exported files keep them NumPy under other namespaces).
COMMON_STATIC = ("trend_powers", "warp_log", "warp_shift", "curve_slices")


def _always(data: TrainingData) -> bool:
    return True


def _dense_size(data: TrainingData) -> bool:
    return len(data.theta) <= DENSE_LIMIT


@dataclass(frozen=True)
class Method:
    """One surrogate method.

    Attributes
    ----------
    name : str
        Stored in models; the key of the runtime part (``_runtime.PARTS``).
    kind : str
        The kind users ask for (``tovforge train --kind``).
    description : str
        One line for file headers and listings.
    fit : callable
        ``fit(data, settings) -> FitResult`` (progress to the logger at level INFO).
    settings : type
        The options class users pass for this kind (shared by the methods of a kind).
    details : type
        The record of what the fit found (a :class:`~tovforge.surrogate._record.Record`).
    settings_recorded : bool
        False when the fit takes no options (its model records none).
    arrays : tuple of str
        Arrays the method adds to :data:`COMMON_ARRAYS` (a model without them is refused).
    static_arrays : tuple of str
        Its arrays that steer loops or index (kept NumPy in exported files).
    training_rows : tuple of str
        Its arrays whose rows are the training points (their order is reversed to
        measure a model's rounding noise).
    reverse : callable or None
        ``reverse(arrays) -> dict``: the arrays to replace so that every weight sum runs
        in reverse order, for methods whose sums do not run over ``training_rows``
        (local splines: each cell's rows); None: ``training_rows`` reversed.
    has_std : bool
        True if the method has a predictive standard deviation.
    applies : callable
        ``applies(data) -> bool``: whether it can fit these training data.
    describe : callable or None
        ``describe(arrays) -> str``: a few words on a fitted model's structure.
    template : Template or None
        The generated code of its exported files (:mod:`tovforge.surrogate._codegen`);
        None: exported files evaluate it with its general runtime part.
    serves : tuple of str
        Other kinds this method fits when none of their own methods applies
        (the model then records that kind and this method).
    numpy_only : bool
        Its runtime part runs under NumPy only (other array namespaces are refused).
    """

    name: str
    kind: str
    description: str
    fit: Callable
    settings: type
    details: type
    settings_recorded: bool = True
    arrays: tuple = ()
    static_arrays: tuple = ()
    training_rows: tuple = ()
    reverse: Callable | None = None
    has_std: bool = False
    applies: Callable[[TrainingData], bool] = _always
    describe: Callable | None = None
    template: Template | None = None
    serves: tuple = ()
    numpy_only: bool = False


#: Every method, by name, in the order in which the methods of a kind are tried.
METHODS: dict[str, Method] = {m.name: m for m in (
    Method("gp", "gp", "Gaussian processes (a quadratic trend plus Matern-5/2 kernels with one length scale per "
           "parameter, one kernel per group of outputs; sigma from a nearest-neighbour GP)",
           fit_gp, GPSettings, GPFit,
           arrays=("X", "alpha", "group_bounds", "length", "amp2", "noise", "resid_scale"),
           static_arrays=("group_bounds", "group_kernel"), training_rows=("X", "alpha"), has_std=True,
           describe=describe_gp, template=_gp_code.TEMPLATE),
    Method("sided", "spline", "two-sided polyharmonic splines for transition families: one r^5 + quadratic spline "
           "per side of the near/far discontinuity of the first maximum, the side chosen by emulated margins "
           "(Seidov's and a scanned one; NumPy only)",
           fit_sided, SplineSettings, SidedFit, arrays=SIDED_ARRAYS, static_arrays=SIDED_STATIC, has_std=True,
           reverse=reverse_sides, applies=applies_sided, describe=describe_sided, numpy_only=True),
    Method("tensor", "spline", "tensor-product cubic B-splines on a regular grid",
           fit_tensor, SplineSettings, TensorFit, settings_recorded=False,
           arrays=("knots", "n_knots", "coef", "coef_shape"), static_arrays=("n_knots", "coef_shape", "knots"),
           applies=is_regular, template=_tensor_code.TEMPLATE),
    Method("rbf", "spline", "polyharmonic splines: r^5 radial basis functions plus a quadratic polynomial",
           fit_rbf, SplineSettings, RBFFit, arrays=("X", "alpha"), training_rows=("X", "alpha"),
           applies=_dense_size, template=_rbf_code.TEMPLATE),
    Method("local", "local", "local polyharmonic splines: a partition of unity of r^5 interpolants plus quadratic "
           "polynomials on quantile cells (per-query cost independent of the training size; NumPy only)",
           fit_local, LocalSettings, LocalFit,
           arrays=("X", "alpha", "group_columns", "group_scale", "group_patches", "patch_index", "patch_rows",
                   "patch_centre", "patch_scale", "patch_coef", "local_powers", "cell_counts", "cell_edges",
                   "cell_half", "loo_residual", "error_scale"),
           static_arrays=("group_columns", "group_patches", "patch_index", "patch_rows", "local_powers",
                          "cell_counts"), reverse=reverse_patches,
           describe=describe_local, serves=("spline",), numpy_only=True),
)}


def kinds() -> tuple[str, ...]:
    """The kinds users can ask for, in table order."""
    return tuple(dict.fromkeys(m.kind for m in METHODS.values()))


def method(name: str) -> Method:
    """The method called ``name``.

    Raises
    ------
    InputError
        For an unknown method (e.g. a model file of a newer tovforge).
    """
    try:
        return METHODS[name]
    except KeyError:
        raise InputError(f"unknown surrogate method {name!r}; known: {', '.join(METHODS)}.") from None


def check_kind(kind: str) -> str:
    """``kind`` if users can ask for it; InputError otherwise."""
    if kind not in kinds():
        raise InputError(f"kind must be one of {', '.join(kinds())}; got {kind!r}.")
    return kind


def resolve(kind: str, data: TrainingData) -> Method:
    """The method that fits ``data`` for the kind ``kind``.

    Raises
    ------
    InputError
        For an unknown kind, or data no method of the kind can fit.
    """
    check_kind(kind)
    for m in METHODS.values():
        if m.kind == kind and m.applies(data):
            return m
    for m in METHODS.values():
        if kind in m.serves and m.applies(data):
            return m
    raise InputError(f"no {kind} method can fit these training data.")  # pragma: no cover - every kind has a fallback


def settings_for(kind: str, m: Method, settings):
    """The options ``m`` takes, from ``settings`` given for ``kind`` (None: the method's defaults).

    Options of another method of the same kind (e.g. :class:`SplineSettings` for a
    spline-kind model fitted by the local method above :data:`DENSE_LIMIT` points,
    or the other way round when a refined model is retrained) carry over by field
    name; the fields the other method does not have are left at its defaults.

    Raises
    ------
    InputError
        If ``settings`` belongs to no method of ``kind``.
    """
    if settings is None:
        return m.settings()
    if isinstance(settings, m.settings):
        return settings
    same_kind = {x.settings for x in METHODS.values() if x.kind == kind or kind in x.serves}
    if type(settings) not in same_kind:
        raise InputError(f"the {kind} kind takes {m.settings.__name__}, not {type(settings).__name__}.")
    names = {f.name for f in dataclasses.fields(m.settings)}
    return m.settings(**{f.name: getattr(settings, f.name) for f in dataclasses.fields(settings) if f.name in names})
