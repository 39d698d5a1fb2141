"""The end-to-end demo: grids -> surrogates -> check -> export -> a Bayesian fit with the exported file.

Every stage calls the library (no shelling out) and prints what it does; the
figures, tables and ``summary.md`` land in one output folder.
"""

from __future__ import annotations

import dataclasses
import importlib.util
import json
import logging
import time
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from .. import __version__
from .._extras import require
from .._jsonfile import jsonable
from .._provenance import provenance
from ..errors import InputError
from ..surrogate import GPSettings
from ..surrogate._kinds import kinds

__all__ = ["DemoSettings", "DemoResult", "run_demo", "import_evaluator", "BAND_MASSES"]

logger = logging.getLogger(__name__)

#: Masses of the posterior bands (Msun).
BAND_MASSES = tuple(float(m) for m in np.round(np.arange(1.0, 2.401, 0.05), 2))
KINDS = kinds()


@dataclass(frozen=True)
class DemoSettings:
    """What the demo runs, and how long.

    Attributes
    ----------
    train_spec, holdout_spec : Path
        Grid specs (TOML).  Each grid file is the spec's path with ``.h5``; an
        existing file of the same spec is reused, otherwise it is built.
    n_train : int or None
        Train on the first ``n_train`` usable points only (None: all).
    gp : GPSettings
        Hyperparameter search of the Gaussian process.
    sampler_model : {"spline", "gp"}
        Which exported evaluator the sampler calls.
    n_walkers, n_steps, n_burn : int
        Ensemble size, steps per walker, and steps discarded as burn-in.
    n_cross_check : int
        Posterior samples re-solved with the exact solver.
    data : Path or None
        Observations file (None: the invented data shipped with the package).
    mass_low_msun, n_mass, n_mass_ratio
        Likelihood grids (see :class:`tovforge.demo.Posterior`).
    band_masses : tuple of float
        Masses of the posterior bands, in Msun.
    seed : int
    workers : int or None
        Worker processes for grid building (None: all cores).
    progress : bool
        Progress bars while building grids.
    """

    train_spec: Path = Path("grids/demo-train.toml")
    holdout_spec: Path = Path("grids/demo-holdout.toml")
    n_train: int | None = None
    gp: GPSettings = field(default_factory=lambda: GPSettings(n_subset=512, n_restarts=0))
    sampler_model: str = "spline"
    n_walkers: int = 32
    n_steps: int = 1500
    n_burn: int = 500
    n_cross_check: int = 300
    data: Path | None = None
    mass_low_msun: float = 1.0
    n_mass: int = 65
    n_mass_ratio: int = 33
    band_masses: tuple = BAND_MASSES
    seed: int = 20260301
    workers: int | None = None
    progress: bool = True

    @classmethod
    def quick(cls, **changes) -> "DemoSettings":
        """A smoke run well under a minute: 512 training points, a short chain, 100 exact re-solves."""
        base = dict(n_train=512, gp=GPSettings(n_subset=128, n_restarts=0), n_steps=400, n_burn=150,
                    n_cross_check=100)
        return cls(**{**base, **changes})

    def check(self) -> None:
        """Raise InputError for settings that cannot work."""
        if self.sampler_model not in KINDS:
            raise InputError(f"sampler_model must be one of {', '.join(KINDS)}; got {self.sampler_model!r}.")
        if self.n_train is not None and self.n_train < 16:
            raise InputError(f"n_train must be at least 16. Got {self.n_train}.")
        if not 0 <= self.n_burn < self.n_steps:
            raise InputError(f"the burn-in n_burn ({self.n_burn} steps) must be shorter than the chain n_steps "
                             f"({self.n_steps}).")
        if self.n_cross_check < 2:
            raise InputError(f"n_cross_check must be at least 2. Got {self.n_cross_check}.")
        for key in ("n_mass", "n_mass_ratio"):
            v = getattr(self, key)
            if v < 3 or v % 2 == 0:
                raise InputError(f"{key} must be odd and at least 3 (Simpson's rule). Got {v}.")


@dataclass(frozen=True)
class DemoResult:
    """What :func:`run_demo` produced.

    Attributes
    ----------
    out : Path
    files : dict of str to Path
        Every output file by role (``summary``, ``corner``, ``mass_radius``, ...).
    numbers : dict
        The measured numbers also written to ``summary.json``.
    failures : tuple of str
        Stages that failed without stopping the demo (for example an export).
    """

    out: Path
    files: dict
    numbers: dict
    failures: tuple = ()


def import_evaluator(path, name: str | None = None):
    """Import an exported evaluator file as a module (without touching ``sys.path``)."""
    path = Path(path)
    name = name or f"_tovforge_demo_{path.stem}"
    spec = importlib.util.spec_from_file_location(name, path)
    mod = importlib.util.module_from_spec(spec)
    spec.loader.exec_module(mod)
    return mod


def _best_seconds(fn, repeat: int) -> float:
    """Fastest of ``repeat`` timed calls after a warm-up call.

    The fastest, as ``timeit`` advises: on a shared machine the slower
    repeats measure the other processes, not the code.
    """
    fn()
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return float(best)


def _interval(x) -> tuple[float, float, float]:
    lo, med, hi = np.quantile(np.asarray(x, float), [0.05, 0.5, 0.95])
    return float(med), float(lo), float(hi)


def _subset(data, n):
    """The first ``n`` rows of training data (a Sobol prefix stays space-filling)."""
    if n is None or n >= len(data.theta):
        return data
    return dataclasses.replace(
        data, theta=data.theta[:n], scalars={k: v[:n] for k, v in data.scalars.items()},
        curves={k: v[:n] for k, v in data.curves.items()}, regular_shape=None)


def run_demo(out="demo-output", settings: DemoSettings | None = None) -> DemoResult:
    """Run the whole demo and write its outputs into ``out``.

    BLAS runs on one thread (grid workers and GP hyperparameter workers are
    processes of their own): the demo's matrix products are small, and on a
    shared machine OpenBLAS threads that wait for a busy core made the
    sampler up to 25 times slower (measured: 6.5 ms instead of 0.24 ms per
    theta).  The timings are therefore per core.

    Parameters
    ----------
    out : path-like
        Output folder (created).
    settings : DemoSettings, optional

    Every stage reports what it does and measures through the ``tovforge``
    logger at level INFO: ``tovforge demo`` prints these lines; from Python,
    ``logging.basicConfig(level=logging.INFO)`` shows them.

    Returns
    -------
    DemoResult

    Raises
    ------
    tovforge.errors.InputError
        For bad settings, specs or observations (checked before the long stages).
    """
    for module in ("emcee", "matplotlib", "threadpoolctl"):  # before the work, not after it
        require(module, "demo", "the demo")
    from threadpoolctl import threadpool_limits

    with threadpool_limits(limits=1):
        return _run_demo(out, settings)


def _run_demo(out, settings) -> DemoResult:
    from ..export import ExportError, export_model
    from ..grid import load_spec, read_grid, run_grid
    from ..surrogate import check, read_training_data, train_on
    from ..tables import read_table, samples_table
    from ._crosscheck import cross_check
    from ._likelihood import ExactModel, Posterior
    from ._observations import WARN_RATIO, error_budget, load_observations
    from ._plots import band_plot, corner_plot, trace_plot
    from ._sampler import run_chain

    say = logger.info  # every line of the demo's report
    s = settings or DemoSettings()
    s.check()
    t_start = time.perf_counter()
    out = Path(out)
    # read everything the user supplied before the long stages
    obs = load_observations(s.data)
    for role, spec_path in (("training", s.train_spec), ("held-out", s.holdout_spec)):
        if not Path(spec_path).is_file():
            raise InputError(f"{spec_path}: no such grid spec; run the demo from the tovforge repository "
                             f"(make demo) or give the {role} grid's spec.")
    specs = {"train": load_spec(s.train_spec), "holdout": load_spec(s.holdout_spec)}
    # the EOS the data were made around (an exact solve; also checks its parameters now)
    marker, gen_curve = _generator(obs, specs["train"].family, specs["train"].parameter_names)
    out.mkdir(parents=True, exist_ok=True)
    files: dict = {}
    numbers: dict = {**provenance("scipy", "scikit-learn", "emcee"), "settings": {}, "stages_seconds": {}}
    failures: list[str] = []
    stage_t = time.perf_counter()
    n_stages = 8

    def stage(k: int, name: str, what: str) -> None:
        nonlocal stage_t
        now = time.perf_counter()
        say("")
        say(f"[{k}/{n_stages}] {name}: {what}")
        stage_t = now

    def done(name: str) -> None:
        numbers["stages_seconds"][name] = time.perf_counter() - stage_t
        say(f"  ({name} took {numbers['stages_seconds'][name]:.1f} s)")

    say(f"tovforge {__version__} demo -> {out}/")
    say(f"observations: {obs.path}")
    if obs.note:
        say(f"  NOTE: {obs.note}")

    # -- 1. grids ---------------------------------------------------------------------------
    stage(1, "grids", "exact solves over the EOS box (reused when the file of the same spec exists)")
    grid_paths = {}
    for role, spec_path in (("train", s.train_spec), ("holdout", s.holdout_spec)):
        spec = specs[role]
        gpath = Path(spec_path).with_suffix(".h5")
        summary = run_grid(spec, gpath, workers=s.workers, progress=s.progress)
        ok = summary.status_counts.get(0, 0)
        how = "reused" if summary.already_complete else f"built in {summary.seconds:.1f} s"
        say(f"  {role:<8}{gpath}: {spec.n_points} points ({spec.design.method}), {ok} solved, {how}; "
             f"spec {spec.sha256[:12]}")
        grid_paths[role] = gpath
    g_train = read_grid(grid_paths["train"])
    names = list(g_train.parameter_names)
    numbers["grids"] = {r: str(p) for r, p in grid_paths.items()}
    done("grids")

    # -- 2. training --------------------------------------------------------------------------
    gp = s.gp
    stage(2, "train", f"Gaussian process (hyperparameters on {gp.n_subset} points, {gp.n_restarts} restarts, "
                      f"{gp.curve_groups} kernels per curve) and spline (r^5 RBF or tensor splines)")
    data = _subset(read_training_data(grid_paths["train"]), s.n_train)
    models = {}
    for kind in KINDS:
        t0 = time.perf_counter()
        model = train_on(data, kind, gp if kind == "gp" else None)
        folder = model.save(out / "models" / kind)
        models[kind] = model
        say(f"  {kind:<7}{model.method} on {len(data.theta)} points in {time.perf_counter() - t0:.1f} s -> {folder}")
    numbers["training"] = {"n_train": int(len(data.theta)), "gp_settings": dataclasses.asdict(gp),
                           "seconds": {k: models[k].meta.training.seconds for k in KINDS}}
    done("train")

    # -- 3. check -------------------------------------------------------------------------------
    stage(3, "check", f"errors against the held-out exact solves of {grid_paths['holdout']}")
    reports = {}
    for kind in KINDS:
        res = check(models[kind], grid_paths["holdout"], out / "check" / kind)
        reports[kind] = res
        files[f"check_{kind}"] = out / "check" / kind / "report.md"
        say(f"  {kind}: report {files[f'check_{kind}']}")
        for line in res.table().splitlines():
            say(f"    {line}")
    numbers["check"] = {k: {"mass_max_abs_p95_msun": r.errors["mass_max_msun"].abs_p95,
                            "radius_abs_p95_km": r.errors["radius_km_at_mass"].abs_p95,
                            "radius_abs_median_km": r.errors["radius_km_at_mass"].abs_median,
                            "lambda_rel_p95": r.errors["tidal_deformability_at_mass"].rel_p95}
                        for k, r in reports.items()}
    done("check")

    # -- 4. export ------------------------------------------------------------------------------
    stage(4, "export", "each model as one NumPy-only Python file (self-checked against the library model)")
    evaluators = {}
    numbers["export"] = {}
    for kind in KINDS:
        target = out / "evaluators" / f"demo_{kind}.py"
        try:
            res = export_model(models[kind], target, reports[kind])
        except ExportError as exc:
            failures.append(f"export of the {kind} model: {exc}")
            say(f"  {kind}: EXPORT FAILED: {exc}")
            continue
        evaluators[kind] = import_evaluator(target, f"_tovforge_demo_{kind}_{id(res)}")
        files[f"evaluator_{kind}"] = target
        numbers["export"][kind] = {"path": str(target), "size_bytes": res.size_bytes,
                                   "max_rel_diff": res.max_rel_diff}
        say(f"  {kind}: {target} ({res.size_bytes / 1e6:.2f} MB); differs from the library model by at most "
             f"{res.max_rel_diff:.1e} (relative)")
        for ns, verdict in res.namespaces.items():
            say(f"    {ns}: {verdict}")
    if s.sampler_model not in evaluators:
        raise InputError(f"the {s.sampler_model} evaluator could not be exported, so the fit cannot run: "
                         f"{failures[-1]}")
    ev = evaluators[s.sampler_model]
    done("export")

    # -- 5. fit ---------------------------------------------------------------------------------
    stage(5, "fit", f"posterior of ({', '.join(names)}) with the exported {s.sampler_model} evaluator, "
                    f"uniform prior on the box, emcee with {s.n_walkers} walkers x {s.n_steps} steps")
    for p in obs.pulsars:
        say(f"  pulsar {p.name:<20} M = {p.mass_msun:.3f} +- {p.mass_sigma_msun:.3f} Msun, "
             f"R = {p.radius_km:.2f} +- {p.radius_sigma_km:.2f} km, correlation {p.correlation:+.2f}")
    for m in obs.mergers:
        say(f"  merger {m.name:<20} chirp mass {m.chirp_mass_msun:.4f} Msun, q in [{m.mass_ratio_min:g}, "
             f"{m.mass_ratio_max:g}], Lambda-tilde = {m.lambda_tilde:g} +- {m.lambda_tilde_sigma:g}")
    budget = error_budget(ev.CHECK, obs) if ev.CHECK else ()
    for b in budget:
        unit = " km" if b.quantity == "radius" else ""
        say(f"  {b.name:<27} emulator error (held-out p95) {b.emulator_p95:.3g}{unit} = {b.ratio:.2f} of the "
             f"{b.quantity} sigma" + ("" if not b.too_large else
                                       f"  WARNING: above {WARN_RATIO:g}: the emulator's error may bias this fit; "
                                       "train on more points or use the exact solver"))
    if any(b.too_large for b in budget):
        say(f"  WARNING: {sum(b.too_large for b in budget)} measurement(s) are as sharp as the emulator's error; "
             "read the posterior with care.")
    post = Posterior(ev, obs, mass_low_msun=s.mass_low_msun, n_mass=s.n_mass, n_mass_ratio=s.n_mass_ratio)
    chain = run_chain(post, ev.BOUNDS, n_walkers=s.n_walkers, n_steps=s.n_steps, n_burn=s.n_burn, seed=s.seed)
    tau = chain.autocorr_steps
    say(f"  {chain.n_evaluations} posterior evaluations in {chain.seconds:.1f} s; acceptance "
         f"{chain.acceptance_fraction:.2f}; autocorrelation time {np.nanmax(tau):.0f} steps "
         f"({(s.n_steps - s.n_burn) / np.nanmax(tau):.0f} times shorter than the kept chain); "
         f"{len(chain.samples)} samples kept (one step in {chain.thin} after the first {s.n_burn})")
    if not np.nanmax(tau) * 10 < s.n_steps - s.n_burn:
        say("  note: the kept chain is shorter than 10 autocorrelation times: take the intervals as rough")
    posterior_numbers = {}
    for i, name in enumerate(names):
        med, lo, hi = _interval(chain.samples[:, i])
        posterior_numbers[name] = {"median": med, "p05": lo, "p95": hi}
        say(f"  {name:<10} {med:.4g}  (90 %: {lo:.4g} .. {hi:.4g})")
    samples_csv = out / "posterior_samples.csv"
    header = ",".join(names) + ",log_posterior"
    np.savetxt(samples_csv, np.column_stack([chain.samples, chain.log_prob]), delimiter=",", header=header,
               comments="", fmt="%.17g")
    files["samples"] = samples_csv
    # per-sample observables and the band, through the samples tables (same model as the evaluator)
    tsum = samples_table(out / "posterior_table.csv", models[s.sampler_model], samples_csv,
                         quantities=("mass_max", "radius", "lambda"), masses=s.band_masses,
                         band=out / "posterior_band.csv", ignore=("log_posterior",), sigma=False, progress=False,
                         command="tovforge demo")
    files["table"], files["band"] = tsum.path, out / "posterior_band.csv"
    band_t = read_table(files["band"])
    band_dict = {k: np.asarray(v, float) for k, v in band_t.columns.items()}
    i14 = int(np.argmin(np.abs(band_dict["mass"] - 1.4)))
    derived = {"mass_max_msun": {k: float(band_t.meta[f"mass_max_{k}"]) for k in ("median", "p05", "p95")},
               "radius_1.4_km": {k: float(band_dict[f"radius_{k}"][i14]) for k in ("median", "p05", "p95")},
               "lambda_1.4": {k: float(band_dict[f"lambda_{k}"][i14]) for k in ("median", "p05", "p95")}}
    for k, v in derived.items():
        say(f"  {k:<14} {v['median']:.4g}  (90 %: {v['p05']:.4g} .. {v['p95']:.4g})")
    numbers["fit"] = {"sampler_model": s.sampler_model, "n_walkers": s.n_walkers, "n_steps": s.n_steps,
                      "n_burn": s.n_burn, "thin": chain.thin, "n_samples": int(len(chain.samples)),
                      "acceptance": chain.acceptance_fraction, "autocorr_steps": tau.tolist(),
                      "seconds": chain.seconds, "n_evaluations": chain.n_evaluations,
                      "parameters": posterior_numbers, "derived": derived,
                      "error_budget": [{"name": b.name, "quantity": b.quantity, "emulator_p95": b.emulator_p95,
                                        "measurement_sigma": b.measurement_sigma, "ratio": b.ratio,
                                        "too_large": b.too_large} for b in budget],
                      "error_budget_warn_ratio": WARN_RATIO}
    done("fit")

    # -- 6. timings -------------------------------------------------------------------------------
    stage(6, "timing", "one likelihood call with the exported evaluator against exact solves")
    from ..solve import solve_sequences

    exact_model = ExactModel(ev.FAMILY, ev.BOUNDS)
    exact_post = Posterior(exact_model, obs, mass_low_msun=s.mass_low_msun, n_mass=s.n_mass,
                           n_mass_ratio=s.n_mass_ratio)
    rng = np.random.default_rng(s.seed + 1)
    pick = rng.choice(len(chain.samples), size=min(s.n_cross_check, len(chain.samples)), replace=False)
    subset = chain.samples[pick]
    # one theta: the most probable of the chosen samples (an EOS the exact solver surely handles)
    one = subset[[int(np.argmax(chain.log_prob[pick]))]]
    batch = subset[: min(s.n_walkers, len(subset))]
    t_emu_one = _best_seconds(lambda: post(one), 21)
    t_emu_batch = _best_seconds(lambda: post(batch), 11)
    others = {}
    for kind, other in evaluators.items():
        if kind != s.sampler_model:
            p_other = Posterior(other, obs, mass_low_msun=s.mass_low_msun, n_mass=s.n_mass,
                                n_mass_ratio=s.n_mass_ratio)
            others[kind] = (_best_seconds(lambda: p_other(one), 11) * 1e6,
                            _best_seconds(lambda: p_other(batch), 5) / len(batch) * 1e6)
    t_exact_one = _best_seconds(lambda: exact_post(one), 2)
    if not np.isfinite(exact_post(one)[0]):
        say("  note: the exact likelihood is -inf at the timed theta, so its time is not that of a full solve")
    family = exact_model.family
    mm_one = ev.mass_max(one).value
    solve_masses = np.concatenate([post.pulsar_masses(mm_one)[0]]
                                  + [m[0] for m1, m2, _ in post.merger_pairs(mm_one) for m in (m1, m2)])
    t_solve_one = _best_seconds(lambda: solve_sequences(family.build(one), n_stars=16, masses=solve_masses), 2)
    timing = {
        "likelihood_emulated_one_us": t_emu_one * 1e6,
        "likelihood_emulated_batch_us_per_theta": t_emu_batch / len(batch) * 1e6,
        "batch_size": int(len(batch)),
        "likelihood_exact_one_ms": t_exact_one * 1e3,
        "exact_solve_one_ms": t_solve_one * 1e3,
        "exact_solve_masses": int(solve_masses.size),
        "other_evaluators_us": {k: {"one": v[0], "batch_per_theta": v[1]} for k, v in others.items()},
    }
    say(f"  likelihood, exported {s.sampler_model} evaluator: {timing['likelihood_emulated_one_us']:.0f} us per "
         f"call (one theta); {timing['likelihood_emulated_batch_us_per_theta']:.0f} us per theta in a call of "
         f"{len(batch)} walkers")
    for kind, (one_us, batch_us) in others.items():
        say(f"  likelihood, exported {kind} evaluator (not used by the sampler): {one_us:.0f} us per call (one "
             f"theta); {batch_us:.0f} us per theta in a call of {len(batch)} walkers")
    say(f"  exact solve of one EOS (M_max and {solve_masses.size} stars): {timing['exact_solve_one_ms']:.1f} ms")
    say(f"  likelihood with exact solves (one theta, three solves): {timing['likelihood_exact_one_ms']:.1f} ms")
    done("timing")

    # -- 7. cross-check -------------------------------------------------------------------------------
    stage(7, "cross-check", f"{len(subset)} posterior samples re-solved exactly (batched), "
                            "bands and likelihoods compared")
    cc = cross_check(post, exact_post, subset, s.band_masses)
    n = cc.n_samples
    timing["likelihood_exact_batch_ms_per_theta"] = cc.exact_seconds / n * 1e3
    timing["exact_solve_batch_ms_per_eos"] = cc.exact_solve_seconds / n * 1e3
    timing["speedup_one"] = t_exact_one / t_emu_one
    timing["speedup_batch"] = (cc.exact_seconds / n) / (t_emu_batch / len(batch))
    stated = reports[s.sampler_model].errors["radius_km_at_mass"]
    stated_mm = reports[s.sampler_model].errors["mass_max_msun"]
    worst_band = max(cc.band_distance_km.values())
    if not cc.compared.any():
        verdict, ratio = "not compared", "no mass has enough samples with a star in both answers"
        verdict_text = f"the bands were not compared ({ratio})"
    else:
        verdict = "inside" if worst_band <= stated.abs_p95 else "OUTSIDE"
        ratio = f"{worst_band / stated.abs_p95:.2f} of it"
        verdict_text = f"the band distance is {verdict} it ({ratio})"
    say(f"  exact solves: {timing['exact_solve_batch_ms_per_eos']:.1f} ms per EOS in a batch of {n} "
         f"(M_max and {len(cc.masses)} stars); exact likelihood {timing['likelihood_exact_batch_ms_per_theta']:.1f}"
         f" ms per theta in a batch")
    say(f"  speed-up of the likelihood: {timing['speedup_one']:.0f}x for one theta, "
         f"{timing['speedup_batch']:.0f}x per theta in batches")
    say(f"  R(M) band, emulated vs exact (the same samples at each mass), largest distance over "
         f"{int(cc.compared.sum())} masses: " + ", ".join(f"{k} {v * 1000:.1f} m" for k, v in cc.band_distance_km.items()))
    say(f"  {cc.n_star_mismatch} of {n * len(cc.masses)} (sample, mass) pairs have a star in one answer only "
         "(M_max on either side of the mass)")
    say(f"  stated emulator error (held-out p95 of R(M)): {stated.abs_p95 * 1000:.1f} m -> {verdict_text}")
    say(f"  per sample: |R error| p95 {cc.radius_abs_p95_km * 1000:.1f} m, max {cc.radius_abs_max_km * 1000:.1f} m;"
         f" |M_max error| p95 {cc.mass_max_abs_p95_msun:.2e} Msun (held-out p95 {stated_mm.abs_p95:.2e});"
         f" |log L error| median {cc.log_like_abs_median:.3f}, p95 {cc.log_like_abs_p95:.3f}")
    numbers["timing"] = timing
    numbers["cross_check"] = {
        "n_samples": n, "masses_compared": [float(m) for m in cc.masses[cc.compared]],
        "band_distance_km": cc.band_distance_km, "n_star_mismatch": cc.n_star_mismatch,
        "n_pairs": n * len(cc.masses), "stated_radius_abs_p95_km": stated.abs_p95,
        "stated_mass_max_abs_p95_msun": stated_mm.abs_p95, "verdict": verdict, "verdict_detail": ratio,
        "verdict_text": verdict_text,
        "radius_abs_p95_km": cc.radius_abs_p95_km, "radius_abs_max_km": cc.radius_abs_max_km,
        "mass_max_abs_p95_msun": cc.mass_max_abs_p95_msun, "mass_max_abs_max_msun": cc.mass_max_abs_max_msun,
        "log_like_abs_median": cc.log_like_abs_median, "log_like_abs_p95": cc.log_like_abs_p95}
    done("cross-check")

    # -- 8. figures and summary -------------------------------------------------------------------------
    stage(8, "figures", "corner plot, M-R and Lambda bands with the observations, chain traces, summary.md")
    title = (f"{len(chain.samples)} posterior samples, exported {s.sampler_model} evaluator; data: "
             f"{'INVENTED (demo)' if 'invent' in obs.note.lower() else obs.path.name}")
    files["corner"] = corner_plot(out / "corner.png", chain.samples, names, ev.BOUNDS, marker, title)
    exact_band = {"mass": cc.masses, "n": n, **{k: cc.exact[k] for k in ("median", "p05", "p95")}}
    files["mass_radius"] = band_plot(out / "mass_radius.png", band_dict, exact_band, obs, gen_curve, title)
    files["trace"] = trace_plot(out / "trace.png", chain.chain, names, s.n_burn)
    numbers["settings"] = {k: (str(v) if isinstance(v, Path) else v) for k, v in dataclasses.asdict(s).items()}
    numbers["observations"] = {"path": str(obs.path), "note": obs.note, "names": list(obs.names)}
    numbers["failures"] = failures
    files["summary_json"] = out / "summary.json"
    files["summary"] = out / "summary.md"
    numbers["stages_seconds"]["figures"] = time.perf_counter() - stage_t
    numbers["total_seconds"] = time.perf_counter() - t_start
    files["summary_json"].write_text(json.dumps(jsonable(numbers, strict=False), indent=2))
    files["summary"].write_text(_summary_md(numbers, obs, files, out, reports))
    for k in ("corner", "mass_radius", "trace", "summary"):
        say(f"  {files[k]}")
    say("")
    say(f"demo finished in {numbers['total_seconds']:.0f} s" +
         (f" with {len(failures)} failure(s): " + "; ".join(failures) if failures else "") + f"; see {files['summary']}")
    return DemoResult(out, files, numbers, tuple(failures))


def _generator(obs, family: str, names):
    """Marker and exact curve of the observations' generating EOS, when it is of the model's family."""
    gen = dict(obs.generator)
    if not gen or gen.get("family") != family:
        return None, None
    from ..eos import make
    from ..solve import solve_sequence

    params = {k: v for k, v in gen.items() if k != "family"}
    try:
        eos = make(family, **params)
    except InputError as exc:
        raise InputError(f"{obs.path}: [generator]: {exc}") from None
    seq = solve_sequence(eos, n_stars=100)
    if not seq.success:
        return None, None
    b = seq.branch
    return np.array([params[n] for n in names], float), (b.mass_msun, b.radius_km, b.tidal_deformability)


def _rel(path: Path, out: Path) -> str:
    try:
        return str(Path(path).relative_to(out))
    except ValueError:
        return str(path)


def _summary_md(nb: dict, obs, files: dict, out: Path, reports: dict) -> str:
    fit, tm, cc = nb["fit"], nb["timing"], nb["cross_check"]
    tr = nb["training"]
    gp = tr["gp_settings"]
    lines = [
        "# tovforge demo", "",
        f"tovforge {nb['tovforge_version']} (git commit {nb['git_commit']}), {nb['created_utc']}, "
        f"Python {nb['python_version']}; total wall time {nb['total_seconds']:.0f} s.", "",
    ]
    if "invent" in obs.note.lower():
        lines += ["**The observations are INVENTED for this demo** (`" + _rel(obs.path, out) + "`): "
                  f"{obs.note}", ""]
    else:
        lines += [f"Observations: `{obs.path}`. {obs.note}", ""]
    lines += [
        "## Stages", "",
        "| stage | what | wall time |", "|---|---|---|",
        f"| grids | {nb['grids']['train']} (training), {nb['grids']['holdout']} (held out) | "
        f"{nb['stages_seconds']['grids']:.1f} s |",
        f"| train | GP (hyperparameters on {gp['n_subset']} points, {gp['n_restarts']} restarts, "
        f"{gp['curve_groups']} kernels per curve) and spline, on {tr['n_train']} points | "
        f"{nb['stages_seconds']['train']:.1f} s |",
        f"| check | held-out errors, reports: [gp]({_rel(files['check_gp'], out)}), "
        f"[spline]({_rel(files['check_spline'], out)}) | {nb['stages_seconds']['check']:.1f} s |",
        "| export | " + ", ".join(f"[{k}]({_rel(Path(v['path']), out)}) ({v['size_bytes'] / 1e6:.1f} MB)"
                                for k, v in nb["export"].items()) + f" | {nb['stages_seconds']['export']:.1f} s |",
        f"| fit | emcee, {fit['n_walkers']} walkers x {fit['n_steps']} steps ({fit['n_burn']} burn-in), exported "
        f"{fit['sampler_model']} evaluator | {nb['stages_seconds']['fit']:.1f} s |",
        f"| timing | likelihood with the evaluator and with exact solves | {nb['stages_seconds']['timing']:.1f} s |",
        f"| cross-check | {cc['n_samples']} posterior samples re-solved exactly | "
        f"{nb['stages_seconds']['cross-check']:.1f} s |",
        f"| figures | corner, bands, traces, this summary | {nb['stages_seconds']['figures']:.1f} s |",
        "",
    ]
    if nb["failures"]:
        lines += ["**Failures:**", ""] + [f"- {f}" for f in nb["failures"]] + [""]
    lines += ["## Emulator error (held-out exact solves, 95th percentile)", "",
              "| model | M_max [Msun] | R(M) [m] | Lambda(M) [relative] |", "|---|---|---|---|"]
    for k, c in nb["check"].items():
        lines.append(f"| {k} | {c['mass_max_abs_p95_msun']:.2e} | {c['radius_abs_p95_km'] * 1000:.1f} | "
                     f"{c['lambda_rel_p95']:.2%} |")
    lines += ["", "## Observations", "", "| object | kind | values |", "|---|---|---|"]
    for p in obs.pulsars:
        lines.append(f"| {p.name} | mass-radius | M = {p.mass_msun:g} +- {p.mass_sigma_msun:g} Msun, "
                     f"R = {p.radius_km:g} +- {p.radius_sigma_km:g} km, correlation {p.correlation:g} |")
    for m in obs.mergers:
        lines.append(f"| {m.name} | merger | chirp mass {m.chirp_mass_msun:g} Msun, q in [{m.mass_ratio_min:g}, "
                     f"{m.mass_ratio_max:g}], Lambda-tilde = {m.lambda_tilde:g} +- {m.lambda_tilde_sigma:g} |")
    if fit.get("error_budget"):
        lines += ["", f"Emulator error (held-out p95, {fit['sampler_model']}) in units of each measurement's sigma "
                  f"(flagged above {fit['error_budget_warn_ratio']:g}):", "",
                  "| object | quantity | emulator p95 | measurement sigma | ratio |", "|---|---|---|---|---|"]
        for b in fit["error_budget"]:
            flag = " **too large**" if b["too_large"] else ""
            lines.append(f"| {b['name']} | {b['quantity']} | {b['emulator_p95']:.3g} | {b['measurement_sigma']:.3g} "
                         f"| {b['ratio']:.3f}{flag} |")
    lines += ["", "## Posterior (median and 90 % interval)", "", "| quantity | median | 5 % | 95 % |", "|---|---|---|---|"]
    for name, v in list(fit["parameters"].items()) + list(fit["derived"].items()):
        lines.append(f"| {name} | {v['median']:.4g} | {v['p05']:.4g} | {v['p95']:.4g} |")
    lines += ["", f"Acceptance {fit['acceptance']:.2f}; autocorrelation time {max(fit['autocorr_steps']):.0f} steps; "
              f"{fit['n_samples']} samples kept (one step in {fit['thin']} after the burn-in): "
              f"[posterior_samples.csv]({_rel(files['samples'], out)}), "
              f"[posterior_table.csv]({_rel(files['table'], out)}), [posterior_band.csv]({_rel(files['band'], out)}).",
              "", "## Speed (measured in this run)", "",
              "Each figure is the fastest of several timed calls on one core (BLAS on one thread; the machine may "
              "be shared: slower repeats time the other processes).  The exact likelihood runs the same arithmetic on three exact solves "
              "(M_max, radii at the pulsar mass nodes, Lambdas at the merger mass nodes).", "",
              "| | one theta | per theta in a batch |", "|---|---|---|",
              f"| likelihood, exported {fit['sampler_model']} evaluator | {tm['likelihood_emulated_one_us']:.0f} us | "
              f"{tm['likelihood_emulated_batch_us_per_theta']:.0f} us ({tm['batch_size']} walkers per call) |",
              *[f"| likelihood, exported {k} evaluator | {v['one']:.0f} us | {v['batch_per_theta']:.0f} us |"
                for k, v in tm["other_evaluators_us"].items()],
              f"| likelihood, exact solves | {tm['likelihood_exact_one_ms']:.1f} ms | "
              f"{tm['likelihood_exact_batch_ms_per_theta']:.1f} ms ({cc['n_samples']} per call) |",
              f"| exact solve of one EOS | {tm['exact_solve_one_ms']:.1f} ms (M_max + {tm['exact_solve_masses']} stars) | "
              f"{tm['exact_solve_batch_ms_per_eos']:.1f} ms (M_max + {len(nb['settings']['band_masses'])} stars) |",
              f"| speed-up of the likelihood | {tm['speedup_one']:.0f}x | {tm['speedup_batch']:.0f}x |", "",
              "## Cross-check: exact re-solve of posterior samples", "",
              f"{cc['n_samples']} posterior samples were solved again with the exact solver.  Largest distance "
              f"between the emulated and the exact R(M) band (at each mass over the samples with a star there in "
              f"both) over the masses {cc['masses_compared'][0]:g} to {cc['masses_compared'][-1]:g} Msun "
              f"({cc['n_star_mismatch']} of {cc['n_pairs']} (sample, mass) pairs have a star in one answer only):"
              if cc["masses_compared"] else "no mass had enough samples:",
              "",
              "| band line | distance [m] |", "|---|---|"]
    for k, v in cc["band_distance_km"].items():
        lines.append(f"| {k} | {v * 1000:.1f} |")
    lines += ["", f"Stated emulator error (held-out p95 of R(M), {fit['sampler_model']}): "
              f"{cc['stated_radius_abs_p95_km'] * 1000:.1f} m: **{cc['verdict_text']}**.  "
              f"Per sample: |R error| p95 {cc['radius_abs_p95_km'] * 1000:.1f} m (max "
              f"{cc['radius_abs_max_km'] * 1000:.1f} m), |M_max error| p95 {cc['mass_max_abs_p95_msun']:.2e} Msun, "
              f"|log-likelihood error| median {cc['log_like_abs_median']:.3f} and p95 {cc['log_like_abs_p95']:.3f}.",
              "", "## Figures", "",
              f"![posterior]({_rel(files['corner'], out)})", "",
              f"![bands]({_rel(files['mass_radius'], out)})", "",
              f"![traces]({_rel(files['trace'], out)})", ""]
    return "\n".join(lines)
