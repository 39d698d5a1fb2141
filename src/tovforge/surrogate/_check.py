"""Checking a surrogate against held-out exact solves, and the report it writes."""

from __future__ import annotations

import dataclasses
import json
import shutil
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .._extras import require
from .._files import check_output, publish_folder, remove_litter, temp_path
from .._provenance import provenance
from ..errors import InputError
from ..status import Status
from ._meta import LearningPoint
from ._model import Surrogate
from ._record import Record, nested

__all__ = ["check", "CheckReport", "ErrorStats", "Target", "Coverage", "WorstPoint", "CheckedModel", "Holdout",
           "TARGETS", "error_stats", "read_report", "REPORT_FORMAT"]

REPORT_FORMAT = "tovforge-check"

#: Accuracy targets on the demo box (DESIGN targets): floor and goal of the
#: 95th percentile of the held-out error.
TARGETS = {
    "mass_max_msun": {"stat": "abs_p95", "floor": 0.01, "goal": 0.002, "unit": "Msun"},
    "radius_km": {"stat": "abs_p95", "floor": 0.050, "goal": 0.010, "unit": "km"},
    "tidal_deformability": {"stat": "rel_p95", "floor": 0.02, "goal": 0.005, "unit": "relative"},
}
#: The error of each target in the report's error table.
_TARGET_ERRORS = {"mass_max_msun": "mass_max_msun", "radius_km": "radius_km_at_mass",
                  "tidal_deformability": "tidal_deformability_at_mass"}
CHECK_MASS_LOW = 1.0
CHECK_MAX_GAP = 0.02


@dataclass(frozen=True)
class ErrorStats(Record):
    """Median, 95th percentile and maximum of the absolute and relative errors of one output."""

    n: int
    abs_median: float
    abs_p95: float
    abs_max: float
    rel_median: float
    rel_p95: float
    rel_max: float


@dataclass(frozen=True)
class Target(Record):
    """A project target for the 95th percentile of a held-out error, and whether it is met."""

    stat: str
    floor: float
    goal: float
    unit: str
    value: float
    meets_floor: bool
    meets_goal: bool


@dataclass(frozen=True)
class Coverage(Record):
    """Fraction of held-out errors inside the predicted 1 and 2 sigma (a Gaussian gives 0.683 and 0.954)."""

    within_1_sigma: float
    within_2_sigma: float
    n: int


@dataclass(frozen=True)
class WorstPoint(Record):
    """A held-out EOS with one of the largest radius errors."""

    parameters: dict
    mass_max_exact_msun: float
    mass_max_error_msun: float
    radius_error_max_km: float
    at_mass_msun: float
    lambda_rel_error_max: float


@dataclass(frozen=True)
class CheckedModel(Record):
    """Which model was checked."""

    kind: str
    method: str = ""
    family: str = ""
    n_train: int = 0
    training_grid: str = ""
    training_grid_sha256: str = ""


@dataclass(frozen=True)
class Holdout(Record):
    """The held-out exact solves a model was checked on, and which of them were compared."""

    path: str
    content_sha256: str = ""
    n_points: int = 0
    n_used: int = 0
    masses_msun: tuple = ()
    mass_rule: str = ""
    n_star_comparisons: int = 0
    n_emulated_nan: int = 0


@dataclass(frozen=True)
class CheckReport(Record):
    """Outcome of :func:`check` (written as ``report.json``).

    Attributes
    ----------
    model : CheckedModel
    holdout : Holdout
    errors : dict of str to ErrorStats
        Per output (``mass_max_msun``, ``radius_km_at_mass``, ...).
    targets : dict of str to Target
    calibration : dict of str to Coverage
        Sigma calibration (models with a predictive sigma; empty otherwise).
    worst : tuple of WorstPoint
        The ten held-out EOS with the largest radius errors.
    learning_curve : tuple of LearningPoint
        The model's own learning curve (``grid refine``), if any.
    created_utc, tovforge_version, python_version, numpy_version, git_commit : str
        Provenance (:func:`tovforge._provenance.provenance`).
    report_dir : str or None
        Where the report files were written (not part of report.json).
    """

    model: CheckedModel = nested(CheckedModel)
    holdout: Holdout = nested(Holdout)
    errors: dict = nested(ErrorStats, mapping=True, default_factory=dict)
    targets: dict = nested(Target, mapping=True, default_factory=dict)
    calibration: dict = nested(Coverage, mapping=True, default_factory=dict)
    worst: tuple = nested(WorstPoint, many=True, default=())
    learning_curve: tuple = nested(LearningPoint, many=True, default=())
    created_utc: str = ""
    tovforge_version: str = ""
    python_version: str = ""
    numpy_version: str = ""
    git_commit: str = ""
    format: str = REPORT_FORMAT
    report_dir: str | None = field(default=None, compare=False)

    def to_json(self) -> dict:
        out = super().to_json()
        out.pop("report_dir")
        return out

    def table(self) -> str:
        """The error table as aligned text."""
        return _text_table(self)

    def markdown(self, figures=()) -> str:
        """The report as Markdown, linking the figure files ``figures``."""
        return _markdown(self, figures)


def read_report(path, error_cls=InputError) -> CheckReport:
    """Read ``report.json`` of :func:`check` (or the folder holding it).

    Raises
    ------
    error_cls
        If the file is missing, not JSON, or not a check report.
    """
    from .._jsonfile import read_json

    path = Path(path)
    if path.is_dir():
        path = path / "report.json"
    if not path.is_file():
        raise error_cls(f"{path}: no such report (a check of the model against held-out exact solves writes one "
                        "into its report folder).")
    raw = read_json(path, error_cls)
    if not isinstance(raw, dict) or raw.get("format") != REPORT_FORMAT:
        got = raw.get("format") if isinstance(raw, dict) else None
        raise error_cls(f"{path}: not a report of `tovforge check` (format {got!r}).")
    try:
        return CheckReport.from_json(raw)
    except (TypeError, KeyError, ValueError, AttributeError) as exc:
        raise error_cls(f"{path}: incomplete check report ({exc}).") from None


def error_stats(pred, exact) -> ErrorStats:
    """Median, 95th percentile and maximum of absolute and relative errors."""
    pred, exact = np.asarray(pred, float).ravel(), np.asarray(exact, float).ravel()
    err = pred - exact
    ab = np.abs(err)
    rel = ab / np.abs(exact)
    return ErrorStats(
        n=int(ab.size),
        abs_median=float(np.median(ab)),
        abs_p95=float(np.percentile(ab, 95)),
        abs_max=float(np.max(ab)),
        rel_median=float(np.median(rel)),
        rel_p95=float(np.percentile(rel, 95)),
        rel_max=float(np.max(rel)),
    )


def _read_holdout(path, model: Surrogate, allow_mismatch: bool = False):
    from ..grid import read_grid

    g = read_grid(path, allow_mismatch)  # InputError for a missing, foreign, damaged or altered file
    if g.family != model.family:
        raise InputError(f"{path}: held-out grid of family {g.family!r}, but the model is of family {model.family!r}.")
    if list(g.parameter_names) != list(model.parameter_names):
        raise InputError(f"{path}: parameters {list(g.parameter_names)} differ from the model's "
                         f"{list(model.parameter_names)}.")
    for k in ("radius_km", "tidal_deformability"):
        if k not in g.at_mass:
            raise InputError(f"{path}: held-out grid lacks at_mass {k!r} (needed for the check).")
    return g


def _coverage(err, sd) -> Coverage:
    z = np.abs(err) / sd
    return Coverage(within_1_sigma=float(np.mean(z <= 1.0)), within_2_sigma=float(np.mean(z <= 2.0)), n=int(z.size))


def check(model: Surrogate, holdout_path, report_dir=None, *, overwrite: bool = False,
          allow_mismatch: bool = False) -> CheckReport:
    """Compare a surrogate with held-out exact solves.

    Held-out points with status ok inside the model's box are used; points
    that coincide with training points are refused (never evaluate on
    training data).  Every curve the model emulates that the held-out grid
    stores at fixed masses (radius, Lambda, I) is compared at those masses
    from 1.0 Msun up to ``M_max - 0.02`` (of the exact solve), through the
    same query path users call.

    Parameters
    ----------
    model : Surrogate
    holdout_path : path
        Grid file of exact solves not used in training.
    report_dir : path, optional
        Where to write ``report.json``, ``report.md`` and the PNG figures (a
        new folder, written whole and then renamed: see :meth:`Surrogate.save`).
    overwrite : bool
        Replace an existing report folder.
    allow_mismatch : bool
        Check against a held-out grid whose datasets do not match its
        content hash (forensics only).

    Returns
    -------
    CheckReport
    """
    if report_dir is not None:  # before the work, not after it
        check_output(report_dir, "report folder", overwrite, folder=True)
        require("matplotlib", "plots", "the figures of a check report")
    g = _read_holdout(holdout_path, model, allow_mismatch)
    theta = np.asarray(g.parameters, float)
    ok = (np.asarray(g.status) == Status.OK) & model.in_domain(theta)
    if ok.sum() == 0:
        raise InputError(f"{holdout_path}: no held-out point with status ok inside the model's box.")
    th = theta[ok]
    same = model.coincides_with_training(th)
    if same.any():
        raise InputError(f"{holdout_path}: {int(same.sum())} held-out points are training points; "
                         "check against a grid made with another design or seed.")
    mm_exact = g.scalars["mass_max_msun"][ok]
    sigma = model.has_std
    est = model.mass_max(th, return_std=sigma)
    mm, mm_std = est.value, est.std
    masses = np.asarray(g.masses_msun, float)
    sel = (masses[None, :] >= CHECK_MASS_LOW - 1e-9) & (masses[None, :] <= mm_exact[:, None] - CHECK_MAX_GAP)
    sel &= np.isfinite(g.at_mass["radius_km"][ok])
    q = {}  # quantity -> (emulated, its sigma, exact) at the held-out masses
    for o in model.meta.outputs.curves:
        if o.query and o.quantity in g.at_mass:
            e = getattr(model, o.query)(th, masses, return_std=sigma)
            q[o.quantity] = (e.value, e.std, g.at_mass[o.quantity][ok])
    outside = sel & ~np.isfinite(q["radius_km"][0])
    pred = model.predict(th)
    errors = {"mass_max_msun": error_stats(mm, mm_exact)}
    if "radius_at_mass_max_km" in g.scalars:  # the u = 0 node is the maximum-mass star
        errors["radius_at_mass_max_km"] = error_stats(pred.radius_km[:, 0], g.scalars["radius_at_mass_max_km"][ok])
    errors["max_sound_speed_sq"] = error_stats(pred.max_sound_speed_sq, g.scalars["max_sound_speed_sq"][ok])
    finite = sel & np.isfinite(q["radius_km"][0])
    for name, (val, _, exact) in q.items():
        m = finite & np.isfinite(exact)
        errors[f"{name}_at_mass"] = error_stats(val[m], exact[m])
    targets = {}
    for key, t in TARGETS.items():
        v = getattr(errors[_TARGET_ERRORS[key]], t["stat"])
        targets[key] = Target(**t, value=v, meets_floor=bool(v <= t["floor"]), meets_goal=bool(v <= t["goal"]))
    calibration = {}
    if sigma:
        calibration["mass_max_msun"] = _coverage(mm - mm_exact, mm_std)
        for name in ("radius_km", "tidal_deformability"):
            val, std, exact = q[name]
            m = finite & np.isfinite(exact)
            calibration[name] = _coverage(val[m] - exact[m], std[m])
    worst, order = _worst(model, th, mm, mm_exact, masses, q, finite)
    report = CheckReport(
        model=CheckedModel(kind=model.kind, method=model.method, family=model.family, n_train=model.n_train,
                           training_grid=model.meta.training.grid_path,
                           training_grid_sha256=model.meta.training.grid_content_sha256),
        holdout=Holdout(path=str(holdout_path), content_sha256=str(g.attrs.get("content_sha256", "")),
                        n_points=int(len(theta)), n_used=int(ok.sum()), masses_msun=tuple(masses.tolist()),
                        mass_rule=f">= {CHECK_MASS_LOW} and <= M_max - {CHECK_MAX_GAP}",
                        n_star_comparisons=int(sel.sum()), n_emulated_nan=int(outside.sum())),
        errors=errors, targets=targets, calibration=calibration, worst=worst,
        learning_curve=model.meta.learning_curve,
        **provenance(),
    )
    if report_dir is not None:
        from ._report_figures import figures

        report_dir = Path(report_dir)
        report = dataclasses.replace(report, report_dir=str(report_dir))
        remove_litter(report_dir)
        tmp = temp_path(report_dir)
        tmp.mkdir()
        try:  # written whole into a new folder, which then takes the name
            (tmp / "report.json").write_text(json.dumps(report.to_json(), indent=2), encoding="utf-8")
            files = figures(model, g, ok, th, mm, mm_exact, q, finite, order, tmp)
            (tmp / "report.md").write_text(report.markdown(files), encoding="utf-8")
            publish_folder(tmp, report_dir, "report folder", overwrite)
        finally:
            shutil.rmtree(tmp, ignore_errors=True)
    return report


def _worst(model, th, mm, mm_exact, masses, q, finite, n: int = 10):
    """The ``n`` held-out EOS with the largest radius errors, and their rows (largest first)."""
    rerr = np.where(finite, np.abs(q["radius_km"][0] - q["radius_km"][2]), -np.inf)
    worst_r = rerr.max(axis=1)
    order = np.argsort(worst_r)[::-1][:n]
    out = []
    for i in order:
        if not np.isfinite(worst_r[i]):
            continue
        lam_rel = np.where(finite[i], np.abs(q["tidal_deformability"][0][i] / q["tidal_deformability"][2][i] - 1),
                           -np.inf)
        out.append(WorstPoint(
            parameters=dict(zip(model.parameter_names, th[i].tolist())),
            mass_max_exact_msun=float(mm_exact[i]),
            mass_max_error_msun=float(mm[i] - mm_exact[i]),
            radius_error_max_km=float(worst_r[i]),
            at_mass_msun=float(masses[np.argmax(rerr[i])]),
            lambda_rel_error_max=float(np.max(lam_rel)),
        ))
    return tuple(out), order


def _model_label(r: CheckReport) -> str:
    m = r.model
    return m.kind if not m.method or m.method == m.kind else f"{m.kind} ({m.method})"


def _text_table(r: CheckReport) -> str:
    lines = [f"held-out check of a {_model_label(r)} model ({r.model.n_train} training points) "
             f"on {r.holdout.n_used} exact EOS, {r.holdout.n_star_comparisons} stars"]
    head = f"{'output':<34}{'abs median':>12}{'abs p95':>11}{'abs max':>11}{'rel median':>12}{'rel p95':>10}{'rel max':>10}"
    lines.append(head)
    for name, s in r.errors.items():
        lines.append(f"{name:<34}{s.abs_median:>12.3g}{s.abs_p95:>11.3g}{s.abs_max:>11.3g}"
                     f"{s.rel_median:>12.2e}{s.rel_p95:>10.2e}{s.rel_max:>10.2e}")
    lines.append("targets (p95):")
    for key, t in r.targets.items():
        verdict = "meets goal" if t.meets_goal else ("meets floor" if t.meets_floor else "MISSES FLOOR")
        lines.append(f"  {key:<22} {t.value:.4g} {t.unit} (floor {t.floor:g}, goal {t.goal:g}): {verdict}")
    if r.calibration:
        lines.append("GP calibration (fraction of errors within the predicted sigma; Gaussian: 0.683 and 0.954):")
        for k, c in r.calibration.items():
            lines.append(f"  {k:<22} 1 sigma {c.within_1_sigma:.3f}   2 sigma {c.within_2_sigma:.3f}")
    return "\n".join(lines)


def _markdown(r: CheckReport, figures) -> str:
    md = ["# Surrogate check", "",
          f"Model: **{_model_label(r)}** of `{r.model.family}`, "
          f"{r.model.n_train} training points ({r.model.training_grid}).",
          f"Held-out: `{r.holdout.path}`, {r.holdout.n_used} exact EOS (status ok, in the box), "
          f"{r.holdout.n_star_comparisons} stars at masses {r.holdout.mass_rule}.",
          f"Created {r.created_utc} with tovforge {r.tovforge_version}.", "",
          "## Errors", "",
          "| output | abs median | abs p95 | abs max | rel median | rel p95 | rel max |",
          "|---|---|---|---|---|---|---|"]
    for name, s in r.errors.items():
        md.append(f"| {name} | {s.abs_median:.3g} | {s.abs_p95:.3g} | {s.abs_max:.3g} | "
                  f"{s.rel_median:.2e} | {s.rel_p95:.2e} | {s.rel_max:.2e} |")
    md += ["", "Units: Msun for masses, km for radii, 1e45 g cm^2 for I; Lambda is dimensionless.", "",
           "## Targets (95th percentile of the held-out error)", "", "| quantity | value | floor | goal | verdict |",
           "|---|---|---|---|---|"]
    for key, t in r.targets.items():
        verdict = "goal" if t.meets_goal else ("floor" if t.meets_floor else "**misses the floor**")
        md.append(f"| {key} | {t.value:.4g} {t.unit} | {t.floor:g} | {t.goal:g} | {verdict} |")
    if r.calibration:
        md += ["", "## GP calibration", "",
               "Fraction of held-out errors inside the predicted 1 and 2 sigma (a Gaussian gives 0.683 and 0.954).", "",
               "| output | within 1 sigma | within 2 sigma |", "|---|---|---|"]
        for k, c in r.calibration.items():
            md.append(f"| {k} | {c.within_1_sigma:.3f} | {c.within_2_sigma:.3f} |")
    if r.learning_curve:
        md += ["", "## Error against training size (refinement)", "",
               "| training points | M_max p95 [Msun] | R p95 [km] | Lambda p95 [rel] |", "|---|---|---|---|"]
        for row in r.learning_curve:
            md.append(f"| {row.n_train} | {row.mass_max_p95:.4g} | {row.radius_p95_km:.4g} | {row.lambda_rel_p95:.3g} |")
    md += ["", "## Ten worst points (largest radius error)", "", "| parameters | M_max exact | M_max error | "
           "R error max [km] | at M | Lambda rel error max |", "|---|---|---|---|---|---|"]
    for w in r.worst:
        pars = ", ".join(f"{k}={v:.4g}" for k, v in w.parameters.items())
        md.append(f"| {pars} | {w.mass_max_exact_msun:.4f} | {w.mass_max_error_msun:+.2e} | "
                  f"{w.radius_error_max_km:.4f} | {w.at_mass_msun:.1f} | {w.lambda_rel_error_max:.2e} |")
    md += ["", "## Figures", ""] + [f"![{f}]({f})" for f in figures]
    return "\n".join(md) + "\n"
