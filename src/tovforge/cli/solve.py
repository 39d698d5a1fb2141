"""``tovforge families`` and ``tovforge solve``: the EOS families, and one EOS solved exactly."""

from __future__ import annotations

import json
import math
import warnings
from pathlib import Path
from typing import Annotated, Optional

import typer

from .. import __version__
from .._jsonfile import jsonable
from ..errors import InputError
from ._common import FamilyArg, ParametersArg, aligned, make_eos, parse_float_list, run

__all__ = ["families_cmd", "solve_cmd", "sequence_json", "write_stars_csv"]


def families_cmd():
    """List the EOS families with their parameters, units and default box."""
    from .. import eos

    for fam in eos.families().values():
        typer.echo(f"{fam.name}: {fam.description}")
        typer.echo(f"    reference: {fam.reference}")
        if not fam.numeric:
            typer.echo("    parameters: path=FILE (required), columns=NAMES, units=UNITS")
            continue
        for p in fam.parameters:
            unit = "" if p.unit == "1" else f" [{p.unit}]"
            typer.echo(
                f"    {p.name:<16}{unit:<22} allowed {p.range_text():<14} demo box [{p.box[0]:g}, {p.box[1]:g}]"
                f"  {p.description}"
            )


_SEQUENCE_COLUMNS = [
    ("mass_msun", "M [Msun]", "{:.6f}"),
    ("radius_km", "R [km]", "{:.5f}"),
    ("compactness", "C", "{:.5f}"),
    ("k2", "k2", "{:.6f}"),
    ("tidal_deformability", "Lambda", "{:.6g}"),
    ("moment_of_inertia_1e45_g_cm2", "I [1e45 g cm^2]", "{:.6g}"),
    ("baryon_mass_msun", "M_b [Msun]", "{:.6f}"),
    ("central_pressure_dyn_cm2", "p_c [dyn/cm^2]", "{:.6e}"),
    ("central_energy_density_g_cm3", "e_c/c^2 [g/cm^3]", "{:.6e}"),
    ("central_rest_mass_density_g_cm3", "rho_c [g/cm^3]", "{:.6e}"),
    ("central_sound_speed_sq", "c_s^2(centre)", "{:.5f}"),
]


def _format_table(stars, columns=_SEQUENCE_COLUMNS) -> str:
    rows = [[fmt.format(float(getattr(stars, key)[i])) for key, _, fmt in columns] for i in range(len(stars))]
    return aligned([h for _, h, _ in columns], rows)


def write_stars_csv(path: Path, stars, comment: str, columns=_SEQUENCE_COLUMNS) -> None:
    """Write stars as CSV with a commented provenance line and unit-bearing header."""
    with open(path, "w") as fh:
        fh.write(f"# {comment}\n")
        fh.write(",".join(h for _, h, _ in columns) + "\n")
        for i in range(len(stars)):
            fh.write(",".join(repr(float(getattr(stars, k)[i])) for k, _, _ in columns) + "\n")


_JSON_STAR_KEYS = ("mass_msun", "radius_km", "tidal_deformability", "k2", "moment_of_inertia_1e45_g_cm2",
                   "baryon_mass_msun")


def sequence_json(seq) -> dict:
    """The JSON object printed by ``tovforge solve --json``."""
    mm = seq.mass_max
    out = {
        "family": seq.family,
        "parameters": seq.parameters,
        "status": seq.status,
        "message": seq.message,
        "mass_max": {
            "mass_msun": mm.mass_msun if mm else None,
            "radius_km": mm.radius_km if mm else None,
            "central_pressure_dyn_cm2": mm.central_pressure_dyn_cm2 if mm else None,
            "max_sound_speed_sq": mm.max_sound_speed_sq if mm else None,
        },
        "at_mass": [],
        "sequence": {k: getattr(seq.branch, k) for k in _JSON_STAR_KEYS + ("central_pressure_dyn_cm2",)},
    }
    if seq.at_mass is not None:
        out["at_mass"] = [{k: float(getattr(seq.at_mass, k)[i]) for k in _JSON_STAR_KEYS}
                          for i in range(len(seq.at_mass))]
    return jsonable(out)


def solve_cmd(
    family: FamilyArg,
    parameters: ParametersArg = None,
    masses: Annotated[
        Optional[str], typer.Option("--masses", help="Comma-separated masses in Msun to solve exactly.")
    ] = None,
    as_json: Annotated[bool, typer.Option("--json", help="Print one JSON object instead of text.")] = False,
    table: Annotated[
        Optional[Path], typer.Option("--table", help="Write the sequence to this CSV file.", dir_okay=False)
    ] = None,
    profile: Annotated[
        Optional[float], typer.Option("--profile", help="Also print the interior profile of the star of this mass.")
    ] = None,
    stars: Annotated[int, typer.Option("--stars", min=8, max=2000, help="Stars along the stable branch.")] = 100,
):
    """Solve the stable branch of one EOS: M_max, the M-R-Lambda-I sequence, stars at given masses."""
    from .. import solve

    def work():
        eos_obj = make_eos(family, parameters or [])
        qm = parse_float_list(masses, "--masses") if masses else None
        if qm is not None and any(m <= 0 for m in qm):
            raise InputError("--masses must be positive (Msun).")
        if profile is not None and not (profile > 0 and math.isfinite(profile)):
            raise InputError(f"--profile must be a positive mass in Msun. Got {profile}.")
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            seq = solve.solve_sequence(eos_obj, n_stars=stars, masses=qm)
        for w in caught:
            typer.echo(f"warning: {w.message}", err=True)
        prof = None
        if profile is not None and seq.success:
            if profile > seq.mass_max.mass_msun:
                typer.echo(
                    f"warning: --profile {profile:g} Msun exceeds M_max = {seq.mass_max.mass_msun:.4f} Msun; "
                    "no profile.",
                    err=True,
                )
            else:
                prof = solve.solve_star(eos_obj, mass_msun=profile)
        return eos_obj, seq, prof

    eos_obj, seq, prof = run(work)
    if table is not None:
        pars = " ".join(f"{k}={v}" for k, v in seq.parameters.items())
        write_stars_csv(table, seq.branch, f"tovforge {__version__} solve {seq.family} {pars}: stable branch")
    if as_json:
        out = sequence_json(seq)
        if prof is not None:
            out["profile"] = jsonable(_profile_dict(prof))
        typer.echo(json.dumps(out))
        raise typer.Exit(code=0 if seq.success else 1)
    typer.echo(_summary_text(seq))
    if prof is not None:
        typer.echo("")
        typer.echo(f"interior of the {profile:g} Msun star (centre to surface):")
        typer.echo(_profile_text(prof))
    if not seq.success:
        raise typer.Exit(code=1)


def _profile_dict(prof) -> dict:
    return {
        "radius_km": prof.radius_km,
        "mass_msun": prof.mass_msun,
        "pressure_dyn_cm2": prof.pressure_dyn_cm2,
        "energy_density_g_cm3": prof.energy_density_g_cm3,
        "rest_mass_density_g_cm3": prof.rest_mass_density_g_cm3,
        "alpha": prof.alpha,
        "y": prof.y,
    }


def _profile_text(prof) -> str:
    heads = ["r [km]", "m [Msun]", "p [dyn/cm^2]", "e/c^2 [g/cm^3]", "rho [g/cm^3]", "alpha", "y"]
    cols = [prof.radius_km, prof.mass_msun, prof.pressure_dyn_cm2, prof.energy_density_g_cm3,
            prof.rest_mass_density_g_cm3, prof.alpha, prof.y]
    fmts = ["{:.5f}", "{:.6f}", "{:.5e}", "{:.5e}", "{:.5e}", "{:.6f}", "{:.6f}"]
    rows = [[f.format(float(c[i])) for f, c in zip(fmts, cols)] for i in range(len(prof.radius_km))]
    return aligned(heads, rows)


def _summary_text(seq) -> str:
    pars = "  ".join(f"{k}={v:g}" if isinstance(v, float) else f"{k}={v}" for k, v in seq.parameters.items())
    lines = [f"EOS      {seq.family}  {pars}", f"status   {seq.message}"]
    if seq.success:
        mm = seq.mass_max
        causal = "acausal below M_max" if mm.acausal else "causal"
        lines.append(
            f"M_max    {mm.mass_msun:.6f} Msun   R = {mm.radius_km:.4f} km   "
            f"p_c = {mm.central_pressure_dyn_cm2:.4e} dyn/cm^2   max c_s^2 = {mm.max_sound_speed_sq:.4f} ({causal})"
        )
        if math.isfinite(seq.twin_mass_max_msun):
            lines.append(f"twins    a second stable branch reaches {seq.twin_mass_max_msun:.3f} Msun (scan resolution)")
        if seq.at_mass is not None:
            for i in range(len(seq.at_mass)):
                a = seq.at_mass
                if not math.isfinite(a.radius_km[i]):
                    continue
                lines.append(
                    f"M = {a.mass_msun[i]:.4f} Msun   R = {a.radius_km[i]:.4f} km   Lambda = {a.tidal_deformability[i]:.5g}"
                    f"   k2 = {a.k2[i]:.5f}   I = {a.moment_of_inertia_1e45_g_cm2[i]:.5g}e45 g cm^2"
                    f"   M_b = {a.baryon_mass_msun[i]:.5f} Msun"
                )
        lines.append("")
        lines.append(f"stable branch ({len(seq.branch)} stars, increasing central pressure):")
        lines.append(_format_table(seq.branch))
    return "\n".join(lines)
