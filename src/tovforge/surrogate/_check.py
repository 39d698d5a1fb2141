"""Checking a surrogate against held-out exact solves, and the report it writes."""

from __future__ import annotations

import json
from dataclasses import dataclass
from pathlib import Path

import numpy as np

from .._extras import pyplot, require
from .._provenance import provenance
from ..errors import InputError
from . import _runtime as rt
from ._model import Surrogate

__all__ = ["check", "CheckResult", "TARGETS", "error_stats"]

#: Accuracy targets on the demo box (DESIGN targets): floor and goal of the
#: 95th percentile of the held-out error.
TARGETS = {
    "mass_max_msun": {"stat": "abs_p95", "floor": 0.01, "goal": 0.002, "unit": "Msun"},
    "radius_km": {"stat": "abs_p95", "floor": 0.050, "goal": 0.010, "unit": "km"},
    "tidal_deformability": {"stat": "rel_p95", "floor": 0.02, "goal": 0.005, "unit": "relative"},
}
CHECK_MASSES_STEP = 0.2
CHECK_MASS_LOW = 1.0
CHECK_MAX_GAP = 0.02


def error_stats(pred, exact) -> dict:
    """Median, 95th percentile and maximum of absolute and relative errors."""
    pred, exact = np.asarray(pred, float).ravel(), np.asarray(exact, float).ravel()
    err = pred - exact
    ab = np.abs(err)
    rel = ab / np.abs(exact)
    return {
        "n": int(ab.size),
        "abs_median": float(np.median(ab)),
        "abs_p95": float(np.percentile(ab, 95)),
        "abs_max": float(np.max(ab)),
        "rel_median": float(np.median(rel)),
        "rel_p95": float(np.percentile(rel, 95)),
        "rel_max": float(np.max(rel)),
    }


@dataclass(frozen=True)
class CheckResult:
    """Outcome of :func:`check`: the report dictionary and where files went."""

    report: dict
    report_dir: Path | None

    def table(self) -> str:
        """The error table as aligned text."""
        return _text_table(self.report)


def _read_holdout(path, model: Surrogate):
    from ..grid import read_grid

    g = read_grid(path)  # raises InputError for a missing, foreign or damaged file
    if g.family != model.family:
        raise InputError(f"{path}: held-out grid of family {g.family!r}, but the model is of family {model.family!r}.")
    if list(g.parameter_names) != list(model.parameter_names):
        raise InputError(f"{path}: parameters {list(g.parameter_names)} differ from the model's "
                         f"{list(model.parameter_names)}.")
    for k in ("radius_km", "tidal_deformability"):
        if k not in g.at_mass:
            raise InputError(f"{path}: held-out grid lacks at_mass {k!r} (needed for the check).")
    return g


def check(model: Surrogate, holdout_path, report_dir=None) -> CheckResult:
    """Compare a surrogate with held-out exact solves.

    Held-out points with status 0 inside the model's box are used; points
    that coincide with training points are refused (never evaluate on
    training data).  Radius, Lambda and I are compared at the masses of the
    held-out grid from 1.0 Msun up to ``M_max - 0.02`` (of the exact solve),
    through the same query path users call.

    Parameters
    ----------
    model : Surrogate
    holdout_path : path
        Grid file of exact solves not used in training.
    report_dir : path, optional
        Where to write ``report.json``, ``report.md`` and the PNG figures.
    """
    if report_dir is not None:  # before the work, not after it
        require("matplotlib", "plots", "the figures of a check report")
    g = _read_holdout(holdout_path, model)
    theta = np.asarray(g.parameters, float)
    inside = model.in_domain(theta)
    ok = (np.asarray(g.status) == 0) & inside
    if ok.sum() == 0:
        raise InputError(f"{holdout_path}: no held-out point with status 0 inside the model's box.")
    X = model.arrays.get("X")
    if X is not None:
        x = rt.unit_inputs(np, model._m, theta[ok])[0]  # the model's own input scale
        d2 = ((x[:, None, :] - X[None, :, :]) ** 2).sum(-1).min(axis=1)
        if np.any(d2 < 1e-20):
            raise InputError(f"{holdout_path}: {int(np.sum(d2 < 1e-20))} held-out points are training points; "
                             "check against a grid made with another design or seed.")
    th = theta[ok]
    mm_exact = g.scalars["mass_max_msun"][ok]
    is_gp = model.kind == "gp"
    if is_gp:
        mm, mm_std = model.mass_max(th, return_std=True)
    else:
        mm, mm_std = model.mass_max(th), None
    masses = np.asarray(g.masses_msun, float)
    sel = (masses[None, :] >= CHECK_MASS_LOW - 1e-9) & (masses[None, :] <= mm_exact[:, None] - CHECK_MAX_GAP)
    sel &= np.isfinite(g.at_mass["radius_km"][ok])
    q = {}
    for name, key in (("radius_km", "radius_km"), ("tidal_deformability", "tidal_deformability"),
                      ("moment_of_inertia", "moment_of_inertia_1e45_g_cm2")):
        if key not in g.at_mass:
            continue
        fn = getattr(model, "radius" if name == "radius_km" else name)
        if is_gp:
            val, std = fn(th, masses, return_std=True)
        else:
            val, std = fn(th, masses), None
        q[name] = (val, std, g.at_mass[key][ok])
    outside = sel & ~np.isfinite(q["radius_km"][0])
    report = {
        "format": "tovforge-check",
        **provenance(),
        "model": {"kind": model.kind, "family": model.family, "n_train": model.meta["training"]["n_train"],
                  "training_grid": model.meta["training"].get("grid_path", ""),
                  "training_grid_sha256": model.meta["training"].get("grid_content_sha256", "")},
        "holdout": {"path": str(holdout_path), "content_sha256": str(g.attrs.get("content_sha256", "")),
                    "n_points": int(len(theta)), "n_used": int(ok.sum()),
                    "masses_msun": masses.tolist(), "mass_rule": f">= {CHECK_MASS_LOW} and <= M_max - {CHECK_MAX_GAP}",
                    "n_star_comparisons": int(sel.sum()),
                    "n_emulated_nan": int(outside.sum())},
        "errors": {},
        "targets": {},
        "calibration": {},
        "worst": [],
        "learning_curve": list(model.meta.get("learning_curve", [])),
    }
    report["errors"]["mass_max_msun"] = error_stats(mm, mm_exact)
    rmax_idx = 0  # u = 0 node is the maximum-mass star
    pred = model.predict(th)
    if "radius_at_mass_max_km" in g.scalars:
        report["errors"]["radius_at_mass_max_km"] = error_stats(pred.radius_km[:, rmax_idx],
                                                               g.scalars["radius_at_mass_max_km"][ok])
    report["errors"]["max_sound_speed_sq"] = error_stats(pred.max_sound_speed_sq, g.scalars["max_sound_speed_sq"][ok])
    finite = sel & np.isfinite(q["radius_km"][0])
    for name, (val, std, exact) in q.items():
        m = finite & np.isfinite(exact)
        report["errors"][f"{name}_at_mass"] = error_stats(val[m], exact[m])
    for key, t in TARGETS.items():
        src = {"mass_max_msun": "mass_max_msun", "radius_km": "radius_km_at_mass",
               "tidal_deformability": "tidal_deformability_at_mass"}[key]
        v = report["errors"][src][t["stat"]]
        report["targets"][key] = {**t, "value": v, "meets_floor": bool(v <= t["floor"]),
                                  "meets_goal": bool(v <= t["goal"])}
    if is_gp:
        def cover(err, sd):
            z = np.abs(err) / sd
            return {"within_1_sigma": float(np.mean(z <= 1.0)), "within_2_sigma": float(np.mean(z <= 2.0)),
                    "n": int(z.size)}
        report["calibration"]["mass_max_msun"] = cover(mm - mm_exact, mm_std)
        for name in ("radius_km", "tidal_deformability"):
            val, std, exact = q[name]
            m = finite & np.isfinite(exact)
            report["calibration"][name] = cover(val[m] - exact[m], std[m])
    # ten worst points by radius error
    rerr = np.where(finite, np.abs(q["radius_km"][0] - q["radius_km"][2]), -np.inf)
    worst_r = rerr.max(axis=1)
    order = np.argsort(worst_r)[::-1][:10]
    for i in order:
        if not np.isfinite(worst_r[i]):
            continue
        lam_rel = np.where(finite[i], np.abs(q["tidal_deformability"][0][i] / q["tidal_deformability"][2][i] - 1), -np.inf)
        report["worst"].append({
            "parameters": dict(zip(model.parameter_names, th[i].tolist())),
            "mass_max_exact_msun": float(mm_exact[i]),
            "mass_max_error_msun": float(mm[i] - mm_exact[i]),
            "radius_error_max_km": float(worst_r[i]),
            "at_mass_msun": float(masses[np.argmax(rerr[i])]),
            "lambda_rel_error_max": float(np.max(lam_rel)),
        })
    result = CheckResult(report, None)
    if report_dir is not None:
        report_dir = Path(report_dir)
        report_dir.mkdir(parents=True, exist_ok=True)
        (report_dir / "report.json").write_text(json.dumps(report, indent=2))
        figures = _figures(model, g, ok, th, mm, mm_exact, q, finite, order, report_dir)
        (report_dir / "report.md").write_text(_markdown(report, figures))
        result = CheckResult(report, report_dir)
    return result


def _text_table(report) -> str:
    lines = [f"held-out check of a {report['model']['kind']} model ({report['model']['n_train']} training points) "
             f"on {report['holdout']['n_used']} exact EOS, {report['holdout']['n_star_comparisons']} stars"]
    head = f"{'output':<34}{'abs median':>12}{'abs p95':>11}{'abs max':>11}{'rel median':>12}{'rel p95':>10}{'rel max':>10}"
    lines.append(head)
    for name, s in report["errors"].items():
        lines.append(f"{name:<34}{s['abs_median']:>12.3g}{s['abs_p95']:>11.3g}{s['abs_max']:>11.3g}"
                     f"{s['rel_median']:>12.2e}{s['rel_p95']:>10.2e}{s['rel_max']:>10.2e}")
    lines.append("targets (p95):")
    for key, t in report["targets"].items():
        verdict = "meets goal" if t["meets_goal"] else ("meets floor" if t["meets_floor"] else "MISSES FLOOR")
        lines.append(f"  {key:<22} {t['value']:.4g} {t['unit']} (floor {t['floor']:g}, goal {t['goal']:g}): {verdict}")
    if report["calibration"]:
        lines.append("GP calibration (fraction of errors within the predicted sigma; Gaussian: 0.683 and 0.954):")
        for k, c in report["calibration"].items():
            lines.append(f"  {k:<22} 1 sigma {c['within_1_sigma']:.3f}   2 sigma {c['within_2_sigma']:.3f}")
    return "\n".join(lines)


def _markdown(report, figures) -> str:
    md = ["# Surrogate check", "",
          f"Model: **{report['model']['kind']}** of `{report['model']['family']}`, "
          f"{report['model']['n_train']} training points ({report['model']['training_grid']}).",
          f"Held-out: `{report['holdout']['path']}`, {report['holdout']['n_used']} exact EOS (status 0, in the box), "
          f"{report['holdout']['n_star_comparisons']} stars at masses {report['holdout']['mass_rule']}.",
          f"Created {report['created_utc']} with tovforge {report['tovforge_version']}.", "",
          "## Errors", "",
          "| output | abs median | abs p95 | abs max | rel median | rel p95 | rel max |",
          "|---|---|---|---|---|---|---|"]
    for name, s in report["errors"].items():
        md.append(f"| {name} | {s['abs_median']:.3g} | {s['abs_p95']:.3g} | {s['abs_max']:.3g} | "
                  f"{s['rel_median']:.2e} | {s['rel_p95']:.2e} | {s['rel_max']:.2e} |")
    md += ["", "Units: Msun for masses, km for radii, 1e45 g cm^2 for I; Lambda is dimensionless.", "",
           "## Targets (95th percentile of the held-out error)", "", "| quantity | value | floor | goal | verdict |",
           "|---|---|---|---|---|"]
    for key, t in report["targets"].items():
        verdict = "goal" if t["meets_goal"] else ("floor" if t["meets_floor"] else "**misses the floor**")
        md.append(f"| {key} | {t['value']:.4g} {t['unit']} | {t['floor']:g} | {t['goal']:g} | {verdict} |")
    if report["calibration"]:
        md += ["", "## GP calibration", "",
               "Fraction of held-out errors inside the predicted 1 and 2 sigma (a Gaussian gives 0.683 and 0.954).", "",
               "| output | within 1 sigma | within 2 sigma |", "|---|---|---|"]
        for k, c in report["calibration"].items():
            md.append(f"| {k} | {c['within_1_sigma']:.3f} | {c['within_2_sigma']:.3f} |")
    if report.get("learning_curve"):
        md += ["", "## Error against training size (refinement)", "",
               "| training points | M_max p95 [Msun] | R p95 [km] | Lambda p95 [rel] |", "|---|---|---|---|"]
        for row in report["learning_curve"]:
            md.append(f"| {row['n_train']} | {row['mass_max_p95']:.4g} | {row['radius_p95_km']:.4g} | "
                      f"{row['lambda_rel_p95']:.3g} |")
    md += ["", "## Ten worst points (largest radius error)", "", "| parameters | M_max exact | M_max error | "
           "R error max [km] | at M | Lambda rel error max |", "|---|---|---|---|---|---|"]
    for w in report["worst"]:
        pars = ", ".join(f"{k}={v:.4g}" for k, v in w["parameters"].items())
        md.append(f"| {pars} | {w['mass_max_exact_msun']:.4f} | {w['mass_max_error_msun']:+.2e} | "
                  f"{w['radius_error_max_km']:.4f} | {w['at_mass_msun']:.1f} | {w['lambda_rel_error_max']:.2e} |")
    md += ["", "## Figures", ""] + [f"![{f}]({f})" for f in figures]
    return "\n".join(md) + "\n"


def _figures(model, g, ok, th, mm, mm_exact, q, finite, worst, out: Path) -> list[str]:
    plt = pyplot("the figures of a check report")
    files = []

    def save(fig, name):
        fig.tight_layout()
        fig.savefig(out / name, dpi=110)
        plt.close(fig)
        files.append(name)

    R, _, Rx = q["radius_km"]
    L, _, Lx = q["tidal_deformability"]
    fig, ax = plt.subplots(1, 3, figsize=(13, 4.2))
    ax[0].plot(mm_exact, mm, ".", ms=3)
    ax[0].set(xlabel="exact M_max [Msun]", ylabel="emulated M_max [Msun]", title="maximum mass")
    ax[1].plot(Rx[finite], R[finite], ".", ms=2)
    ax[1].set(xlabel="exact R(M) [km]", ylabel="emulated R(M) [km]", title="radius at fixed masses")
    ax[2].loglog(Lx[finite], L[finite], ".", ms=2)
    ax[2].set(xlabel="exact Lambda(M)", ylabel="emulated Lambda(M)", title="tidal deformability")
    for a in ax:
        lim = [min(a.get_xlim()[0], a.get_ylim()[0]), max(a.get_xlim()[1], a.get_ylim()[1])]
        a.plot(lim, lim, "k-", lw=0.6)
    save(fig, "parity.png")

    dR = (R - Rx)[finite] * 1000.0
    dL = (L / Lx - 1.0)[finite] * 100.0
    fig, ax = plt.subplots(1, 3, figsize=(13, 4))
    ax[0].hist((mm - mm_exact) * 1000.0, bins=60)
    ax[0].set(xlabel="M_max error [1e-3 Msun]", ylabel="points")
    ax[1].hist(np.clip(dR, -200, 200), bins=80)
    ax[1].set(xlabel="R(M) error [m] (clipped at 200 m)", ylabel="stars")
    ax[2].hist(np.clip(dL, -5, 5), bins=80)
    ax[2].set(xlabel="Lambda(M) error [%] (clipped at 5 %)", ylabel="stars")
    save(fig, "error_histograms.png")

    d = th.shape[1]
    fig, ax = plt.subplots(2, d, figsize=(3.4 * d, 6.2), squeeze=False)
    worst_r = np.where(finite, np.abs(R - Rx), np.nan)
    worst_r = np.nanmax(np.where(np.isfinite(worst_r), worst_r, -1), axis=1) * 1000.0
    for i, name in enumerate(model.parameter_names):
        ax[0, i].semilogy(th[:, i], np.maximum(worst_r, 1e-3), ".", ms=3)
        ax[0, i].set(xlabel=name, ylabel="largest R(M) error [m]" if i == 0 else None)
        ax[1, i].semilogy(th[:, i], np.maximum(np.abs(mm - mm_exact), 1e-7), ".", ms=3)
        ax[1, i].set(xlabel=name, ylabel="M_max error [Msun]" if i == 0 else None)
    save(fig, "error_vs_parameters.png")

    k = min(4, len(worst))
    fig, ax = plt.subplots(1, max(k, 1), figsize=(4 * max(k, 1), 4), squeeze=False)
    ok_idx = np.flatnonzero(ok)
    for j, i in enumerate(worst[:k]):
        gi = ok_idx[i]
        a = ax[0, j]
        a.plot(g.curves["radius_km"][gi], g.curves["mass_msun"][gi], "k.-", ms=3, label="exact (grid nodes)")
        masses, radii, _ = model.curve(th[i], n=120)
        a.plot(radii[0], masses[0], "r-", lw=1.2, label="emulated")
        a.set(xlabel="R [km]", ylabel="M [Msun]", title=", ".join(f"{v:.3g}" for v in th[i]))
        a.legend(fontsize=7)
    save(fig, "worst_mass_radius.png")
    return files
