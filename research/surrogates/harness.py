"""Honest held-out evaluation of surrogates: uniform and near-face sets, tails, calibration.

The held-out grids are made with designs and seeds never used for training
(``specs/*-holdout.toml`` latin hypercubes plus ``faces.py`` points within 3 %
of a face).  Anything that predicts the node outputs of a model (the layout of
``TrainingData.output_matrix``: three scalars, then R, ln Lambda, ln I at the
u nodes) can be evaluated: the queries at masses go through the library's
own ``_runtime.curve_at_mass`` (the cubic spline in u), exactly as users call
them.

Usage (a saved model folder)::

    python research/surrogates/harness.py MODEL_DIR --holdout LHS.h5 --faces FACES.h5 [--json OUT]
"""

from __future__ import annotations

import argparse
import json
from dataclasses import dataclass

import numpy as np

from tovforge.surrogate import _runtime as rt

__all__ = ["HeldOut", "load_holdout", "evaluate", "model_predictor", "runtime_view", "table", "percentiles"]

MASS_LOW = 1.0      # Msun: R(M) and Lambda(M) are compared for 1.0 <= M <= M_max - GAP
GAP = 0.02          # Msun
DIST_BINS = ((0.02, 0.1), (0.1, 0.3), (0.3, np.inf))  # M_max(exact) - M, Msun


@dataclass(frozen=True)
class HeldOut:
    """Exact solves of held-out EOS (status 0 only)."""

    theta: np.ndarray        # (n, d)
    mass_max: np.ndarray     # (n,) Msun
    masses: np.ndarray       # (q,) Msun
    radius: np.ndarray       # (n, q) km
    lam: np.ndarray          # (n, q)
    is_face: np.ndarray      # (n,) bool: from the near-face set
    box: np.ndarray          # (d, 2)
    names: tuple


def load_holdout(uniform_path, faces_path=None) -> HeldOut:
    """Read the uniform held-out grid and (optionally) the near-face one; keep status 0."""
    from tovforge.grid import read_grid

    parts = [(read_grid(uniform_path), False)] + ([(read_grid(faces_path), True)] if faces_path else [])
    m0 = parts[0][0].masses_msun
    for g, _ in parts:
        if not np.array_equal(g.masses_msun, m0):
            raise ValueError(f"{g.path}: masses differ from {parts[0][0].path}")
    keep = [g.status == 0 for g, _ in parts]
    cat = lambda f: np.concatenate([f(g)[k] for (g, _), k in zip(parts, keep)])  # noqa: E731
    return HeldOut(theta=cat(lambda g: g.parameters), mass_max=cat(lambda g: g.scalars["mass_max_msun"]),
                   masses=np.asarray(m0, float), radius=cat(lambda g: g.at_mass["radius_km"]),
                   lam=cat(lambda g: g.at_mass["tidal_deformability"]),
                   is_face=np.concatenate([np.full(k.sum(), f) for (_, f), k in zip(parts, keep)]),
                   box=np.asarray(parts[0][0].box, float), names=tuple(parts[0][0].parameter_names))


def runtime_view(u_nodes, curve_slices=None, i_mass_max=None):
    """The runtime model the queries at masses read (outputs as a new model emulates them; no arrays
    beyond the u nodes and their spline).  ``curve_slices`` and ``i_mass_max`` are checked against it."""
    from tovforge.surrogate._data import emulated_outputs
    from tovforge.surrogate._meta import new_outputs
    from tovforge.surrogate._prepare import spline_cardinal_coefficients

    u = np.asarray(u_nodes, float)
    m = rt.Model({"u_nodes": u, "spline_c": spline_cardinal_coefficients(u)}, None,
                 new_outputs(*emulated_outputs(), u, 0.0).runtime())
    if i_mass_max is not None and int(i_mass_max) != m.i_mass_max:
        raise ValueError(f"M_max column {i_mass_max} != {m.i_mass_max} of the library's layout")
    return m


def model_predictor(model, with_std=None):
    """``fn(theta) -> (y, sd or None)`` and the runtime view of a library Surrogate."""
    with_std = (model.kind == "gp") if with_std is None else with_std

    def fn(theta):
        y = rt.outputs(np, model._model, theta)[0]
        sd = rt.output_std(np, model._model, theta) if with_std else None
        return y, sd

    return fn, model._model


def percentiles(a) -> dict:
    a = np.asarray(a, float)
    a = a[np.isfinite(a)]
    if a.size == 0:
        return {"n": 0, "p50": np.nan, "p95": np.nan, "p99": np.nan, "max": np.nan}
    p = np.percentile(a, [50, 95, 99])
    return {"n": int(a.size), "p50": float(p[0]), "p95": float(p[1]), "p99": float(p[2]), "max": float(a.max())}


def _boot_p95(err, eos_index, n_boot=400, seed=0):
    """90 % bootstrap interval of the p95, resampling EOS (stars of one EOS move together)."""
    rng = np.random.default_rng(seed)
    ids = np.unique(eos_index)
    groups = {i: err[eos_index == i] for i in ids}
    out = []
    for _ in range(n_boot):
        pick = rng.choice(ids, len(ids))
        out.append(np.percentile(np.concatenate([groups[i] for i in pick]), 95))
    return [float(np.percentile(out, 5)), float(np.percentile(out, 95))]


def evaluate(predict, m, ho: HeldOut, margin_msun=0.02, boot=True) -> dict:
    """Errors of a predictor on a held-out set.

    ``predict(theta) -> (y, sd)``: node outputs (n, n_out) in model units and
    their sigma (or None); ``m``: runtime view (u nodes, spline, curve slices).
    Returns a dict of percentile tables (M_max in Msun, R in m, Lambda relative
    in %), split into all / uniform / faces and by distance to M_max, the GP
    |z| > 3 fractions, the share of EOS with emulated M_max - margin above the
    true one, NaN counts, and where the worst 1 % sit.
    """
    y, sd = predict(ho.theta)
    im = m.i_mass_max
    mm = y[:, im]
    n, q = ho.radius.shape
    sel = (ho.masses[None, :] >= MASS_LOW - 1e-9) & (ho.masses[None, :] <= ho.mass_max[:, None] - GAP)
    sel &= np.isfinite(ho.radius) & np.isfinite(ho.lam)
    R, _, sR = rt.curve_at_mass(np, m, y, None, sd, ho.masses, "radius")
    L, _, sL = rt.curve_at_mass(np, m, y, None, sd, ho.masses, "tidal_deformability")
    nan = sel & ~(np.isfinite(R) & np.isfinite(L))
    ok = sel & ~nan
    eR = np.abs(R - ho.radius) * 1000.0  # m
    eL = np.abs(L / ho.lam - 1.0) * 100.0  # %
    eM = np.abs(mm - ho.mass_max)
    eos_of = np.broadcast_to(np.arange(n)[:, None], (n, q))
    dist = ho.mass_max[:, None] - ho.masses[None, :]
    face = np.broadcast_to(ho.is_face[:, None], (n, q))
    out = {"n_eos": int(n), "n_face_eos": int(ho.is_face.sum()), "n_stars": int(ok.sum()),
           "n_nan_stars": int(nan.sum())}
    for tag, rows, cells in (("all", slice(None), ok), ("uniform", ~ho.is_face, ok & ~face),
                             ("faces", ho.is_face, ok & face)):
        out[tag] = {"mass_max": percentiles(eM[rows]), "radius_m": percentiles(eR[cells]),
                    "lambda_pct": percentiles(eL[cells])}
    for lo, hi in DIST_BINS:
        cells = ok & (dist >= lo) & (dist < hi)
        out[f"dist_{lo:g}_{hi:g}"] = {"radius_m": percentiles(eR[cells]), "lambda_pct": percentiles(eL[cells])}
    if boot:
        out["boot90_p95"] = {"mass_max": _boot_p95(eM, np.arange(n)), "radius_m": _boot_p95(eR[ok], eos_of[ok]),
                             "lambda_pct": _boot_p95(eL[ok], eos_of[ok])}
    out["mass_max_above_true_minus_margin"] = float(np.mean(mm - margin_msun > ho.mass_max))
    out["mass_max_above_true"] = float(np.mean(mm > ho.mass_max))
    if sd is not None:
        zM = eM / sd[:, im]
        zR = (eR / 1000.0) / sR
        zL = np.abs(L - ho.lam) / sL
        out["z_gt3"] = {
            "all": {"mass_max": float(np.mean(zM > 3)), "radius": float(np.mean(zR[ok] > 3)),
                    "lambda": float(np.mean(zL[ok] > 3))},
            "faces": {"mass_max": float(np.mean(zM[ho.is_face] > 3)) if ho.is_face.any() else np.nan,
                      "radius": float(np.mean(zR[ok & face] > 3)) if (ok & face).any() else np.nan,
                      "lambda": float(np.mean(zL[ok & face] > 3)) if (ok & face).any() else np.nan}}
        # margin from the GP: M_max - 3 sigma above the truth
        out["mass_max_minus_3sigma_above_true"] = float(np.mean(mm - 3 * sd[:, im] > ho.mass_max))
        # sharpness: median sigma over median error (1.0 for a well-scaled Gaussian is about 1.48)
        out["sigma_over_err_median"] = {"radius": float(np.median(sR[ok]) / np.median(eR[ok] / 1000.0)),
                                        "lambda": float(np.median(sL[ok] / L[ok]) / np.median(eL[ok] / 100.0))}
        # a trust flag: sigma_R > 50 m or sigma_Lambda > 2 % (the floors), or M within max(0.02, 3 sigma) of M_max
        gapM = np.maximum(0.02, 3.0 * sd[:, im])[:, None]
        flag = (sR > 0.05) | (sL / L > 0.02) | (ho.masses[None, :] > mm[:, None] - gapM)
        bigR, bigL = ok & (eR > 150.0), ok & (eL > 5.0)
        out["flag"] = {"flagged_share": float(np.mean(flag[ok])),
                       "R_gt150m": int(bigR.sum()), "R_gt150m_flagged": int((bigR & flag).sum()),
                       "L_gt5pct": int(bigL.sum()), "L_gt5pct_flagged": int((bigL & flag).sum()),
                       "unflagged": {"radius_m": percentiles(eR[ok & ~flag]),
                                     "lambda_pct": percentiles(eL[ok & ~flag])}}
    # where the worst 1 % (EOS by largest R error) sit, in unit coordinates of the box
    worstR = np.where(ok, eR, -np.inf).max(axis=1)
    k = max(1, int(round(0.01 * n)))
    idx = np.argsort(worstR)[::-1][:k]
    unit = (ho.theta - ho.box[:, 0]) / (ho.box[:, 1] - ho.box[:, 0])
    out["worst1pct_unit_mean"] = dict(zip(ho.names, unit[idx].mean(axis=0).round(2).tolist()))
    out["worst1pct_face_share"] = float(ho.is_face[idx].mean())
    out["worst1pct_mass_max"] = float(np.median(ho.mass_max[idx]))
    return out


def table(res: dict, label: str = "") -> str:
    """Compact text: p50/p95/p99/max per quantity and subset."""
    rows = [f"== {label}  ({res['n_eos']} EOS, {res['n_face_eos']} near faces, {res['n_stars']} stars, "
            f"{res['n_nan_stars']} NaN stars)"]
    rows.append(f"{'subset':<16}{'M_max [Msun] p50/p95/p99/max':<38}{'R [m] p50/p95/p99/max':<32}"
                f"{'Lambda [%] p50/p95/p99/max':<30}")
    for tag in ("all", "uniform", "faces"):
        s = res[tag]
        f = lambda d, fmt: "/".join(format(d[k], fmt) for k in ("p50", "p95", "p99", "max"))  # noqa: E731
        rows.append(f"{tag:<16}{f(s['mass_max'], '.2e'):<38}{f(s['radius_m'], '.3g'):<32}{f(s['lambda_pct'], '.3g'):<30}")
    for lo, hi in DIST_BINS:
        s = res[f"dist_{lo:g}_{hi:g}"]
        f = lambda d: "/".join(format(d[k], ".3g") for k in ("p50", "p95", "p99", "max"))  # noqa: E731
        rows.append(f"{f'dM {lo:g}-{hi:g}':<16}{'':<38}{f(s['radius_m']):<32}{f(s['lambda_pct']):<30}")
    if "boot90_p95" in res:
        b = res["boot90_p95"]
        rows.append("p95 90% bootstrap: M_max [{:.2e}, {:.2e}]  R [{:.3g}, {:.3g}] m  Lambda [{:.3g}, {:.3g}] %".format(
            *b["mass_max"], *b["radius_m"], *b["lambda_pct"]))
    if "z_gt3" in res:
        z = res["z_gt3"]
        rows.append("|z|>3: all M {mass_max:.3f} R {radius:.3f} L {lambda:.3f}".format(**z["all"])
                    + "   faces M {mass_max:.3f} R {radius:.3f} L {lambda:.3f}".format(**z["faces"]))
    if "flag" in res:
        f = res["flag"]
        u = f["unflagged"]
        rows.append(f"sigma/err medians R {res['sigma_over_err_median']['radius']:.2f} L "
                    f"{res['sigma_over_err_median']['lambda']:.2f}; trust flag: {f['flagged_share']:.3f} of stars "
                    f"flagged; R > 150 m flagged {f['R_gt150m_flagged']}/{f['R_gt150m']}, Lambda > 5 % flagged "
                    f"{f['L_gt5pct_flagged']}/{f['L_gt5pct']}; unflagged R p99/max {u['radius_m']['p99']:.3g}/"
                    f"{u['radius_m']['max']:.3g} m, Lambda {u['lambda_pct']['p99']:.3g}/{u['lambda_pct']['max']:.3g} %")
    rows.append(f"emulated M_max > true: {res['mass_max_above_true']:.3f}; > true + 0.02: "
                f"{res['mass_max_above_true_minus_margin']:.4f}"
                + (f"; M_max - 3 sigma > true: {res['mass_max_minus_3sigma_above_true']:.4f}"
                   if "mass_max_minus_3sigma_above_true" in res else ""))
    rows.append(f"worst 1 % (by R): unit-box mean {res['worst1pct_unit_mean']}, face share "
                f"{res['worst1pct_face_share']:.2f}, median M_max {res['worst1pct_mass_max']:.2f}")
    return "\n".join(rows)


def main(argv=None):
    from tovforge.surrogate import load

    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("model")
    ap.add_argument("--holdout", required=True)
    ap.add_argument("--faces")
    ap.add_argument("--json")
    ap.add_argument("--label", default="")
    a = ap.parse_args(argv)
    model = load(a.model)
    ho = load_holdout(a.holdout, a.faces)
    fn, m = model_predictor(model)
    res = evaluate(fn, m, ho)
    res["train_seconds"] = model.meta["training"]["seconds"]
    res["n_train"] = model.meta["training"]["n_train"]
    print(table(res, a.label or f"{model.kind} {a.model} (n_train {res['n_train']}, {res['train_seconds']:.0f} s)"))
    if a.json:
        with open(a.json, "a") as fh:
            fh.write(json.dumps({"label": a.label or a.model, **res}) + "\n")


if __name__ == "__main__":
    main()
