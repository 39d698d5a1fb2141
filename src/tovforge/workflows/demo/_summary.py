"""The demo's last stage: figures, ``summary.json`` and ``summary.md``."""

from __future__ import annotations

import dataclasses
import json
from dataclasses import dataclass
from pathlib import Path

from ..._jsonfile import jsonable
from ._plots import band_plot, corner_plot, trace_plot

__all__ = ["Figures", "Summary", "draw_figures", "settings_numbers", "write_summary"]


@dataclass(frozen=True)
class Figures:
    """The demo's figures.

    Attributes
    ----------
    files : dict of str to Path
        ``corner``, ``mass_radius`` and ``trace`` (PNG files).
    """

    files: dict


@dataclass(frozen=True)
class Summary:
    """The demo's written summary.

    Attributes
    ----------
    files : dict of str to Path
        ``summary_json`` and ``summary`` (the Markdown file).
    numbers : dict
        Everything ``summary.json`` holds.
    """

    files: dict
    numbers: dict


def draw_figures(out: Path, inputs, sampler_model: str, names, bounds, sampling, comparison, n_burn: int,
                 units=None) -> Figures:
    """Corner plot, mass-radius and Lambda bands with the observations, chain traces."""
    obs, chain, cc = inputs.obs, sampling.chain, comparison.cc
    title = (f"{len(chain.samples)} posterior samples, exported {sampler_model} evaluator; data: "
             f"{'INVENTED (demo)' if 'invent' in obs.note.lower() else obs.path.name}")
    # the exact band and the emulated band over the same re-solved samples, beside the band of all samples
    exact_band = {"mass": cc.masses, "n": cc.n_samples, **{k: cc.exact[k] for k in ("median", "p05", "p95")},
                  **{f"emulated_{k}": cc.emulated[k] for k in ("median", "p05", "p95")}}
    return Figures({
        "corner": corner_plot(out / "corner.png", chain.samples, names, bounds, inputs.marker, title, units),
        "mass_radius": band_plot(out / "mass_radius.png", sampling.band, exact_band, obs, inputs.generator_curve,
                                 title),
        "trace": trace_plot(out / "trace.png", chain.chain, names, n_burn),
    })


def settings_numbers(settings) -> dict:
    """The demo's settings as JSON-able numbers (paths as text)."""
    return {k: (str(v) if isinstance(v, Path) else v) for k, v in dataclasses.asdict(settings).items()}


def write_summary(out: Path, numbers: dict, obs, files: dict, reports: dict) -> Summary:
    """Write ``summary.json`` (``numbers``) and ``summary.md`` (which links ``files``)."""
    written = {"summary_json": out / "summary.json", "summary": out / "summary.md"}
    written["summary_json"].write_text(json.dumps(jsonable(numbers, strict=False), indent=2))
    written["summary"].write_text(_summary_md(numbers, obs, {**files, **written}, out, reports))
    return Summary(written, numbers)


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
