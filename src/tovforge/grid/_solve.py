"""Solving the points of one chunk: statuses, reasons and outputs.

A chunk's valid points are solved in one vectorised call; if that call
raises, the points are solved one at a time so that one bad point cannot take
its chunk mates down with it.

Node and fixed-mass stars
-------------------------
Every star at a u node (mass ``M_max (1 - u^2)``) or at a fixed mass is
located by a bracketed root search on the exact integrator, vectorised over
all stars of the chunk: the branch stars of :func:`tovforge.solve.solve_sequences`
bracket the target, and the Illinois variant of regula falsi (Dowell &
Jarratt 1971, BIT 11, 168) runs on ``g(ln h_c) = u(M(h_c)) - u_target`` until
the mass is within ``mass_rtol`` of the target.  In ``u`` the branch is
smooth through the maximum (``u`` is proportional to ``ln h_c* - ln h_c`` there,
where ``M`` itself is flat), so the search converges in a few passes even
for the nodes next to ``M_max``.  The stored ``mass_msun`` of a node star is
the mass of the star actually solved.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ..status import Status

__all__ = ["ChunkResult", "solve_chunk"]


@dataclass(frozen=True)
class ChunkResult:
    """Outputs of the points of one chunk.

    Attributes
    ----------
    status : ndarray of int8, shape (n,)
        :class:`~tovforge.status.Status` codes.
    reason : list of str
        Empty for status 0, otherwise one line naming the cause.
    scalars : dict of str to ndarray, shape (n,)
    curves : dict of str to ndarray, shape (n, n_u)
    at_mass : dict of str to ndarray, shape (n, n_masses)
    """

    status: np.ndarray
    reason: list
    scalars: dict
    curves: dict
    at_mass: dict

    @classmethod
    def concat(cls, results) -> ChunkResult:
        """The points of ``results`` (a sequence of ChunkResult with the same outputs), in order."""
        results = list(results)
        first = results[0]
        return cls(
            status=np.concatenate([r.status for r in results]),
            reason=[s for r in results for s in r.reason],
            scalars={k: np.concatenate([r.scalars[k] for r in results]) for k in first.scalars},
            curves={k: np.concatenate([r.curves[k] for r in results]) for k in first.curves},
            at_mass={k: np.concatenate([r.at_mass[k] for r in results]) for k in first.at_mass},
        )


def _scalar(seq, name: str, floor: float) -> np.ndarray:
    # the margin to the spec's floor is the grid's own output; the rest are the solver's, by name
    if name == "mass_max_margin_msun":
        return seq.value("mass_max_msun") - floor
    return seq.value(name)


def _solve_valid(family, theta, spec) -> dict:
    """Vectorised solve of valid rows: raw arrays for :func:`solve_chunk`."""
    from ..solve import solve_sequences, stars_at_masses

    settings = spec.solver.sequence_settings()
    o = spec.outputs
    batch = family.build(theta)
    seq = solve_sequences(batch, n_stars=spec.solver.branch_stars, settings=settings, exact_maximum=True)
    m_max = np.asarray(seq.value("mass_max_msun"), float)
    u = np.asarray(o.u_nodes, float)
    masses = np.asarray(o.masses_msun, float)
    targets = np.concatenate([np.broadcast_to(masses, (len(theta), masses.size)),
                              m_max[:, None] * (1.0 - u[None, :] ** 2)], axis=1)
    query = stars_at_masses(batch, seq, targets, settings.steps, rtol=spec.solver.mass_rtol)
    n_m = masses.size
    at_mass = query.stars.select((slice(None), slice(0, n_m)))
    nodes = query.stars.select((slice(None), slice(n_m, None)))
    return {
        "solver_status": np.asarray(seq.status),
        "mass_max_msun": m_max,
        "scalars": {k: np.asarray(_scalar(seq, k, spec.mass_max_floor_msun), float) for k in o.scalars},
        "at_mass": {k: at_mass.value(k) for k in o.at_mass},
        "curves": {k: nodes.value(k) for k in o.curves},
        "curve_below_branch": query.below_branch[:, n_m:],
        "not_found_mass": np.where(query.not_found, targets, np.nan),
    }


def _exception_text(exc: Exception) -> str:
    text = str(exc).strip().splitlines()
    return f"{type(exc).__name__}: {text[0]}" if text else type(exc).__name__


def _merge_rows(parts: list) -> dict | None:
    """Stack per-row raw dicts; ``None`` entries (rows that raised) become NaN rows."""
    template = next((p for p in parts if p is not None), None)
    if template is None:
        return None

    def fill(value):
        if value.dtype == bool:
            return np.zeros_like(value)
        if value.dtype.kind in "iu":
            return np.full_like(value, -1)
        return np.full_like(value, np.nan)

    merged = {}
    for key, value in template.items():
        if isinstance(value, dict):
            merged[key] = {k: np.concatenate([p[key][k] if p is not None else fill(v) for p in parts])
                           for k, v in value.items()}
        else:
            merged[key] = np.concatenate([p[key] if p is not None else fill(value) for p in parts])
    return merged


def _solve_rows(family, theta, spec):
    """Solve ``theta`` in one call; if it raises, one row at a time.

    Returns the raw dict (rows that raised are NaN; ``None`` if all raised)
    and the exception text of each row ('' where none).
    """
    try:
        return _solve_valid(family, theta, spec), [""] * len(theta)
    except Exception as exc:  # noqa: BLE001 - a failed batch is retried point by point
        if len(theta) == 1:
            return None, [_exception_text(exc)]
    parts, errors = [], []
    for row in theta:
        try:
            parts.append(_solve_valid(family, row[None, :], spec))
            errors.append("")
        except Exception as exc:  # noqa: BLE001 - a point's exception becomes its status
            parts.append(None)
            errors.append(_exception_text(exc))
    return _merge_rows(parts), errors


def solve_chunk(spec, theta: np.ndarray) -> ChunkResult:
    """Statuses, reasons and outputs of the points ``theta`` of one chunk.

    Parameters
    ----------
    spec : GridSpec
    theta : ndarray, shape (n, n_parameters)

    Returns
    -------
    ChunkResult
        Never raises for a bad point: invalid parameters, a missing maximum,
        M_max below the floor and solver exceptions become statuses.
    """
    from .. import eos

    family = eos.get_family(spec.family)
    theta = np.atleast_2d(np.asarray(theta, float))
    n = len(theta)
    o = spec.outputs
    status = np.zeros(n, dtype=np.int8)
    reason = [""] * n
    scalars = {k: np.full(n, np.nan) for k in o.scalars}
    curves = {k: np.full((n, len(o.u_nodes)), np.nan) for k in o.curves}
    at_mass = {k: np.full((n, len(o.masses_msun)), np.nan) for k in o.at_mass}

    messages = family.validate_rows(theta)
    for i, msg in enumerate(messages):
        if msg:
            status[i], reason[i] = Status.INVALID_PARAMETERS, msg
    rows = np.flatnonzero(status == 0)
    if rows.size:
        raw, errors = _solve_rows(family, theta[rows], spec)
        for r, err in zip(rows, errors):
            if err:
                status[r], reason[r] = Status.SOLVER_FAILURE, f"solver raised {err}"
        if raw is not None:
            floor = spec.mass_max_floor_msun
            for k in o.scalars:
                scalars[k][rows] = raw["scalars"][k]
            for k in o.curves:
                curves[k][rows] = raw["curves"][k]
            for k in o.at_mass:
                at_mass[k][rows] = raw["at_mass"][k]
            u = np.asarray(o.u_nodes)
            for pos, r in enumerate(rows):
                if status[r]:
                    continue
                code = int(raw["solver_status"][pos])
                m_max = raw["mass_max_msun"][pos]
                below = raw["curve_below_branch"][pos]
                gap = ""
                if below.any():
                    lowest = u[below].max()
                    gap = (f"the stable branch starts above the node u = {lowest:.4g} "
                           f"(M = {m_max * (1 - lowest**2):.4g} Msun); lower solver.low_mass_msun")
                if code:
                    status[r], reason[r] = code, Status(code).message
                elif m_max < floor:  # rejected anyway: the floor is the reason, whatever else is missing
                    status[r] = Status.BELOW_FLOOR
                    reason[r] = f"M_max = {m_max:.4f} Msun is below the floor mass_max_floor_msun = {floor:g} Msun"
                    reason[r] += f"; {gap} (NaN there)." if gap else "."
                elif gap:
                    status[r], reason[r] = Status.SOLVER_FAILURE, gap + "."
                elif np.isfinite(raw["not_found_mass"][pos]).any():
                    miss = raw["not_found_mass"][pos]
                    status[r] = Status.SOLVER_FAILURE
                    reason[r] = (f"no exact star found at M = {miss[np.isfinite(miss)][0]:.6g} Msun "
                                 f"within solver.mass_rtol = {spec.solver.mass_rtol:g}.")
    return ChunkResult(status, reason, scalars, curves, at_mass)
